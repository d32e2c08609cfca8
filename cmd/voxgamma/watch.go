package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"voxgamma/batch"
	"voxgamma/job"
)

func newWatch(g *globals) *cobra.Command {
	f := &caseFlags{}
	var out, maxMemory string
	var settle, poll time.Duration
	var once, requireStructures bool
	var refMatch, evalMatch []string
	cmd := &cobra.Command{
		Use:   "watch DIR [--out OUTDIR] [--settle 10s] [--poll 2s] [--once]",
		Short: "Watch an export folder and compare each case once its files have arrived",
		Long: `watch polls an export folder where a planning system or a recalculation engine
drops RT Dose and RT Structure Set files, and runs the protocol on each case
once all its files have arrived, writing the results to OUTDIR/<case-key>/
(result.json, result.csv, status.json, and the maps and review page when
asked). Without --out, OUTDIR is DIR/.voxgamma.

Layout: files directly in DIR (flat) are grouped into cases by their frame of
reference (case key "for-<hash>"); each immediate subfolder of DIR is one case
(case key: the subfolder's name). Deeper folders, hidden files and names ending
in .part, .partial, .tmp or .crdownload are ignored.

Reference or evaluated: an RT Dose file is the reference when it matches a
--reference-match rule and the evaluated dose when it matches an
--evaluated-match rule. A rule is a glob on the file name (case-insensitive),
or "series:GLOB" on the SeriesDescription, "manufacturer:GLOB" on the
Manufacturer, "comment:GLOB" on the DoseComment. Defaults: reference
` + strings.Join(batch.DefaultReferenceMatch, ", ") + `; evaluated
` + strings.Join(batch.DefaultEvaluatedMatch, ", ") + `. A dose matching neither is
ignored (and named in the log); one matching both is an error.

A case is complete when it has one reference dose, one evaluated dose and (with
--require-structures) a structure set, all in one frame of reference, and no
file of its folder (DIR itself for the flat layout) has changed size or
modification time for --settle, as seen by two scans at least: files still
being written are never read. The
same content under two names counts once. A case is processed once, also across
restarts: OUTDIR/.voxgamma-watch-state.json records each case by the content of
its files (SHA-256); a case whose files change is processed again, and a case
found finished in OUTDIR after a stop is reported with its verdict. A broken
case (an unreadable file, frames of reference that differ, two reference doses,
more memory than --max-memory allows) is moved into DIR/.failed/<case-key>/
with an error.txt, and the watcher goes on. Case keys: a subfolder's name (made
"x-NAME-HASH" when it is not filesystem-safe or starts with a prefix the other
keys use), "for-HASH" for a frame of reference of the flat layout, "file-NAME"
for an unreadable flat file; keyed tokens with --deidentify.

OUTDIR may not be DIR, contain it, or lie inside a case folder of it.

Idle polls only list folders and stat files. SIGINT or SIGTERM stop it cleanly
(a case under way is abandoned and processed again on the next start). --once
scans twice, --poll apart (at most --settle), processes what is complete and
settled and exits: 0 when every case processed passed (or none was), 2 when one
failed its rules, 1 when one could not be evaluated.`,
		Example: `  voxgamma watch /exports/qa --out /results/qa
  voxgamma watch /exports/qa --once --settle 30s                 # from cron
  voxgamma watch /exports/qa --reference-match 'series:*TPS*' --evaluated-match 'manufacturer:*MC*'`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if settle <= 0 || poll <= 0 {
				return fmt.Errorf("--settle %s and --poll %s: want durations above 0, e.g. 10s and 2s", settle, poll)
			}
			if f.workers < 0 {
				return fmt.Errorf("--workers %d: want 1 or more (0: all cores)", f.workers)
			}
			d, err := startDeid(g, f.deid, f.siteKey)
			if err != nil {
				return err
			}
			budget, _ := job.DefaultBudget()
			if maxMemory != "" {
				if budget, err = job.ParseBytes(maxMemory); err != nil {
					return fmt.Errorf("--max-memory: %w", err)
				}
			}
			defer memoryLimit(budget)()
			if err := f.checkResultsTo(); err != nil {
				return err
			}
			log := runLogger(g, g.stderr)
			opt := batch.WatchOptions{Dir: args[0], Out: out, Settle: settle, Protocol: f.protocol,
				Overrides: f.overrides(cmd), Outputs: f.outputs(), AllowFrameMismatch: f.allowFrameMismatch,
				RequireStructures: requireStructures, Log: log, MaxMemory: budget, Deid: d}
			if cmd.Flags().Changed("reference-match") {
				opt.ReferenceMatch = refMatch
			}
			if cmd.Flags().Changed("evaluated-match") {
				opt.EvaluatedMatch = evalMatch
			}
			ctx := cmd.Context()
			if ctx == nil {
				ctx = context.Background()
			}
			rec, err := newBatchRecorder(ctx, &f.rec, "watch", f.protocol, nil, d)
			if err != nil {
				return err
			}
			if rec != nil {
				defer rec.stores.close()
				opt.Record = rec.record
			}
			w, err := batch.NewWatcher(opt)
			if err != nil {
				return err
			}
			ctx, stop := signal.NotifyContext(ctx, os.Interrupt, syscall.SIGTERM)
			defer stop()
			if !once {
				log.Info("watching", "dir", args[0], "out", w.Out(), "settle", settle.String(), "poll", poll.String())
				if err := w.Run(ctx, poll); err != nil {
					return err
				}
				fmt.Fprintln(g.stderr, "voxgamma: watch: stopped")
				return nil
			}
			rep, err := w.Once(ctx, min(poll, settle))
			if err != nil {
				return err
			}
			s := &batch.Summary{}
			for _, c := range rep.Cases {
				switch c.Verdict {
				case batch.VerdictPass:
					s.Passed++
				case batch.VerdictFail:
					s.FailedRules++
				default:
					s.CouldNotEvaluate++
				}
				s.Cases++
			}
			extra := fmt.Sprintf("; %d folders waiting", rep.Waiting)
			if s.CouldNotEvaluate > 0 {
				extra += fmt.Sprintf("; broken cases moved into %s", strings.TrimSuffix(args[0], "/")+"/"+batch.FailedDir)
			}
			return summaryOutcome(g, "watch", s, extra)
		},
	}
	f.register(cmd, "protocol to run on every case")
	cmd.Flags().Lookup("workers").Usage = "gamma worker goroutines (default: all cores; cases run one at a time)"
	fl := cmd.Flags()
	fl.StringVar(&out, "out", "", "results folder: OUTDIR/<case-key>/ per case and the state file (default: DIR/.voxgamma)")
	fl.DurationVar(&settle, "settle", batch.DefaultSettle, "how long every file of a case must be unchanged before it is read")
	fl.DurationVar(&poll, "poll", batch.DefaultPoll, "time between two scans of DIR")
	fl.StringVar(&maxMemory, "max-memory", "", "memory budget, e.g. 8GiB (default: 70 % of the memory available, as for batch); a case estimated to need more is moved aside unread")
	fl.BoolVar(&once, "once", false, "process what is complete now and exit (for cron and tests)")
	fl.BoolVar(&requireStructures, "require-structures", false, "wait for a structure set in the reference dose's frame of reference")
	fl.StringArrayVar(&refMatch, "reference-match", nil, "rule telling a reference RT Dose: GLOB on the file name, or series:GLOB, manufacturer:GLOB, comment:GLOB (repeatable; replaces the defaults)")
	fl.StringArrayVar(&evalMatch, "evaluated-match", nil, "rule telling an evaluated RT Dose, as --reference-match (repeatable; replaces the defaults)")
	return cmd
}
