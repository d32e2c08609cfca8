package batch

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/dicomio"
	"voxgamma/internal/atomicfile"
	"voxgamma/internal/fault"
	"voxgamma/internal/pathcheck"
	"voxgamma/job"
	"voxgamma/structure"
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

// DefaultReferenceMatch and DefaultEvaluatedMatch are the rules that tell a
// reference dose from an evaluated one when none are given (file names,
// case-insensitive; see [WatchOptions]).
var (
	// DefaultReferenceMatch: names starting "ref" or "RD_plan", ending
	// "_ref.dcm" or containing "reference".
	DefaultReferenceMatch = []string{"ref*", "*_ref.dcm", "*reference*", "rd_plan*"}
	// DefaultEvaluatedMatch: names starting "eval" or "RD_mc", ending
	// "_eval.dcm" or containing "evaluated" or "recalc".
	DefaultEvaluatedMatch = []string{"eval*", "*_eval.dcm", "*evaluated*", "*recalc*", "rd_mc*"}
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

// matchRule is one reference or evaluated rule.
type matchRule struct {
	field, glob string
}

func parseRules(flag string, rules []string) ([]matchRule, error) {
	var out []matchRule
	for _, r := range rules {
		m := matchRule{field: "name", glob: strings.ToLower(strings.TrimSpace(r))}
		for _, f := range []string{"series", "manufacturer", "comment"} {
			if rest, ok := strings.CutPrefix(m.glob, f+":"); ok {
				m.field, m.glob = f, rest
			}
		}
		if _, err := path.Match(m.glob, ""); err != nil || m.glob == "" {
			return nil, fmt.Errorf("%s %q: not a valid glob", flag, r)
		}
		out = append(out, m)
	}
	return out, nil
}

func (m matchRule) matches(f *watchFile) bool {
	v := f.name
	switch m.field {
	case "series":
		v = f.dose.SeriesDescription
	case "manufacturer":
		v = f.dose.Manufacturer
	case "comment":
		v = f.dose.DoseComment
	}
	ok, _ := path.Match(m.glob, strings.ToLower(v))
	return ok
}

func anyMatch(rules []matchRule, f *watchFile) bool {
	for _, r := range rules {
		if r.matches(f) {
			return true
		}
	}
	return false
}

// File kinds.
const (
	kindOther  = iota // not DICOM, or another modality: ignored
	kindDose          // RT Dose
	kindStruct        // RT Structure Set
	kindBroken        // an RT Dose or RT Structure Set that cannot be read
	kindPlan          // RT Plan
)

// watchFile is one file of the watched folder with what its header says.
type watchFile struct {
	path, rel, name string
	size            int64
	mtime           time.Time
	kind            int
	reason          string
	dose            *dicomio.DoseInfo
	set             *structure.Set
	plan            *dicomio.Plan
	frame           string
	sha             string
}

// observation is what the watcher knows of a file between polls.
type observation struct {
	size    int64
	mtime   time.Time
	changed time.Time // when it was last seen to change
	// confirmed is set once a later scan found the file unchanged: a file
	// seen once is never read, whatever its modification time says (a copy
	// may set an old time before its data have arrived).
	confirmed bool
	header    *watchFile
}

// stateEntry records one case the watcher finished.
type stateEntry struct {
	// Key is the case key, Folder the unit it came from ("." for the
	// watched folder itself).
	Key    string `json:"case_key"`
	Folder string `json:"folder"`
	// Files are the case's files as they were read.
	Files []stateFile `json:"files"`
	// Quick is the fingerprint of the files' paths, sizes and modification
	// times alone, to recognise the case without reading it.
	Quick     string `json:"quick"`
	Verdict   string `json:"verdict"`
	Error     string `json:"error,omitempty"`
	Output    string `json:"output,omitempty"`
	MovedTo   string `json:"moved_to,omitempty"`
	Processed string `json:"processed"`
}

type stateFile struct {
	Path    string `json:"path"`
	Size    int64  `json:"size"`
	MtimeNS int64  `json:"mtime_ns"`
	SHA256  string `json:"sha256"`
}

// watchState is the state file: every case finished, keyed by the
// fingerprint of its files (relative paths, sizes, modification times and
// SHA-256), and the fingerprint of each folder as last handled.
type watchState struct {
	SchemaVersion string                 `json:"schema_version"`
	Cases         map[string]*stateEntry `json:"cases"`
	Units         map[string]string      `json:"folders"`
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

// scope returns the de-identification scope of a folder of the watched
// folder (nil without de-identification), made on first use: the folder's
// path and name stand for its case key, each file's for [deid.FileRemoved].
func (w *Watcher) scope(unit string, paths []string) *deid.Scope {
	if w.deid == nil {
		return nil
	}
	s := w.scopes[unit]
	if s == nil {
		// Kept for as long as the folder exists, but part of the run's
		// own scrubbing only while the folder is handled (handleUnit):
		// a folder of many cases costs each log line one scope.
		s = w.deid.Scope()
		s.Close()
		w.scopes[unit] = s
		if unit != "." {
			key := w.subfolderKey(unit)
			s.Path(filepath.Join(w.dir, unit), key)
			s.Text(unit, key)
		}
	}
	for _, p := range paths {
		s.File(p, deid.FileRemoved)
		s.Text(w.rel(p), deid.FileRemoved)
	}
	return s
}

// scrub de-identifies a message about a folder of the watched folder.
func (w *Watcher) scrub(unit, msg string) string {
	if w.deid == nil {
		return msg
	}
	return w.scope(unit, nil).Scrub(msg)
}

// unitName is a folder of the watched folder as logs and the state show it:
// its name, or its case key when de-identified.
func (w *Watcher) unitName(unit string) string {
	if w.deid == nil || unit == "." {
		return unit
	}
	return w.subfolderKey(unit)
}

// subfolderKey is the case key (and output folder name) of a subfolder:
// its name when that is a valid id (letters, digits, '.', '_', '-') that
// does not start with a prefix the other keys use ("for-", "file-", "x-"),
// else "x-", the name made filesystem-safe and 16 hex digits of
// its SHA-256; when de-identified, "case-" and a keyed token of the name.
// The prefixes keep the kinds of keys apart, so no folder name can take
// another case's output folder.
func (w *Watcher) subfolderKey(unit string) string {
	if w.deid != nil {
		return "case-" + w.deid.Key.Token(deid.KindPath, unit)
	}
	return safeKey(unit)
}

// flatKey is the case key of a frame of reference in the flat layout:
// "for-" and 12 hex digits of its SHA-256 (a keyed token when
// de-identified).
func (w *Watcher) flatKey(frame string) string {
	if w.deid != nil {
		return "for-" + w.deid.Key.Token(deid.KindFrame, frame)[:12]
	}
	return frameKey(frame)
}

// brokenKey is the case key of an unreadable file in the flat layout:
// "file-" and the key its stem would have as a subfolder.
func (w *Watcher) brokenKey(stem string) string {
	if w.deid != nil {
		return "file-" + w.deid.Key.Token(deid.KindPath, stem)
	}
	return "file-" + safeKey(stem)
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

func (w *Watcher) statePath() string { return filepath.Join(w.out, WatchStateFile) }

func (w *Watcher) loadState() error {
	w.state = &watchState{SchemaVersion: WatchStateSchemaVersion, Cases: map[string]*stateEntry{}, Units: map[string]string{}}
	data, err := os.ReadFile(w.statePath())
	if os.IsNotExist(err) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("watch: reading %s: %w", w.statePath(), err)
	}
	if err := json.Unmarshal(data, w.state); err != nil {
		return fmt.Errorf("watch: reading %s: %w (move it away to start afresh: every case present would be processed again)", w.statePath(), err)
	}
	if w.state.Cases == nil {
		w.state.Cases = map[string]*stateEntry{}
	}
	if w.state.Units == nil {
		w.state.Units = map[string]string{}
	}
	for k, e := range w.state.Cases {
		if e.Quick != "" {
			w.quick[e.Quick] = k
		}
	}
	return nil
}

func (w *Watcher) saveState() error {
	data, err := json.MarshalIndent(w.state, "", "  ")
	if err != nil {
		return fmt.Errorf("watch: encoding the state: %w", err)
	}
	return atomicfile.WriteBytes(w.statePath(), append(data, '\n'))
}

// ignoredName reports whether a file or folder name in the watched folder
// is never part of a case: hidden names (the watcher's own .failed and
// .voxgamma, partial uploads such as rsync's) and names of files still
// being transferred (*.part, *.partial, *.tmp, *.crdownload).
func ignoredName(name string) bool {
	if strings.HasPrefix(name, ".") {
		return true
	}
	l := strings.ToLower(name)
	for _, s := range []string{".part", ".partial", ".tmp", ".crdownload"} {
		if strings.HasSuffix(l, s) {
			return true
		}
	}
	return false
}

// scan lists the units of the watched folder: "." for the files directly
// in it, and each immediate subfolder's name for the files in it. It
// stats only.
func (w *Watcher) scan() (map[string][]string, error) {
	units := map[string][]string{}
	entries, err := os.ReadDir(w.dir)
	if err != nil {
		return nil, fmt.Errorf("watch: listing %s: %w", w.dir, err)
	}
	for _, e := range entries {
		if ignoredName(e.Name()) {
			continue
		}
		p := filepath.Join(w.dir, e.Name())
		switch {
		case e.Type().IsRegular():
			units["."] = append(units["."], p)
		case e.IsDir():
			if st, err := os.Stat(p); err == nil && os.SameFile(st, w.outInfo) {
				continue
			}
			sub, err := os.ReadDir(p)
			if err != nil {
				w.log.Warn("cannot list a subfolder", "folder", w.unitName(e.Name()), "error", w.scrub(e.Name(), err.Error()))
				continue
			}
			for _, s := range sub {
				if !ignoredName(s.Name()) && s.Type().IsRegular() {
					units[e.Name()] = append(units[e.Name()], filepath.Join(p, s.Name()))
				}
			}
			if _, ok := units[e.Name()]; !ok {
				units[e.Name()] = nil
			}
		}
	}
	return units, nil
}

// observe stats the files and updates when each last changed; it returns
// the units' quick fingerprints and whether every file of each has been
// unchanged for the settle time.
func (w *Watcher) observe(units map[string][]string, now time.Time) (fps map[string]string, settled map[string]bool) {
	fps, settled = map[string]string{}, map[string]bool{}
	seen := map[string]bool{}
	for u, files := range units {
		h := sha256.New()
		ok := true
		sort.Strings(files)
		for _, p := range files {
			st, err := os.Lstat(p)
			if err != nil {
				ok = false // vanished between list and stat: look again later
				continue
			}
			seen[p] = true
			o := w.obs[p]
			if o == nil {
				// First sight: trust the modification time, so that files
				// already at rest when the watcher starts are not held up.
				changed := st.ModTime()
				if changed.After(now) {
					changed = now
				}
				o = &observation{size: st.Size(), mtime: st.ModTime(), changed: changed}
				w.obs[p] = o
			} else if o.size != st.Size() || !o.mtime.Equal(st.ModTime()) {
				o.size, o.mtime, o.changed, o.header, o.confirmed = st.Size(), st.ModTime(), now, nil, false
			} else {
				o.confirmed = true
			}
			if !o.confirmed || now.Sub(o.changed) < w.opt.Settle {
				ok = false
			}
			fmt.Fprintf(h, "%s\x00%d\x00%d\n", w.rel(p), o.size, o.mtime.UnixNano())
		}
		fps[u] = hex.EncodeToString(h.Sum(nil))
		settled[u] = ok
	}
	for p := range w.obs {
		if !seen[p] {
			delete(w.obs, p)
		}
	}
	return fps, settled
}

func (w *Watcher) rel(p string) string {
	if r, err := filepath.Rel(w.dir, p); err == nil {
		return filepath.ToSlash(r)
	}
	return p
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

// unitKey is how the state file names a folder of the watched folder: its
// name, or a keyed token of it when de-identified.
func (w *Watcher) unitKey(unit string) string {
	if w.deid == nil {
		return unit
	}
	return "folder-" + w.deid.Key.Token(deid.KindPath, unit)
}

// printKey is how the state file records a fingerprint of file names,
// sizes and times: as it is, or keyed when de-identified (an unkeyed hash
// of a guessable name could be confirmed by anyone).
func (w *Watcher) printKey(fp string) string {
	if w.deid == nil || fp == "" {
		return fp
	}
	return w.deid.Key.Token("fingerprint", fp)
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

// classify reads a file's header (once per size and modification time).
func (w *Watcher) classify(p string) *watchFile {
	o := w.obs[p]
	if o != nil && o.header != nil {
		return o.header
	}
	f := &watchFile{path: p, rel: w.rel(p), name: filepath.Base(p)}
	if o != nil {
		f.size, f.mtime = o.size, o.mtime
	}
	w.reads++
	info, err := dicomio.ReadDoseInfo(p)
	switch {
	case err == nil && info.DisagreementMap() != "":
		// A gamma or difference map (its own, or any DoseType ERROR) is
		// never a dose of a case.
		f.kind, f.reason = kindOther, info.DisagreementMap()
	case err == nil:
		f.kind, f.dose, f.frame = kindDose, info, info.FrameOfReferenceUID
	case errors.Is(err, dicomio.ErrNotDICOM):
		f.kind, f.reason = kindOther, "not a DICOM file"
	default:
		var me *dicomio.ModalityError
		switch {
		case !errors.As(err, &me):
			f.kind, f.reason = kindBroken, "unreadable RT Dose: "+err.Error()
		case me.Got == "RTSTRUCT":
			set, err := dicomio.ReadStructureSet(p)
			if err != nil {
				f.kind, f.reason = kindBroken, "unreadable RT Structure Set: "+err.Error()
			} else {
				f.kind, f.frame, f.set = kindStruct, set.FrameOfReferenceUID, set
			}
		case me.Got == "RTPLAN":
			// The case's RT Plan: its beams, fractions and prescription
			// (an unreadable one is set aside: a plan is context unless an
			// option asks for its figures, which then says it is missing).
			plan, err := dicomio.ReadPlan(p)
			if err != nil {
				f.kind, f.reason = kindOther, "unreadable RT Plan: "+err.Error()
			} else {
				f.kind, f.frame, f.plan = kindPlan, plan.FrameOfReferenceUID, plan
			}
		case me.Got == "":
			f.kind, f.reason = kindOther, "DICOM file without a Modality"
		default:
			f.kind, f.reason = kindOther, "modality "+me.Got
		}
	}
	if o != nil {
		o.header = f
	}
	return f
}

// reservedKeyPrefixes start the keys of cases that are not named after a
// subfolder (flat layout, broken files, altered names): a subfolder named
// with one of them gets an altered key, so that it can never take the
// output folder of another case. (De-identified runs name every case by a
// keyed token, with the prefixes case-, for- and file-.)
var reservedKeyPrefixes = []string{"for-", "file-", "x-"}

// safeKey turns a folder name into a case key usable as a folder name: the
// name itself when it is a valid id (see [ValidID]) that starts with no
// reserved prefix, else "x-", the name with every character but ASCII
// letters, digits, '.', '_' and '-' made '_' (at most 60 of them), "-" and
// 16 hex digits of the name's SHA-256.
func safeKey(name string) string {
	keep := ValidID(name) == nil
	for _, p := range reservedKeyPrefixes {
		if len(name) >= len(p) && strings.EqualFold(name[:len(p)], p) {
			keep = false
		}
	}
	if keep {
		return name
	}
	var b strings.Builder
	for _, r := range name {
		if r < 128 && (r == '.' || r == '_' || r == '-' || r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z') {
			b.WriteRune(r)
		} else {
			b.WriteByte('_')
		}
	}
	k := b.String()
	if len(k) > 60 {
		k = k[:60]
	}
	sum := sha256.Sum256([]byte(name))
	return "x-" + k + "-" + hex.EncodeToString(sum[:8])
}

// frameKey is the case key of a frame of reference in the flat layout.
func frameKey(frame string) string {
	sum := sha256.Sum256([]byte(frame))
	return "for-" + hex.EncodeToString(sum[:6])
}

// watchCase is a group of files that may be a case.
type watchCase struct {
	key, unit string
	files     []*watchFile // DICOM doses and structure sets
	broken    []*watchFile
	whole     string // the subfolder to move aside (subfolder layout)
}

// handleUnit reads the headers of a settled folder, forms its cases and
// processes each. waiting is true when a case is not complete yet.
func (w *Watcher) handleUnit(ctx context.Context, unit string, paths []string) (done []WatchedCase, waiting bool, err error) {
	sc := w.scope(unit, paths)
	if sc != nil {
		sc.Activate()
		defer sc.Close()
	}
	var files []*watchFile
	for _, p := range paths {
		f := w.classify(p)
		if sc != nil {
			sc.Dose(f.dose)
			sc.Structures(f.set)
			if f.plan != nil {
				sc.Dose(analysis.PlanSeen(f.plan))
			}
			sc.UID(f.frame)
		}
		files = append(files, f)
	}
	var cases []*watchCase
	if unit == "." {
		groups := map[string]*watchCase{}
		planOf := map[string]string{} // plan SOP instance → frame of the doses naming it
		for _, f := range files {
			if f.kind == kindDose && f.dose.ReferencedRTPlanUID != "" {
				planOf[f.dose.ReferencedRTPlanUID] = f.frame
			}
		}
		for _, f := range files {
			frame := f.frame
			switch f.kind {
			case kindBroken:
				stem := strings.TrimSuffix(f.name, filepath.Ext(f.name))
				cases = append(cases, &watchCase{key: w.brokenKey(stem), unit: unit, broken: []*watchFile{f}})
				continue
			case kindPlan:
				// A plan goes with the doses that name it (the Frame of
				// Reference module is optional in an RT Plan).
				if fr, ok := planOf[f.plan.SOPInstanceUID]; ok {
					frame = fr
				}
			case kindDose, kindStruct:
			default:
				continue
			}
			g := groups[frame]
			if g == nil {
				g = &watchCase{key: w.flatKey(frame), unit: unit}
				groups[frame] = g
			}
			g.files = append(g.files, f)
		}
		for _, g := range groups {
			cases = append(cases, g)
		}
	} else {
		c := &watchCase{key: w.subfolderKey(unit), unit: unit, whole: filepath.Join(w.dir, unit)}
		for _, f := range files {
			switch f.kind {
			case kindBroken:
				c.broken = append(c.broken, f)
			case kindDose, kindStruct, kindPlan:
				c.files = append(c.files, f)
			}
		}
		if len(c.files)+len(c.broken) > 0 {
			cases = append(cases, c)
		}
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].key < cases[j].key })
	for _, c := range cases {
		wc, wait, err := w.handleCase(ctx, c)
		if err != nil {
			return done, waiting, err
		}
		waiting = waiting || wait
		if wc != nil {
			done = append(done, *wc)
		}
	}
	return done, waiting, nil
}

// quickPrint fingerprints files by relative path, size and modification
// time: it recognises a case already handled without reading its files.
func quickPrint(files []*watchFile) string {
	h := sha256.New()
	for _, f := range files {
		fmt.Fprintf(h, "%s\x00%d\x00%d\n", f.rel, f.size, f.mtime.UnixNano())
	}
	return hex.EncodeToString(h.Sum(nil))
}

// contentPrint fingerprints a case by the content of its files alone: the
// SHA-256 of each, sorted. A case is the same case whatever its files and
// folder are called or when they were copied, so resume never depends on
// paths (which de-identified records do not hold).
func contentPrint(files []*watchFile) string {
	sums := make([]string, 0, len(files))
	for _, f := range files {
		sums = append(sums, f.sha)
	}
	sort.Strings(sums)
	h := sha256.New()
	fmt.Fprintf(h, "voxgamma-watch-case/2\n")
	for _, x := range sums {
		fmt.Fprintf(h, "%s\n", x)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// handleCase checks one case and processes it when complete: it returns
// the finished case (nil when it waits or was done before), whether it
// waits, and an error for a failure to be tried again later.
func (w *Watcher) handleCase(ctx context.Context, c *watchCase) (*WatchedCase, bool, error) {
	fault.Point(fault.WatchCase)
	all := append(append([]*watchFile{}, c.files...), c.broken...)
	sort.Slice(all, func(i, j int) bool { return all[i].rel < all[j].rel })
	quick := w.printKey(quickPrint(all))
	if k, ok := w.quick[quick]; ok && w.state.Cases[k] != nil {
		return nil, false, nil
	}
	scrub := func(msg string) string { return w.scrub(c.unit, msg) }
	if len(c.broken) > 0 {
		var why []string
		for _, f := range c.broken {
			why = append(why, f.rel+": "+f.reason)
		}
		return w.moveAside(c, all, quick, "", scrub(strings.Join(why, "; ")))
	}
	for _, f := range all {
		w.reads++
		sum, err := FileSHA256(f.path)
		if err != nil {
			return nil, false, fmt.Errorf("case %s: %w", c.key, err)
		}
		f.sha = sum
	}
	full := contentPrint(all)
	if e := w.state.Cases[full]; e != nil {
		w.quick[quick] = full
		w.log.Info("case already processed (same files)", "case", c.key, "as", e.Key, "verdict", e.Verdict)
		return nil, false, nil
	}

	// The same content under two names is one file: the first name (in
	// path order) is used, the others are noted.
	bySHA := map[string][]*watchFile{}
	var order []string
	for _, f := range all {
		if bySHA[f.sha] == nil {
			order = append(order, f.sha)
		}
		bySHA[f.sha] = append(bySHA[f.sha], f)
	}
	var refs, evals, sets, plans []*watchFile
	var notes []string
	for _, sum := range order {
		same := bySHA[sum]
		f := same[0]
		for _, d := range same[1:] {
			notes = append(notes, fmt.Sprintf("%s has the same content as %s: used once", d.rel, f.rel))
		}
		if f.kind == kindStruct {
			sets = append(sets, f)
			continue
		}
		if f.kind == kindPlan {
			plans = append(plans, f)
			continue
		}
		isRef, isEval := false, false
		for _, d := range same {
			isRef = isRef || anyMatch(w.refRules, d)
			isEval = isEval || anyMatch(w.evalRules, d)
		}
		switch {
		case isRef && isEval:
			var names []string
			for _, d := range same {
				names = append(names, d.rel)
			}
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%s matches both the reference and the evaluated rules: cannot tell which dose it is", strings.Join(names, " = "))))
		case isRef:
			refs = append(refs, f)
		case isEval:
			evals = append(evals, f)
		default:
			notes = append(notes, fmt.Sprintf("%s matches neither the reference nor the evaluated rules: ignored", f.rel))
		}
	}
	names := func(fs []*watchFile) string {
		var n []string
		for _, f := range fs {
			n = append(n, f.rel)
		}
		return strings.Join(n, ", ")
	}
	switch {
	case len(refs) > 1 && !partsOfOne(refs):
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d reference doses (%s): one case needs exactly one (put each case in its own subfolder)", len(refs), names(refs))))
	case len(evals) > 1 && !partsOfOne(evals):
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d evaluated doses (%s): one case needs exactly one (put each case in its own subfolder)", len(evals), names(evals))))
	case len(sets) > 1:
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d structure sets (%s): one case needs at most one", len(sets), names(sets))))
	}
	var missing []string
	if len(refs) == 0 {
		missing = append(missing, "a reference dose")
	}
	if len(evals) == 0 {
		missing = append(missing, "an evaluated dose")
	}
	if len(sets) == 0 && w.opt.RequireStructures {
		missing = append(missing, "a structure set")
	}
	plan := casePlan(plans, refs, &notes)
	if plan != nil && len(missing) == 0 {
		// Beam doses arriving one by one: a set that lacks a treatment
		// beam of the plan waits for it (any other fault is the
		// comparison's to report).
		for _, r := range []struct {
			role  string
			files []*watchFile
		}{{"the reference", refs}, {"the evaluated dose", evals}} {
			if len(r.files) < 2 {
				continue
			}
			var paths []string
			for _, f := range r.files {
				paths = append(paths, f.path)
			}
			set, err := dicomio.ReadDoseSet(paths)
			if err != nil {
				continue
			}
			var se *dicomio.DoseSetError
			if _, err := set.CheckPlan(plan.plan); errors.As(err, &se) && len(se.MissingBeams) > 0 {
				missing = append(missing, fmt.Sprintf("beams %s of %s (RT Plan %s)", dicomio.FormatNumbers(se.MissingBeams), r.role, plan.rel))
			}
		}
	}
	if len(missing) > 0 {
		msg := "waits for " + strings.Join(missing, " and ")
		if w.waitLogged[c.key] != quick {
			w.waitLogged[c.key] = quick
			w.log.Info("case incomplete", "case", c.key, "folder", w.unitName(c.unit), "status", msg, "files", scrub(names(all)))
		}
		return nil, true, nil
	}
	ref, eval := refs[0], evals[0]
	if sc := w.scope(c.unit, nil); sc != nil {
		// The files' roles stand for their names from here on.
		for _, f := range refs {
			sc.Path(f.path, "reference")
			sc.Text(f.rel, "reference")
		}
		for _, f := range evals {
			sc.Path(f.path, "evaluated")
			sc.Text(f.rel, "evaluated")
		}
		if len(sets) == 1 {
			sc.Path(sets[0].path, "structures")
			sc.Text(sets[0].rel, "structures")
		}
		if plan != nil {
			sc.Path(plan.path, "plan")
			sc.Text(plan.rel, "plan")
		}
	}
	if !w.opt.AllowFrameMismatch {
		if ref.frame != eval.frame {
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("the reference dose %s (frame of reference %s) and the evaluated dose %s (%s) are in different frames of reference",
				ref.rel, orNone(ref.frame), eval.rel, orNone(eval.frame))))
		}
		if len(sets) == 1 && sets[0].frame != ref.frame {
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("the structure set %s (frame of reference %s) is not in the reference dose %s's frame of reference (%s)",
				sets[0].rel, orNone(sets[0].frame), ref.rel, orNone(ref.frame))))
		}
	}
	cs := Case{ID: c.key}
	var inputs []InputHash
	for _, r := range []struct {
		role  string
		files []*watchFile
		one   *string
		all   *[]string
	}{{"reference", refs, &cs.Reference, &cs.ReferenceFiles}, {"evaluated", evals, &cs.Evaluated, &cs.EvaluatedFiles}} {
		// Several doses of one role are the parts of the dose (beams,
		// fraction groups), summed: the comparison checks that they
		// belong together.
		for _, f := range r.files {
			inputs = append(inputs, InputHash{Role: r.role, Path: f.path, SHA256: f.sha})
			*r.all = append(*r.all, f.path)
		}
		if len(r.files) == 1 {
			*r.one, *r.all = r.files[0].path, nil
		}
	}
	if len(sets) == 1 && !w.settings.Choices.NoStructures {
		cs.Structures = sets[0].path
		inputs = append(inputs, InputHash{Role: "structures", Path: sets[0].path, SHA256: sets[0].sha})
	}
	if plan != nil {
		cs.Plan = plan.path
		inputs = append(inputs, InputHash{Role: "plan", Path: plan.path, SHA256: plan.sha})
	}
	final := filepath.Join(w.out, c.key)
	// Finished before the state was saved (a stop in between, even a
	// kill, or a record that failed): found by content in whichever folder
	// holds it, recorded, and reported now with its verdict.
	if dir, ok := w.finished[full]; ok {
		if prev, err := ReadStatus(dir); err == nil && prev.WatchKey == full && prev.SettingsSHA256 == w.settingsHash && prev.Verdict != VerdictError {
			if w.opt.Record != nil {
				if _, err := recordCase(ctx, w.opt.Record, cs, dir); err != nil {
					return nil, false, err
				}
			}
			w.record(full, quick, c, all, prev.Verdict, "", dir, "")
			if err := w.saveState(); err != nil {
				return nil, false, err
			}
			w.log.Info("case finished", "case", c.key, "verdict", prev.Verdict, "seconds", round3(prev.Seconds), "output", dir,
				"note", "computed earlier (before the watcher stopped, or before a record that failed); recorded now")
			return &WatchedCase{Key: c.key, Verdict: prev.Verdict, Output: dir, Seconds: prev.Seconds}, false, nil
		}
	}
	prev, _ := ReadStatus(final)
	for _, n := range notes {
		w.log.Info("case note", "case", c.key, "note", scrub(n))
	}
	need, err := EstimateCase(cs)
	if err != nil {
		return w.moveAside(c, all, quick, full, scrub(caseMessage(c.key, err)))
	}
	if need > w.budget {
		return w.moveAside(c, all, quick, full, fmt.Sprintf("needs about %s of memory (estimated from its dose grids), more than the memory budget of %s: raise --max-memory (or run it on a larger machine) and put the files back",
			job.FormatBytes(need), job.FormatBytes(w.budget)))
	}
	w.log.Info("case started", "case", c.key, "reference", scrub(ref.rel), "evaluated", scrub(eval.rel), "structures", scrub(cs.Structures),
		"memory_estimate", job.FormatBytes(need))
	work := caseWork{c: cs, protocolName: w.protocolName, settings: w.settings, settingsHash: w.settingsHash,
		outs: w.opt.Outputs, allowFM: w.opt.AllowFrameMismatch, watchKey: full, deid: w.deid, scope: w.scope(c.unit, nil)}
	st, caseErr, err := compute(ctx, w.out, work, inputs, prev)
	if err != nil {
		return nil, false, errors.New(scrub(err.Error()))
	}
	if caseErr != nil && (errors.Is(caseErr, analysis.ErrBadInput) || errors.Is(caseErr, dicomio.ErrInvalid) ||
		errors.Is(caseErr, dicomio.ErrUnsupported) || errors.Is(caseErr, dicomio.ErrNotDICOM)) {
		wc, wait, err := w.moveAside(c, all, quick, full, scrub(caseMessage(c.key, caseErr)))
		if wc != nil {
			wc.Output, wc.Seconds = final, st.Seconds
		}
		return wc, wait, err
	}
	if caseErr != nil {
		// Not the inputs' fault (an output that could not be written, an
		// internal error): the results folder says so; try again later.
		return nil, false, fmt.Errorf("case %s: %s", c.key, scrub(caseErr.Error()))
	}
	w.finished[full] = final
	if w.opt.Record != nil {
		if _, err := recordCase(ctx, w.opt.Record, cs, final); err != nil {
			return nil, false, fmt.Errorf("%w (the results are in %s; it is recorded at a later poll)", err, final)
		}
	}
	w.record(full, quick, c, all, st.Verdict, "", final, "")
	if err := w.saveState(); err != nil {
		return nil, false, err
	}
	w.log.Info("case finished", "case", c.key, "verdict", st.Verdict, "seconds", round3(st.Seconds), "output", final)
	return &WatchedCase{Key: c.key, Verdict: st.Verdict, Output: final, Seconds: st.Seconds}, false, nil
}

