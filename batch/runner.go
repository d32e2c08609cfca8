package batch

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"

	"golang.org/x/sync/semaphore"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/internal/fault"
	"voxgamma/internal/pathcheck"
	"voxgamma/job"
	"voxgamma/result"
)

// DefaultProtocol is the protocol of cases that name none.
const DefaultProtocol = "tg218"

// Output file names in a case folder.
const (
	// ResultJSON is the result document (always written).
	ResultJSON = "result.json"
	// ResultCSV is the per-ROI table (always written).
	ResultCSV = "result.csv"
	// GammaMapFile is the Γ map as RT Dose (with Outputs.GammaMap).
	GammaMapFile = "gamma.dcm"
	// DifferenceFile is the dose difference map as RT Dose (with
	// Outputs.DifferenceMap).
	DifferenceFile = "difference.dcm"
	// ReportFile is the review page (with Outputs.Report).
	ReportFile = "report.html"
	// ReportPDFFile is the review as a PDF (with Outputs.ReportPDF).
	ReportPDFFile = "report.pdf"
)

// Outputs are the optional outputs of every case; result.json and
// result.csv are always written.
type Outputs struct {
	// GammaMap writes gamma.dcm, DifferenceMap difference.dcm (RT Dose),
	// Report report.html, ReportPDF report.pdf.
	GammaMap, DifferenceMap, Report, ReportPDF bool
	// Deidentify de-identifies every output, status and log line of the
	// cases (see job.Write and package deid).
	Deidentify bool
	// KeyID names the de-identification key in the settings hash (see
	// deid.Key.ID); set by Run and NewWatcher.
	KeyID string
	// ResultsTo and ResultsAET send each case's gamma and difference maps
	// to a DICOM node (see job.Outputs); a case whose maps could not be
	// sent is not evaluated (in a batch, its error says why; a watched
	// case is tried again at the next poll).
	ResultsTo, ResultsAET string
}

// Options configure a batch run.
type Options struct {
	// Out is the batch's output folder (created if needed). It may not
	// overlap an input: be one, contain one or lie inside an input folder
	// (see [CheckOut]).
	Out string
	// Manifest is the manifest file the cases came from, checked against
	// Out like the inputs ("" when none).
	Manifest string
	// DefaultProtocol is used by cases that name none; empty means
	// DefaultProtocol ("tg218").
	DefaultProtocol string
	// Overrides are the settings given for every case besides its
	// protocol (criteria, ROI rules, ...). Overrides.Workers is the gamma
	// workers per case; 0 means the cores divided among the jobs (at
	// least 1).
	Overrides job.Overrides
	// Outputs are the optional outputs of every case.
	Outputs Outputs
	// AllowFrameMismatch compares doses and structures of different
	// frames of reference (see analysis.Inputs).
	AllowFrameMismatch bool
	// MaxMemory is the memory budget in bytes; 0 means [job.DefaultBudget].
	// MemorySource says where it came from, for the log ("--max-memory").
	MaxMemory    int64
	MemorySource string
	// Jobs is the number of cases run at once; 0 means the core count.
	// The memory budget may hold fewer at once.
	Jobs int
	// Shard selects the cases of this process (see [Shard]).
	Shard Shard
	// Rerun computes every case again, ignoring the resume rule.
	Rerun bool
	// Log receives one line per case start and finish (nil: none).
	Log *slog.Logger
	// Progress is called after each case with the cases done and the
	// total (nil: none).
	Progress func(done, total int)
	// Record, when not nil, is called for every case of this run that was
	// evaluated (verdict pass or fail), computed or found up to date, with
	// the result in its folder: a results store records it (idempotently,
	// so that a resumed batch records each case once, and one killed
	// between a case's folder and its record records it when resumed). An
	// error is logged and counted in Report.NotRecorded.
	Record RecordFunc
	// Deid is the run's de-identification when Outputs.Deidentify (nil:
	// a random key for this run). Each case registers its inputs in a
	// scope of it while it runs, so that a log written through Deid.Scrub
	// stays de-identified.
	Deid *deid.Run
}

