package batch

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/internal/pathcheck"
	"voxgamma/job"
)

// Watch defaults and names.
const (
	// DefaultSettle is how long every file of a case must stay unchanged
	// (size and modification time) before the case is read.
	DefaultSettle = 10 * time.Second
	// DefaultPoll is the time between two scans of the watched folder.
	DefaultPoll = 2 * time.Second
	// WatchStateFile is the watcher's record of the cases it processed, in
	// its output folder.
	WatchStateFile = ".voxgamma-watch-state.json"
	// FailedDir is the folder, in the watched folder, broken cases are
	// moved into (one folder per case, with an error.txt).
	FailedDir = ".failed"
	// DefaultWatchOut is the output folder, in the watched folder, when
	// none is given.
	DefaultWatchOut = ".voxgamma"
	// WatchStateSchemaVersion is the version of the state file's layout.
	// 2.0: cases are keyed by the content of their files alone; a
	// de-identified state names no file or folder.
	WatchStateSchemaVersion = "2.0"
)

// WatchOptions configure a [Watcher].
type WatchOptions struct {
	// Dir is the export folder watched: case files directly in it (the
	// flat layout) and in its immediate subfolders (one case each).
	Dir string
	// Out is the results folder: Out/<case-key>/ per case and the state
	// file; empty means Dir/.voxgamma.
	Out string
	// Settle is how long every file of a case's folder must be unchanged
	// before the case is read; 0 means DefaultSettle.
	Settle time.Duration
	// Protocol is the protocol file or preset; empty means
	// DefaultProtocol.
	Protocol string
	// Overrides, Outputs and AllowFrameMismatch are as for a batch.
	Overrides          job.Overrides
	Outputs            Outputs
	AllowFrameMismatch bool
	// ReferenceMatch and EvaluatedMatch tell reference from evaluated RT
	// Dose files. Each rule is a glob (path.Match syntax), matched
	// case-insensitively against the file name, or against the
	// SeriesDescription (0008,103E) when written "series:GLOB", the
	// Manufacturer (0008,0070) when "manufacturer:GLOB", the DoseComment
	// (3004,0006) when "comment:GLOB". A dose is a reference when any
	// ReferenceMatch rule matches, evaluated when any EvaluatedMatch rule
	// does. nil means DefaultReferenceMatch, DefaultEvaluatedMatch.
	ReferenceMatch, EvaluatedMatch []string
	// RequireStructures makes a case wait for a structure set in the
	// reference dose's frame of reference.
	RequireStructures bool
	// Log receives one line per case start and finish, and what was moved
	// aside (nil: none).
	Log *slog.Logger
	// Record, when not nil, is called for every case evaluated (pass or
	// fail) with its result, before the case counts as processed: a case
	// whose record fails is tried again at a later poll (and recorded
	// then, idempotently), never lost.
	Record RecordFunc
	// MaxMemory is the memory budget in bytes; 0 means [job.DefaultBudget]. A
	// case estimated to need more (see [job.EstimateBytes]) is not loaded: it
	// is moved aside with the reason.
	MaxMemory int64
	// Deid is the de-identification of the run when Outputs.Deidentify
	// (nil: a random key for this run). Case keys (output folder names)
	// are then keyed tokens, and the state file, statuses and logs hold
	// no file or folder name, date or identifier.
	Deid *deid.Run
}

// WatchedCase is one case a poll finished.
type WatchedCase struct {
	// Key names the case and its output folder: its subfolder's name (see
	// [Watcher] for the keys of other cases), or "for-<hash>" of its frame
	// of reference in the flat layout; a keyed token when de-identified.
	Key string
	// Verdict is "pass", "fail" or "error".
	Verdict string
	// Error says why the case could not be evaluated.
	Error string
	// Output is the case's results folder; MovedTo the folder its files
	// were moved into when broken.
	Output, MovedTo string
	// Seconds is the comparison's wall time.
	Seconds float64
}

// PollReport is what one poll did.
type PollReport struct {
	// Cases finished in this poll.
	Cases []WatchedCase
	// Waiting counts the folders with files not yet settled or cases not
	// yet complete.
	Waiting int
}

// Watcher watches an export folder and runs each complete case once.
// Use [NewWatcher], then [Watcher.Poll] (one scan) or [Watcher.Run].
type Watcher struct {
	opt          WatchOptions
	dir, out     string
	outInfo      os.FileInfo // the results folder, to skip it however it is named
	refRules     []matchRule
	evalRules    []matchRule
	settings     analysis.Settings
	settingsHash string
	protocolName string
	log          *slog.Logger
	obs          map[string]*observation
	state        *watchState
	quick        map[string]string // quick fingerprint → state key
	retryAt      map[string]time.Time
	waitLogged   map[string]string
	// reads counts header and content reads, for tests of idle polls.
	reads int
	// budget is the memory budget in bytes.
	budget int64
	// finished maps the content fingerprint of each case finished into a
	// folder of Out (its status's watch_key) to that folder: a case found
	// after a restart is recognised by content, whatever its folder is
	// called.
	finished map[string]string
	// deid is the run's de-identification (nil: none); scopes holds the
	// identifying values of each folder seen, open while it exists.
	deid   *deid.Run
	scopes map[string]*deid.Scope
}

