package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"runtime/debug"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"voxgamma/batch"
	"voxgamma/dicomsend"
	"voxgamma/job"
	"voxgamma/protocol"
)

// caseFlags are the options of batch and watch that apply to every case:
// the protocol for cases that name none, criteria overrides, ROI rules and
// the optional outputs.
type caseFlags struct {
	comparisonFlags
	protocol                        string
	allowFrameMismatch              bool
	gammaMap, diffMap, report, deid bool
	rec                             recordFlags
	siteKey                         string
	reportPDF                       bool
	resultsTo, resultsAET           string
}

func (f *caseFlags) register(cmd *cobra.Command, protocolHelp string) {
	f.registerVerdictFlags(cmd)
	fl := cmd.Flags()
	fl.StringVar(&f.protocol, "protocol", batch.DefaultProtocol, protocolHelp+": a protocol file (YAML or JSON) or preset: "+strings.Join(protocol.PresetNames(), ", "))
	fl.StringVar(&f.criteria, "criteria", "", "dose-difference and distance criteria for every case, e.g. 2%/1mm (default: each protocol's)")
	fl.BoolVar(&f.local, "local", false, "local normalisation for every case")
	fl.Float64Var(&f.threshold, "threshold", 0, "low-dose threshold, percent of the normalisation dose (default: each protocol's)")
	fl.Var(&f.normDose, "norm-dose", "global normalisation dose in Gy, or prescription: each case's RT Plan's (default: each protocol's, else the reference maximum)")
	fl.Float64Var(&f.search, "search", 0, "maximum search distance in mm (default: each protocol's, else 3 × DTA)")
	fl.StringArrayVar(&f.kindRules, "kind", nil, `ROI kind rule PATTERN=KIND, e.g. "PTV*=target" (repeatable)`)
	fl.Float64SliceVar(&f.isodose, "isodose", nil, "isodose ROIs at these percentages of the normalisation dose, e.g. 50,80")
	fl.Float64SliceVar(&f.vDoses, "v-dose", nil, "report V_d at these doses in Gy, e.g. 12,20")
	fl.StringSliceVar(&f.subgrid, "subgrid", nil, "evaluate these ROIs on a finer sub-grid of reference points")
	fl.Float64Var(&f.subgridStep, "subgrid-step", 0.5, "step of the --subgrid reference points, mm")
	fl.Float64Var(&f.minClusterCC, "min-cluster", 0.01, "smallest failing cluster listed, cm³")
	fl.BoolVar(&f.exhaustive, "exhaustive", false, "use the exhaustive gamma search (slow; for audits)")
	registerInterpolation(cmd, &f.interpolation)
	fl.StringVar(&f.evaluatedNoise, "evaluated-noise", "auto", noiseHelp)
	fl.BoolVar(&f.allowFrameMismatch, "allow-frame-mismatch", false, "compare doses and structures of different frames of reference (you vouch that their coordinates agree)")
	fl.BoolVar(&f.gammaMap, "gamma-map", false, "also write each case's Γ map as gamma.dcm (RT Dose)")
	fl.BoolVar(&f.diffMap, "difference-map", false, "also write each case's dose difference map as difference.dcm (RT Dose)")
	fl.BoolVar(&f.report, "report", false, "also write each case's review page as report.html")
	fl.BoolVar(&f.reportPDF, "report-pdf", false, "also write each case's review as report.pdf (for the archive)")
	fl.BoolVar(&f.deid, "deidentify", false, "de-identify every output, status, state and log line (DICOM PS3.15 Annex E intent): keyed pseudonyms for names and IDs, remapped UIDs, no dates, descriptions or input paths (docs/patient-data.md)")
	deidFlags(cmd, &f.siteKey)
	fl.StringVar(&f.resultsTo, "results-to", "", "send each case's gamma and difference maps (RT Dose) to this DICOM node, AET@HOST:PORT, with dcmtk's storescu")
	fl.StringVar(&f.resultsAET, "results-aet", "", "AE title to call --results-to from (default "+dicomsend.DefaultCallingAETitle+")")
	fl.IntVar(&f.workers, "workers", 0, "gamma worker goroutines per case (default: the cores divided among the cases run at once)")
	f.rec.register(cmd, false)
}