// RecordFunc records a case's result (see Options.Record).
type RecordFunc func(ctx context.Context, c Case, r *result.Result) error

// recordCase calls rec with the result in the case folder dir when the
// folder holds an evaluated case; it reports whether it tried and the
// error.
func recordCase(ctx context.Context, rec RecordFunc, c Case, dir string) (bool, error) {
	st, err := ReadStatus(dir)
	if err != nil || (st.Verdict != VerdictPass && st.Verdict != VerdictFail) {
		return false, nil
	}
	path := filepath.Join(dir, ResultJSON)
	data, err := os.ReadFile(path)
	if err != nil {
		return true, fmt.Errorf("case %s: %w", c.ID, err)
	}
	var r result.Result
	if err := json.Unmarshal(data, &r); err != nil {
		return true, fmt.Errorf("case %s: reading %s: %w", c.ID, path, err)
	}
	if err := rec(ctx, c, &r); err != nil {
		return true, fmt.Errorf("case %s: %w", c.ID, err)
	}
	return true, nil
}

// Report is the outcome of [Run].
type Report struct {
	// Summary covers the cases of this run (the shard's, or all).
	Summary *Summary
	// Computed counts the cases computed, Skipped those found up to date,
	// NotRun those not finished because the run was interrupted.
	Computed, Skipped, NotRun int
	// Budget is the memory budget used, BudgetSource where it came from.
	Budget       int64
	BudgetSource string
	// Jobs and Workers are the cases at once and the gamma workers each.
	Jobs, Workers int
	// SummaryFiles are the summary files written.
	SummaryFiles []string
	// Cleaned lists stale temporary folders removed or restored at start.
	Cleaned []string
	// Recorded counts the cases recorded by Options.Record; NotRecorded
	// those it failed for (each logged).
	Recorded, NotRecorded int
}