// casePlan picks a case's RT Plan: its only one, or of several the one the
// reference dose names (a note says when none can be told).
func casePlan(plans, refs []*watchFile, notes *[]string) *watchFile {
	switch {
	case len(plans) == 1:
		return plans[0]
	case len(plans) == 0:
		return nil
	}
	var named []*watchFile
	for _, p := range plans {
		for _, r := range refs {
			if r.dose.ReferencedRTPlanUID != "" && r.dose.ReferencedRTPlanUID == p.plan.SOPInstanceUID {
				named = append(named, p)
				break
			}
		}
	}
	if len(named) == 1 {
		return named[0]
	}
	*notes = append(*notes, fmt.Sprintf("%d RT Plans and the reference dose names none of them (or several): no plan used", len(plans)))
	return nil
}

// partsOfOne reports whether several doses of one role are all parts of a
// dose (DoseSummationType BEAM, FRACTION or their sessions), to be summed,
// rather than whole doses of which a case takes one.
func partsOfOne(fs []*watchFile) bool {
	for _, f := range fs {
		switch f.dose.DoseSummationType {
		case "BEAM", "BEAM_SESSION", "FRACTION", "FRACTION_SESSION":
		default:
			return false
		}
	}
	return true
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

// record adds a finished case to the state. De-identified, the entry
// names no file and no folder and holds no date: the case key and the
// content hashes identify it.
func (w *Watcher) record(full, quick string, c *watchCase, files []*watchFile, verdict, errMsg, output, movedTo string) {
	e := &stateEntry{Key: c.key, Folder: w.unitName(c.unit), Quick: quick, Verdict: verdict, Error: errMsg, Output: output, MovedTo: movedTo,
		Processed: time.Now().UTC().Format(time.RFC3339), Files: []stateFile{}}
	if w.deid != nil {
		e.Processed = ""
	}
	for _, f := range files {
		sf := stateFile{Path: f.rel, Size: f.size, MtimeNS: f.mtime.UnixNano(), SHA256: f.sha}
		if w.deid != nil {
			sf.Path, sf.MtimeNS = "", 0
		}
		e.Files = append(e.Files, sf)
	}
	if full == "" {
		full = "quick:" + quick
	}
	w.state.Cases[full] = e
	w.quick[quick] = full
}

// moveAside moves a broken case's files (its whole subfolder in the
// subfolder layout) into Dir/.failed/<key>/ with an error.txt saying why,
// and records the case.
func (w *Watcher) moveAside(c *watchCase, files []*watchFile, quick, full, why string) (*WatchedCase, bool, error) {
	failed := filepath.Join(w.dir, FailedDir)
	if err := os.MkdirAll(failed, 0o755); err != nil {
		return nil, false, fmt.Errorf("case %s: creating %s: %w", c.key, failed, err)
	}
	dest := filepath.Join(failed, c.key)
	for n := 2; ; n++ {
		if _, err := os.Lstat(dest); os.IsNotExist(err) {
			break
		}
		dest = filepath.Join(failed, fmt.Sprintf("%s-%d", c.key, n))
	}
	if c.whole != "" {
		if err := os.Rename(c.whole, dest); err != nil {
			return nil, false, fmt.Errorf("case %s: moving %s to %s: %s", c.key, w.unitName(c.unit), dest, w.scrub(c.unit, err.Error()))
		}
	} else {
		if err := os.Mkdir(dest, 0o755); err != nil {
			return nil, false, fmt.Errorf("case %s: %w", c.key, err)
		}
		for _, f := range files {
			if err := os.Rename(f.path, filepath.Join(dest, f.name)); err != nil {
				return nil, false, fmt.Errorf("case %s: moving a file to %s: %s", c.key, dest, w.scrub(c.unit, err.Error()))
			}
		}
	}
	var b strings.Builder
	when := " " + time.Now().UTC().Format(time.RFC3339)
	if w.deid != nil {
		when = ""
	}
	fmt.Fprintf(&b, "voxgamma watch could not evaluate case %s (moved here%s).\n\nerror: %s\n\nfiles:\n", c.key, when, why)
	for _, f := range files {
		fmt.Fprintf(&b, "  %s (%d bytes)\n", w.scrub(c.unit, f.rel), f.size)
	}
	b.WriteString("\nFix the files and put them back into the watched folder (as a new subfolder) to have the case processed.\n")
	if err := atomicfile.WriteBytes(filepath.Join(dest, "error.txt"), []byte(b.String())); err != nil {
		return nil, false, fmt.Errorf("case %s: %w", c.key, err)
	}
	w.record(full, quick, c, files, VerdictError, why, "", dest)
	if err := w.saveState(); err != nil {
		return nil, false, err
	}
	w.log.Warn("case moved aside", "case", c.key, "verdict", VerdictError, "error", why, "moved_to", dest)
	return &WatchedCase{Key: c.key, Verdict: VerdictError, Error: why, MovedTo: dest}, false, nil
}