// checkResultsTo refuses, before any case is run, a --results-to that
// names no valid node or that cannot be used (no storescu).
func (f *caseFlags) checkResultsTo() error {
	d, err := job.Outputs{ResultsTo: f.resultsTo, ResultsAET: f.resultsAET}.Destination()
	if err != nil || d == nil {
		return err
	}
	if err := dicomsend.Available(); err != nil {
		return fmt.Errorf("--results-to %s: %w", d, err)
	}
	return nil
}

func (f *caseFlags) outputs() batch.Outputs {
	return batch.Outputs{GammaMap: f.gammaMap, DifferenceMap: f.diffMap, Report: f.report, ReportPDF: f.reportPDF, Deidentify: f.deid,
		ResultsTo: f.resultsTo, ResultsAET: f.resultsAET}
}

// caseBar is stderr for a long run: log lines pass through, and on a
// terminal a progress bar of the cases stays on the last line (cleared
// before each log line and drawn again after it). Off a terminal it is a
// plain writer.
type caseBar struct {
	mu          sync.Mutex
	w           io.Writer // the terminal: the bar's own control sequences
	log         io.Writer // log lines
	on          bool
	label       string
	done, total int
	started     time.Time
	drawn       bool
}

func newCaseBar(w, log io.Writer, quiet bool, label string) *caseBar {
	b := &caseBar{w: w, log: log, label: label, started: time.Now()}
	if f, ok := w.(*os.File); ok && !quiet {
		if st, err := f.Stat(); err == nil && st.Mode()&os.ModeCharDevice != 0 {
			b.on = true
		}
	}
	return b
}

// Write writes a log line above the bar.
func (b *caseBar) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.drawn {
		fmt.Fprint(b.w, "\r\033[K")
		b.drawn = false
	}
	n, err := b.log.Write(p)
	b.draw()
	return n, err
}

func (b *caseBar) update(done, total int) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.done, b.total = done, total
	b.draw()
}

func (b *caseBar) draw() {
	if !b.on || b.total == 0 {
		return
	}
	const width = 30
	filled := width * b.done / b.total
	fmt.Fprintf(b.w, "\r\033[K%s [%s%s] %d/%d %s", b.label, strings.Repeat("#", filled), strings.Repeat(".", width-filled),
		b.done, b.total, time.Since(b.started).Round(time.Second))
	b.drawn = true
}

// finish clears the bar's line.
func (b *caseBar) finish() {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.drawn {
		fmt.Fprint(b.w, "\r\033[K")
		b.drawn = false
	}
	b.on = false
}

// runLogger returns the structured log of a long run: one line per case at
// level INFO by default (WARN with --quiet, DEBUG with --verbose).
func runLogger(g *globals, w io.Writer) *slog.Logger {
	level := slog.LevelInfo
	if g.verbose {
		level = slog.LevelDebug
	}
	if g.quiet {
		level = slog.LevelWarn
	}
	return slog.New(slog.NewTextHandler(w, &slog.HandlerOptions{Level: level}))
}

// memoryLimit sets the Go runtime's soft memory limit to the budget,
// unless GOMEMLIMIT is set, and returns a function that restores it.
func memoryLimit(budget int64) func() {
	if os.Getenv("GOMEMLIMIT") != "" || budget <= 0 {
		return func() {}
	}
	old := debug.SetMemoryLimit(budget)
	return func() { debug.SetMemoryLimit(old) }
}

// summaryOutcome prints the final line and turns the summary into the
// command's exit status.
func summaryOutcome(g *globals, what string, s *batch.Summary, extra string) error {
	line := what + ": " + s.Line() + extra
	switch s.ExitStatus() {
	case batch.ExitPass:
		g.outcome = line
		return nil
	case batch.ExitRuleFail:
		return &verdictError{msg: line + " (exit 2)"}
	}
	return errors.New(line)
}