// Run runs the cases of the shard opt.Shard of a manifest: each case is
// skipped when up to date (see the package documentation's resume rule),
// else computed into its own folder Out/cases/<id>, as many at once as the
// jobs and the memory budget allow. A failing case never stops the others.
// At the end it writes the summary from the case folders: Out/summary.csv
// and Out/summary.json, or Out/summary-shard-i-of-n.json for a shard.
//
// It returns an error, before any case runs, for options that cannot work
// (an output folder that cannot be made, bad overrides, an unknown default
// protocol), and the context's error, with the report so far, when ctx is
// cancelled: cases under way are then abandoned without leaving a folder.
func Run(ctx context.Context, cases []Case, opt Options) (*Report, error) {
	if opt.Out == "" {
		return nil, errors.New("batch: no output folder given")
	}
	shard := opt.Shard
	if shard.Count == 0 {
		shard.Count = 1
	}
	if err := shard.check(); err != nil {
		return nil, err
	}
	defProto := opt.DefaultProtocol
	if defProto == "" {
		defProto = DefaultProtocol
	}
	if opt.Outputs.Deidentify {
		if opt.Deid == nil {
			opt.Deid = deid.NewRun(deid.RandomKey())
		}
		opt.Outputs.KeyID = opt.Deid.Key.ID()
	} else {
		opt.Deid = nil
	}
	if _, _, err := settingsFor(defProto, opt.Overrides, opt.Outputs, opt.AllowFrameMismatch); err != nil {
		return nil, fmt.Errorf("batch: %w", err)
	}
	log := opt.Log
	if log == nil {
		log = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if opt.Deid != nil {
		log = slog.New(deid.LogHandler(log.Handler(), opt.Deid.Scrub))
	}
	rep := &Report{}
	rep.Budget, rep.BudgetSource = opt.MaxMemory, opt.MemorySource
	if rep.BudgetSource == "" {
		rep.BudgetSource = "given"
	}
	if rep.Budget <= 0 {
		rep.Budget, rep.BudgetSource = job.DefaultBudget()
	}
	seen := map[string]bool{}
	for _, c := range cases {
		if err := ValidID(c.ID); err != nil {
			return nil, fmt.Errorf("batch: case %d: %w", c.Index+1, err)
		}
		if seen[strings.ToLower(c.ID)] {
			return nil, fmt.Errorf("batch: case id %q given twice", c.ID)
		}
		seen[strings.ToLower(c.ID)] = true
	}
	mine := shard.Select(cases)
	rep.Jobs = opt.Jobs
	if rep.Jobs <= 0 {
		rep.Jobs = job.AvailableCPUs()
	}
	rep.Jobs = max(1, min(rep.Jobs, len(mine)))
	rep.Workers = opt.Overrides.Workers
	if rep.Workers <= 0 {
		rep.Workers = max(1, job.AvailableCPUs()/rep.Jobs)
	}

	if err := CheckOut(opt.Out, opt.Manifest, cases); err != nil {
		var o *pathcheck.Overlap
		if opt.Deid != nil && errors.As(err, &o) {
			opt.Deid.Base().Path(o.Input, "an input")
			err = errors.New(opt.Deid.Base().Scrub(err.Error()))
		}
		return nil, err
	}
	casesDir := filepath.Join(opt.Out, CasesDir)
	if err := os.MkdirAll(casesDir, 0o755); err != nil {
		return nil, fmt.Errorf("batch: creating the output folder: %w", err)
	}
	// One run per output folder (per shard): another run's temporary
	// folders would otherwise look stale and be removed under it.
	lock, err := acquireLock(opt.Out, shard, log)
	if err != nil {
		return nil, err
	}
	defer lock.release()
	owned := map[string]bool{}
	for _, c := range mine {
		owned[c.ID] = true
	}
	cleaned, err := cleanStale(casesDir, func(id string) bool { return owned[id] })
	rep.Cleaned = cleaned
	for _, l := range cleaned {
		log.Info(l)
	}
	if err != nil {
		return rep, fmt.Errorf("batch: %w", err)
	}

	// Resolve each protocol once.
	type resolved struct {
		s    analysis.Settings
		hash string
		err  error
	}
	protos := map[string]*resolved{}
	ov := opt.Overrides
	ov.Workers = rep.Workers
	for _, c := range mine {
		name := c.Protocol
		if name == "" {
			name = defProto
		}
		if _, ok := protos[name]; !ok {
			r := &resolved{}
			r.s, r.hash, r.err = settingsFor(name, ov, opt.Outputs, opt.AllowFrameMismatch)
			protos[name] = r
		}
	}

	if opt.Deid != nil {
		log.Info("de-identifying", "note", opt.Deid.Key.Note())
	}
	log.Info("batch started", "cases", len(mine), "manifest_cases", len(cases), "shard", shard.String(),
		"jobs", rep.Jobs, "workers_per_case", rep.Workers, "memory_budget", job.FormatBytes(rep.Budget), "budget_source", rep.BudgetSource)

	mem := semaphore.NewWeighted(rep.Budget)
	work := make(chan Case)
	var done atomic.Int64
	var computed, skipped, notRun, recorded, notRecorded atomic.Int64
	var wg sync.WaitGroup
	var reachedMu sync.Mutex
	reached := map[string]bool{}
	notWritten := map[string]string{}
	for range rep.Jobs {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for c := range work {
				name := c.Protocol
				if name == "" {
					name = defProto
				}
				r := protos[name]
				w := caseWork{c: c, protocolName: name, settings: r.s, settingsHash: r.hash, outs: opt.Outputs, allowFM: opt.AllowFrameMismatch, deid: opt.Deid}
				outcome, unwritten := runOneProtected(ctx, casesDir, w, r.err, opt.Rerun, mem, rep.Budget, log)
				if unwritten != "" {
					reachedMu.Lock()
					notWritten[c.ID] = unwritten
					reachedMu.Unlock()
				}
				switch outcome {
				case outcomeComputed:
					computed.Add(1)
				case outcomeSkipped:
					skipped.Add(1)
				default:
					notRun.Add(1)
				}
				if outcome != outcomeInterrupted && opt.Record != nil {
					tried, err := recordCase(ctx, opt.Record, c, filepath.Join(casesDir, c.ID))
					switch {
					case err != nil:
						notRecorded.Add(1)
						log.Error("case not recorded (run the batch again to record it)", "id", c.ID, "error", oneLine(err.Error()))
					case tried:
						recorded.Add(1)
					}
				}
				if outcome != outcomeInterrupted {
					reachedMu.Lock()
					reached[c.ID] = true
					reachedMu.Unlock()
					if opt.Progress != nil {
						opt.Progress(int(done.Add(1)), len(mine))
					}
				}
			}
		}()
	}
	fed := 0
feed:
	for _, c := range mine {
		select {
		case work <- c:
			fed++
		case <-ctx.Done():
			break feed
		}
	}
	close(work)
	wg.Wait()
	rep.Computed, rep.Skipped = int(computed.Load()), int(skipped.Load())
	rep.Recorded, rep.NotRecorded = int(recorded.Load()), int(notRecorded.Load())
	rep.NotRun = int(notRun.Load()) + len(mine) - fed

	sum := BuildSummary([]string{opt.Out}, mine)
	for i := range sum.Rows {
		// A case whose folder could not be written could not be
		// evaluated, whatever an older folder of it says.
		if msg, ok := notWritten[sum.Rows[i].ID]; ok {
			sum.replace(i, Row{ID: sum.Rows[i].ID, Verdict: VerdictError, Targets: []ROIRate{}, Error: "case folder not written: " + msg})
		}
	}
	if rep.NotRun > 0 {
		// A folder left by an earlier run may not match this run's
		// settings: a case this run did not reach is "not run".
		for i := range sum.Rows {
			if !reached[sum.Rows[i].ID] {
				sum.replace(i, notRunRow(sum.Rows[i].ID))
			}
		}
	}
	if shard.Sharded() {
		sum.Shard = &shard
		path := filepath.Join(opt.Out, shard.SummaryName())
		if err := writeSummaryJSON(path, sum); err != nil {
			return rep, err
		}
		rep.SummaryFiles = []string{path}
	} else {
		files, err := WriteSummary(opt.Out, sum)
		if err != nil {
			return rep, err
		}
		rep.SummaryFiles = files
	}
	rep.Summary = sum
	if err := ctx.Err(); err != nil {
		return rep, fmt.Errorf("batch interrupted: %d of %d cases not finished (run the same command again to resume): %w", rep.NotRun, len(mine), err)
	}
	return rep, nil
}