// NewWatcher checks the options, resolves the protocol and loads the state
// file (a missing one is an empty state).
func NewWatcher(opt WatchOptions) (*Watcher, error) {
	st, err := os.Stat(opt.Dir)
	if err != nil || !st.IsDir() {
		return nil, fmt.Errorf("watch: %s is not a folder", opt.Dir)
	}
	w := &Watcher{opt: opt, obs: map[string]*observation{}, quick: map[string]string{},
		retryAt: map[string]time.Time{}, waitLogged: map[string]string{}, finished: map[string]string{}, scopes: map[string]*deid.Scope{}}
	if opt.Outputs.Deidentify {
		w.deid = opt.Deid
		if w.deid == nil {
			w.deid = deid.NewRun(deid.RandomKey())
		}
		w.opt.Outputs.KeyID = w.deid.Key.ID()
	}
	w.budget = opt.MaxMemory
	if w.budget <= 0 {
		w.budget, _ = job.DefaultBudget()
	}
	if w.dir, err = filepath.Abs(opt.Dir); err != nil {
		return nil, fmt.Errorf("watch: %w", err)
	}
	w.out = opt.Out
	if w.out == "" {
		w.out = filepath.Join(w.dir, DefaultWatchOut)
	}
	if w.out, err = filepath.Abs(w.out); err != nil {
		return nil, fmt.Errorf("watch: %w", err)
	}
	if err := checkWatchOut(w.dir, w.out); err != nil {
		return nil, err
	}
	if w.opt.Settle <= 0 {
		w.opt.Settle = DefaultSettle
	}
	refs, evals := opt.ReferenceMatch, opt.EvaluatedMatch
	if refs == nil {
		refs = DefaultReferenceMatch
	}
	if evals == nil {
		evals = DefaultEvaluatedMatch
	}
	if w.refRules, err = parseRules("--reference-match", refs); err != nil {
		return nil, err
	}
	if w.evalRules, err = parseRules("--evaluated-match", evals); err != nil {
		return nil, err
	}
	w.protocolName = opt.Protocol
	if w.protocolName == "" {
		w.protocolName = DefaultProtocol
	}
	if w.settings, w.settingsHash, err = settingsFor(w.protocolName, opt.Overrides, w.opt.Outputs, opt.AllowFrameMismatch); err != nil {
		return nil, fmt.Errorf("watch: %w", err)
	}
	w.log = opt.Log
	if w.log == nil {
		w.log = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if w.deid != nil {
		w.log = slog.New(deid.LogHandler(w.log.Handler(), w.deid.Scrub))
		w.log.Info("de-identifying", "note", w.deid.Key.Note())
	}
	if err := os.MkdirAll(w.out, 0o755); err != nil {
		return nil, fmt.Errorf("watch: creating %s: %w", w.out, err)
	}
	if w.outInfo, err = os.Stat(w.out); err != nil {
		return nil, fmt.Errorf("watch: %w", err)
	}
	if err := w.loadState(); err != nil {
		return nil, err
	}
	owned := func(string) bool { return true }
	cleaned, err := cleanStale(w.out, owned)
	for _, l := range cleaned {
		w.log.Info(l)
	}
	if err != nil {
		return nil, fmt.Errorf("watch: %w", err)
	}
	w.indexFinished()
	return w, nil
}

// indexFinished records the content fingerprint of every case folder in
// Out that holds the status of an evaluated case.
func (w *Watcher) indexFinished() {
	entries, err := os.ReadDir(w.out)
	if err != nil {
		return
	}
	for _, e := range entries {
		if !e.IsDir() || strings.HasPrefix(e.Name(), ".") {
			continue
		}
		dir := filepath.Join(w.out, e.Name())
		if st, err := ReadStatus(dir); err == nil && st.WatchKey != "" && st.Verdict != VerdictError {
			w.finished[st.WatchKey] = dir
		}
	}
}

// Out is the results folder.
func (w *Watcher) Out() string { return w.out }

// checkWatchOut refuses a results folder that overlaps the watched folder
// dir (both absolute): the watched folder itself (results would be written
// among the cases, and a broken case moved aside with them), a folder
// containing it, a folder inside a case subfolder (moved away with the
// case) or the folder broken cases are moved into. An immediate subfolder
// of dir, like the default dir/.voxgamma, is allowed: the scan skips it.
// Symbolic links are resolved.
func checkWatchOut(dir, out string) error {
	d, o := pathcheck.Resolve(dir), pathcheck.Resolve(out)
	const advice = ": an output folder may never hold, replace or remove an input; give a folder outside the watched one (or leave --out out for DIR/" + DefaultWatchOut + ")"
	switch {
	case o == d:
		return fmt.Errorf("watch: --out %s is the watched folder %s%s", out, dir, advice)
	case pathcheck.Within(d, o):
		return fmt.Errorf("watch: --out %s contains the watched folder %s%s", out, dir, advice)
	case pathcheck.Within(o, d):
		rel, _ := filepath.Rel(d, o)
		if strings.Contains(rel, string(filepath.Separator)) {
			return fmt.Errorf("watch: --out %s is inside the case folder %s of the watched folder%s", out, filepath.Join(dir, strings.SplitN(rel, string(filepath.Separator), 2)[0]), advice)
		}
		if rel == FailedDir {
			return fmt.Errorf("watch: --out %s is the folder broken cases are moved into%s", out, advice)
		}
	}
	return nil
}

// Poll scans the watched folder once and processes every case that is
// complete and settled and was not processed before. A file is settled
// when an earlier scan saw it with the same size and modification time,
// and its last change (seen by a scan, or its modification time when first
// seen) is at least the settle time ago. It reads nothing
// unless a folder changed since it was last handled. It returns the
// context's error when cancelled (the case under way is then abandoned,
// to be processed again later).
func (w *Watcher) Poll(ctx context.Context) (*PollReport, error) {
	rep := &PollReport{}
	units, err := w.scan()
	if err != nil {
		return rep, err
	}
	now := time.Now()
	fps, settled := w.observe(units, now)
	names := make([]string, 0, len(units))
	for u := range units {
		names = append(names, u)
	}
	sort.Strings(names)
	for _, u := range names {
		if ctx.Err() != nil {
			return rep, ctx.Err()
		}
		if len(units[u]) == 0 || w.state.Units[w.unitKey(u)] == w.printKey(fps[u]) {
			continue
		}
		if !settled[u] {
			rep.Waiting++
			continue
		}
		if t, ok := w.retryAt[u]; ok && now.Before(t) {
			rep.Waiting++
			continue
		}
		done, waiting, err := w.handleUnit(ctx, u, units[u])
		rep.Cases = append(rep.Cases, done...)
		if err != nil {
			if ctx.Err() != nil {
				return rep, ctx.Err()
			}
			w.log.Warn("folder to be tried again", "folder", w.unitName(u), "error", w.scrub(u, err.Error()))
			w.retryAt[u] = now.Add(max(w.opt.Settle, time.Minute))
			rep.Waiting++
			continue
		}
		delete(w.retryAt, u)
		if waiting {
			rep.Waiting++
		}
		// A unit whose files were moved aside changes again; otherwise
		// remember it so that an idle folder costs a stat per file only.
		w.state.Units[w.unitKey(u)] = w.printKey(fps[u])
		if err := w.saveState(); err != nil {
			return rep, err
		}
	}
	present := map[string]bool{}
	for u := range units {
		present[w.unitKey(u)] = true
	}
	for k := range w.state.Units {
		if !present[k] {
			delete(w.state.Units, k)
		}
	}
	for u, s := range w.scopes {
		if _, ok := units[u]; !ok {
			s.Close()
			delete(w.scopes, u)
		}
	}
	return rep, nil
}

// Once scans the watched folder, waits pause (a second at most when 0 or
// less) and polls: it processes the cases whose files were unchanged in
// both scans and for the settle time, and returns that poll's report. It
// is for runs from cron or tests; a watcher running all the time uses
// [Watcher.Run].
func (w *Watcher) Once(ctx context.Context, pause time.Duration) (*PollReport, error) {
	if pause <= 0 {
		pause = time.Second
	}
	units, err := w.scan()
	if err != nil {
		return nil, err
	}
	w.observe(units, time.Now())
	select {
	case <-ctx.Done():
		return &PollReport{}, ctx.Err()
	case <-time.After(pause):
	}
	return w.Poll(ctx)
}

// Run polls every poll interval until ctx is done; it returns nil when
// stopped by ctx and an error only when the watched folder cannot be read.
func (w *Watcher) Run(ctx context.Context, poll time.Duration) error {
	if poll <= 0 {
		poll = DefaultPoll
	}
	for {
		if _, err := w.Poll(ctx); err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
		select {
		case <-ctx.Done():
			return nil
		case <-time.After(poll):
		}
	}
}