func newBatch(g *globals) *cobra.Command {
	f := &caseFlags{}
	var out, maxMemory, shardFlag string
	var jobs, shardCount int
	var rerun bool
	cmd := &cobra.Command{
		Use:   "batch MANIFEST --out DIR [options]",
		Short: "Compare many plans from a manifest, resumably, in parallel within a memory budget",
		Long: `batch runs one comparison per row of a manifest and writes each case's outputs
into DIR/cases/<id>/ (result.json, result.csv, status.json, and gamma.dcm,
difference.dcm, report.html, report.pdf when asked), then a summary of every case in
DIR/summary.csv and DIR/summary.json.

The manifest is CSV with the header id,reference,evaluated,structures,protocol
(structures and protocol may be empty; relative paths are relative to the
manifest's folder), or a JSON list of objects with those keys. A case's
protocol defaults to --protocol. The other options of this command apply to
every case.

Resume: a case whose folder holds a status with the same input files (by
content: SHA-256, not paths) and the same settings (protocol content, criteria,
options) and whose outputs are all there is skipped; anything else is computed again. Cases that
could not be evaluated are always tried again. A case is built in a temporary
folder and renamed into place, so a batch killed at any instant leaves no half
case: run the same command again to finish it. One batch runs per output
folder (per shard): a lock file there names the owner; a second run is refused,
a stale lock (its owner gone) taken over. --out may not hold or lie inside any
input.

Cases run in parallel within a memory budget (--max-memory; default 70 % of
the memory available, within the cgroup limit of a scheduler's job): each
case's need is estimated from its dose grid sizes before loading (62 bytes per
reference voxel + 29 per evaluated voxel + 16 MiB), and a case waits until
its need fits. --jobs bounds the cases at once, --workers the gamma workers of
each.

Scale-out: --shard i/n runs cases i, i+n, i+2n, ... (0-based, manifest order);
without it the shard comes from a Slurm job array (SLURM_ARRAY_TASK_ID ...) or
a Kubernetes Indexed Job (JOB_COMPLETION_INDEX with --shard-count or
VOXGAMMA_SHARD_COUNT). A shard writes its case folders and
DIR/summary-shard-i-of-n.json only; merge with "voxgamma batch-summary".

Exit status: 0 every case evaluated and passed, 2 every case evaluated but at
least one failed its rules, 1 at least one case could not be evaluated. The
last line on stderr gives the counts.`,
		Example: `  voxgamma batch cases.csv --out results/
  voxgamma batch cases.json --out results/ --report --max-memory 8GiB --jobs 4
  voxgamma batch cases.csv --out /shared/study --shard 3/50
  voxgamma batch-summary /shared/study --manifest cases.csv`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" {
				return errors.New("--out is required: the folder the case folders and the summary are written into")
			}
			d, err := startDeid(g, f.deid, f.siteKey)
			if err != nil {
				return err
			}
			if d != nil {
				d.Base().File(args[0], "the manifest")
			}
			if err := f.checkResultsTo(); err != nil {
				return err
			}
			cases, err := batch.ReadManifest(args[0])
			if err != nil {
				return err
			}
			opt := batch.Options{Out: out, Manifest: args[0], DefaultProtocol: f.protocol, Overrides: f.overrides(cmd), Outputs: f.outputs(),
				AllowFrameMismatch: f.allowFrameMismatch, Jobs: jobs, Rerun: rerun, Deid: d}
			if jobs < 0 {
				return fmt.Errorf("--jobs %d: want 1 or more (0: as the budget allows, at most the core count)", jobs)
			}
			if f.workers < 0 {
				return fmt.Errorf("--workers %d: want 1 or more (0: the cores divided among the jobs)", f.workers)
			}
			var budgetSource string
			if maxMemory != "" {
				if opt.MaxMemory, err = job.ParseBytes(maxMemory); err != nil {
					return fmt.Errorf("--max-memory: %w", err)
				}
				budgetSource = "--max-memory"
			} else {
				opt.MaxMemory, budgetSource = job.DefaultBudget()
			}
			if shardFlag != "" {
				if opt.Shard, err = batch.ParseShard(shardFlag); err != nil {
					return err
				}
			} else if opt.Shard, err = batch.ShardFromEnv(os.Getenv, shardCount); err != nil {
				return err
			}
			defer memoryLimit(opt.MaxMemory)()

			ctx := cmd.Context()
			if ctx == nil {
				ctx = context.Background()
			}
			ctx, stop := signal.NotifyContext(ctx, os.Interrupt, syscall.SIGTERM)
			defer stop()
			var protos []string
			for _, c := range cases {
				protos = append(protos, c.Protocol)
			}
			rec, err := newBatchRecorder(ctx, &f.rec, "batch", f.protocol, protos, d)
			if err != nil {
				return err
			}
			if rec != nil {
				defer rec.stores.close()
				opt.Record = rec.record
			}
			bar := newCaseBar(g.term, g.stderr, g.quiet, "cases")
			opt.Log = runLogger(g, bar)
			opt.Progress = bar.update
			opt.MemorySource = budgetSource
			if opt.Shard.Sharded() {
				opt.Log.Info("shard", "shard", opt.Shard.String(), "source", opt.Shard.Source)
			}
			rep, err := batch.Run(ctx, cases, opt)
			bar.finish()
			if rep == nil || rep.Summary == nil {
				return err
			}
			if !g.quiet {
				fmt.Fprintf(g.stdout, "summary: %s\n", strings.Join(rep.SummaryFiles, ", "))
			}
			extra := fmt.Sprintf("; %d computed, %d skipped as up to date", rep.Computed, rep.Skipped)
			if opt.Shard.Sharded() {
				extra += fmt.Sprintf(", shard %s", opt.Shard)
			}
			if rec != nil {
				extra += fmt.Sprintf("; %d recorded in %s", rec.recorded.Load(), rec.storeNames())
			}
			if err != nil {
				return fmt.Errorf("%w; %s%s", err, rep.Summary.Line(), extra)
			}
			if rep.NotRecorded > 0 {
				return fmt.Errorf("batch: %s%s; %d evaluated cases not recorded in the results store (named in the log; run the same command again to record them)",
					rep.Summary.Line(), extra, rep.NotRecorded)
			}
			return summaryOutcome(g, "batch", rep.Summary, extra)
		},
	}
	f.register(cmd, "protocol of cases whose manifest row names none")
	fl := cmd.Flags()
	fl.StringVar(&out, "out", "", "output folder: DIR/cases/<id>/ per case, DIR/summary.csv and DIR/summary.json")
	fl.StringVar(&maxMemory, "max-memory", "", "memory budget for the cases at once, e.g. 8GiB, 512MiB (default: 70 % of the memory available)")
	fl.IntVar(&jobs, "jobs", 0, "cases at once (default: as the memory budget allows, at most the core count)")
	fl.StringVar(&shardFlag, "shard", "", "run only shard i of n: cases i, i+n, ... in manifest order (0-based), e.g. 0/4")
	fl.IntVar(&shardCount, "shard-count", 0, "number of shards of a Kubernetes Indexed Job (JOB_COMPLETION_INDEX gives the index)")
	fl.BoolVar(&rerun, "rerun", false, "compute every case again, even those up to date")
	return cmd
}