// CheckOut refuses an output folder that overlaps an input of the cases
// (reference, evaluated dose, structures, a protocol file) or the manifest:
// the output folder may not be an input, contain one (a case folder
// replaced, a stale temporary folder removed, would take it along) or lie
// inside an input folder (whose content, and so its hash, would change).
// Paths are compared as written and with symbolic links resolved.
func CheckOut(out, manifest string, cases []Case) error {
	inputs := []string{manifest}
	for _, c := range cases {
		inputs = append(inputs, c.Reference, c.Evaluated, c.Structures)
		if c.Protocol != "" {
			if st, err := os.Stat(c.Protocol); err == nil && !st.IsDir() {
				inputs = append(inputs, c.Protocol)
			}
		}
	}
	if err := pathcheck.FolderOverlap(out, inputs); err != nil {
		return fmt.Errorf("batch: --out: %w: an output folder may never hold, replace or remove an input; give a folder apart from the inputs", err)
	}
	return nil
}

type outcome int

const (
	outcomeComputed outcome = iota
	outcomeSkipped
	outcomeInterrupted
)

// runOneProtected is runOne in a worker goroutine, where a panic would end
// the whole process (and every other case with it) whatever the command
// recovers: the panic becomes this case's error instead, written to its
// folder like any other case that could not be evaluated.
func runOneProtected(ctx context.Context, casesDir string, w caseWork, protoErr error, rerun bool, mem *semaphore.Weighted, budget int64, log *slog.Logger) (out outcome, unwritten string) {
	if w.deid != nil {
		w.scope = w.caseScope()
		defer w.scope.Close()
	}
	defer func() {
		if p := recover(); p != nil {
			err := fmt.Errorf("internal error: %v (please report it)", p)
			st := newStatus(w, nil, nil)
			st.Verdict, st.ExitClass, st.Error = VerdictError, ExitError, w.scrub(caseMessage(w.c.ID, err))
			if ierr := writeErrorCase(casesDir, st); ierr != nil {
				log.Error("case folder not written", "id", w.c.ID, "error", ierr.Error())
				unwritten = st.Error + "; " + oneLine(ierr.Error())
			}
			log.Error("case failed", "id", w.c.ID, "error", st.Error)
			out = outcomeComputed
		}
	}()
	fault.Point(fault.BatchCase)
	return runOne(ctx, casesDir, w, protoErr, rerun, mem, budget, log)
}