func newBatchSummary(g *globals) *cobra.Command {
	var manifest, out string
	cmd := &cobra.Command{
		Use:   "batch-summary DIR... [--manifest MANIFEST] [--out DIR]",
		Short: "Merge the case folders of batch shards into one summary",
		Long: `batch-summary reads the case folders (DIR/cases/<id>/status.json) under one or
more batch output folders, as the shards of one manifest left them, and writes
the one summary of all cases: summary.csv and summary.json in --out (default:
the first DIR). It reads the case folders, not the shards' own summaries, so it
is right however the shards were split, retried or resumed.

With --manifest the rows follow the manifest's order and a case without a
folder is reported as not run (could not be evaluated); without it every case
folder found is a row, sorted by id.

Exit status as batch: 0 all passed, 2 a case failed its rules, 1 a case could
not be evaluated (or was not run).`,
		Example: `  voxgamma batch-summary /shared/study --manifest cases.csv
  voxgamma batch-summary node1/ node2/ node3/ --out merged/`,
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var cases []batch.Case
			if manifest != "" {
				var err error
				if cases, err = batch.ReadManifest(manifest); err != nil {
					return err
				}
			}
			for _, d := range args {
				if st, err := os.Stat(d); err != nil || !st.IsDir() {
					return fmt.Errorf("%s: not a batch output folder", d)
				}
			}
			s, notes, err := batch.Merge(args, cases)
			if err != nil {
				return err
			}
			log := runLogger(g, g.stderr)
			for _, n := range notes {
				log.Warn(n)
			}
			if out == "" {
				out = args[0]
			}
			if err := os.MkdirAll(out, 0o755); err != nil {
				return fmt.Errorf("--out: %w", err)
			}
			files, err := batch.WriteSummary(out, s)
			if err != nil {
				return err
			}
			if !g.quiet {
				fmt.Fprintf(g.stdout, "summary: %s\n", strings.Join(files, ", "))
			}
			return summaryOutcome(g, "batch-summary", s, "")
		},
	}
	cmd.Flags().StringVar(&manifest, "manifest", "", "the batch's manifest: rows in its order, cases without a folder reported as not run")
	cmd.Flags().StringVar(&out, "out", "", "folder to write summary.csv and summary.json into (default: the first DIR)")
	return cmd
}