// runOne runs one case of a batch: the resume check, the memory
// estimate, waiting for budget, the comparison, the case folder. unwritten
// says why the case's folder could not be written ("" when it was, or the
// case was skipped or interrupted).
func runOne(ctx context.Context, casesDir string, w caseWork, protoErr error, rerun bool, mem *semaphore.Weighted, budget int64, log *slog.Logger) (_ outcome, unwritten string) {
	c := w.c
	if ctx.Err() != nil {
		return outcomeInterrupted, ""
	}
	if w.deid != nil && w.scope == nil {
		w.scope = w.caseScope()
		defer w.scope.Close()
	}
	final := filepath.Join(casesDir, c.ID)
	prev, _ := ReadStatus(final)
	fail := func(err error) (outcome, string) {
		st := newStatus(w, nil, prev)
		st.Verdict, st.ExitClass, st.Error = VerdictError, ExitError, w.scrub(caseMessage(c.ID, err))
		if ierr := writeErrorCase(casesDir, st); ierr != nil {
			msg := w.scrub(oneLine(ierr.Error()))
			log.Error("case folder not written", "id", c.ID, "error", msg)
			return outcomeComputed, st.Error + "; " + msg
		}
		log.Info("case finished", "id", c.ID, "verdict", st.Verdict, "seconds", 0.0, "error", st.Error)
		return outcomeComputed, ""
	}
	if protoErr != nil {
		return fail(fmt.Errorf("protocol %s: %w", w.protocolName, protoErr))
	}
	inputs, err := HashInputs(c)
	if err != nil {
		return fail(err)
	}
	if !rerun && upToDate(prev, inputs, w.settingsHash, final) {
		log.Info("case skipped (up to date)", "id", c.ID, "verdict", prev.Verdict)
		return outcomeSkipped, ""
	}
	need, err := EstimateCase(c)
	if err != nil {
		return fail(err)
	}
	if need > budget {
		return fail(fmt.Errorf("needs about %s of memory (estimated from its dose grids), more than the whole memory budget of %s: give more with --max-memory, or run it on a larger machine", job.FormatBytes(need), job.FormatBytes(budget)))
	}
	if err := mem.Acquire(ctx, need); err != nil {
		return outcomeInterrupted, ""
	}
	defer mem.Release(need)
	log.Info("case started", "id", c.ID, "memory_estimate", job.FormatBytes(need))
	st, _, err := compute(ctx, casesDir, w, inputs, prev)
	if err != nil {
		if ctx.Err() != nil {
			log.Info("case interrupted", "id", c.ID)
			return outcomeInterrupted, ""
		}
		msg := w.scrub(oneLine(err.Error()))
		log.Error("case folder not written", "id", c.ID, "error", msg)
		return outcomeComputed, msg
	}
	attrs := []any{"id", c.ID, "verdict", st.Verdict, "seconds", round3(st.Seconds)}
	if st.Error != "" {
		attrs = append(attrs, "error", st.Error)
	}
	log.Info("case finished", attrs...)
	return outcomeComputed, ""
}

// upToDate is the resume rule: the case folder holds a status of a case
// that was evaluated (pass or fail) from the same inputs (by role and
// SHA-256 of their content, not by path) with the same settings, and every
// output it lists is there.
func upToDate(prev *Status, inputs []InputHash, settingsHash, dir string) bool {
	if prev == nil || prev.Verdict == VerdictError || prev.SettingsSHA256 != settingsHash || !sameInputs(prev.Inputs, inputs) {
		return false
	}
	for _, o := range prev.Outputs {
		if _, err := os.Stat(filepath.Join(dir, o)); err != nil {
			return false
		}
	}
	return true
}
