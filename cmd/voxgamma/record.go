package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"

	"github.com/spf13/cobra"

	"voxgamma/batch"
	"voxgamma/deid"
	"voxgamma/job"
	"voxgamma/record"
	"voxgamma/result"
)

// recordFlags are the results-store options of compare, batch, watch and
// record import: where to record, and the grouping labels.
type recordFlags struct {
	store  string
	caseID string
	labels record.Labels
}

// register adds --record and the label options to cmd (and --case-id
// when withCaseID).
func (f *recordFlags) register(cmd *cobra.Command, withCaseID bool) {
	fl := cmd.Flags()
	fl.StringVar(&f.store, "record", "", "record each evaluated comparison in this results store: an SQLite file or a postgres:// URL (default: the protocol's record field, else $"+record.EnvVar+")")
	fl.StringVar(&f.labels.Machine, "machine", "", "grouping label recorded with the result: the treatment machine")
	fl.StringVar(&f.labels.Technique, "technique", "", "grouping label recorded with the result: the technique, e.g. VMAT, IMRT, SRS")
	fl.StringVar(&f.labels.Site, "site", "", "grouping label recorded with the result: the anatomical site")
	fl.StringVar(&f.labels.PlanningSystem, "planning-system", "", "grouping label recorded with the result: the planning system")
	fl.StringVar(&f.labels.RecalculationEngine, "recalculation-engine", "", "grouping label recorded with the result: the engine (or measuring system) of the evaluated dose")
	if withCaseID {
		fl.StringVar(&f.caseID, "case-id", "", "case name recorded with the result (default: the reference's folder name)")
	}
}

// target returns the store results are recorded in for a protocol (a file
// or a preset name): --record, else the protocol's record field (a file
// relative to the protocol file's folder), else $VOXGAMMA_RECORD; "" for
// none.
func (f *recordFlags) target(protocolName string) (string, error) {
	if f.store != "" {
		return f.store, nil
	}
	if protocolName != "" {
		p, err := job.LoadProtocol(protocolName)
		if err != nil {
			return "", fmt.Errorf("--protocol: %w", err)
		}
		if r := strings.TrimSpace(p.Record); r != "" {
			if !record.IsPostgres(r) && !filepath.IsAbs(r) {
				if _, err := os.Stat(protocolName); err == nil {
					r = filepath.Join(filepath.Dir(protocolName), r)
				}
			}
			return r, nil
		}
	}
	return os.Getenv(record.EnvVar), nil
}

// stores keeps the results stores of one command run open, by name.
type stores struct {
	mu   sync.Mutex
	open map[string]*record.Store
}

func (s *stores) get(ctx context.Context, dsn string) (*record.Store, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if st, ok := s.open[dsn]; ok {
		return st, nil
	}
	st, err := record.Open(ctx, dsn)
	if err != nil {
		return nil, err
	}
	if s.open == nil {
		s.open = map[string]*record.Store{}
	}
	s.open[dsn] = st
	return st, nil
}

func (s *stores) close() {
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, st := range s.open {
		st.Close()
	}
	s.open = nil
}

// compareCaseID is the case name of a comparison: --case-id, else the
// name of the reference's folder (the reference itself when a folder).
func compareCaseID(f *compareFlags) string {
	if f.rec.caseID != "" {
		return f.rec.caseID
	}
	ref := f.referencePoints
	if len(f.reference) > 0 {
		// Several files (beam doses to sum): their folder names the case.
		ref = f.reference[0]
	}
	if st, err := os.Stat(ref); err == nil && st.IsDir() {
		return filepath.Base(filepath.Clean(ref))
	}
	abs, err := filepath.Abs(ref)
	if err != nil {
		return ""
	}
	return filepath.Base(filepath.Dir(abs))
}

// batchRecorder is the Record hook of a batch or a watcher: each case into
// its protocol's store, with its manifest labels over the command line's.
type batchRecorder struct {
	flags      *recordFlags
	source     string
	defProto   string
	deidentify bool
	pseudonym  func(string) string
	stores     stores
	targets    sync.Map // protocol name → store name
	recorded   atomic.Int64
	names      sync.Map // store names used
}

func (b *batchRecorder) targetFor(protocolName string) (string, error) {
	if protocolName == "" {
		protocolName = b.defProto
	}
	if v, ok := b.targets.Load(protocolName); ok {
		return v.(string), nil
	}
	t, err := b.flags.target(protocolName)
	if err != nil {
		return "", err
	}
	b.targets.Store(protocolName, t)
	return t, nil
}

func (b *batchRecorder) record(ctx context.Context, c batch.Case, r *result.Result) error {
	dsn, err := b.targetFor(c.Protocol)
	if err != nil || dsn == "" {
		return err
	}
	st, err := b.stores.get(ctx, dsn)
	if err != nil {
		return err
	}
	l := record.Labels{Machine: c.Machine, Technique: c.Technique, Site: c.Site, PlanningSystem: c.PlanningSystem,
		RecalculationEngine: c.RecalculationEngine}.Or(b.flags.labels)
	if _, err := st.Record(ctx, r, record.Meta{Source: b.source, CaseID: c.ID, Labels: l, Deidentify: b.deidentify, Pseudonym: b.pseudonym}); err != nil {
		return err
	}
	b.recorded.Add(1)
	b.names.Store(st.Name(), true)
	return nil
}

// storeNames lists the stores recorded in.
func (b *batchRecorder) storeNames() string {
	var n []string
	b.names.Range(func(k, _ any) bool { n = append(n, k.(string)); return true })
	return strings.Join(n, ", ")
}

// newBatchRecorder returns the Record hook of a batch or watch whose cases
// use the protocols named (and defProto), or nil when none records: no
// --record, no record field in those protocols, no $VOXGAMMA_RECORD. The
// store of the default protocol is opened at once, so that a store that
// cannot be opened stops the command before any comparison. With a
// de-identification d (nil: none), records hold pseudonyms keyed with its
// key and no paths.
func newBatchRecorder(ctx context.Context, f *recordFlags, source, defProto string, protocols []string, d *deid.Run) (*batchRecorder, error) {
	b := &batchRecorder{flags: f, source: source, defProto: defProto, deidentify: d != nil, pseudonym: pseudonymFunc(d)}
	any := false
	for _, p := range append([]string{defProto}, protocols...) {
		t, err := b.targetFor(p)
		if err != nil {
			return nil, err
		}
		any = any || t != ""
	}
	if !any {
		return nil, nil
	}
	if t, _ := b.targetFor(defProto); t != "" {
		if _, err := b.stores.get(ctx, t); err != nil {
			return nil, err
		}
	}
	return b, nil
}

func newRecordCmd(g *globals) *cobra.Command {
	cmd := &cobra.Command{
		Use:   "record",
		Short: "The results store: import result folders, show what is recorded",
		Long: `The results store keeps one row per comparison (see compare, batch and watch
--record): time, input files' SHA-256 and UIDs, protocol, criteria, verdict,
overall and per-ROI figures, and the grouping labels (machine, technique, site,
planning system, recalculation engine). It is an SQLite file (no server) or a
PostgreSQL database (a postgres:// URL). "voxgamma limits" and "voxgamma trend"
read it.`,
	}
	cmd.AddCommand(newRecordImport(g), newRecordStats(g))
	return cmd
}

func newRecordImport(g *globals) *cobra.Command {
	f := &recordFlags{}
	var manifest string
	var deidentify bool
	var siteKey string
	cmd := &cobra.Command{
		Use:   "import DIR... --record DB [--manifest MANIFEST] [labels]",
		Short: "Record the results already in folders (batch and watch outputs, compare --json files)",
		Long: `import walks the folders (recursively; hidden folders such as a batch's
temporary case folders are not entered), records every voxgamma result file
found (result.json of batch and watch case folders, any --json file of compare)
and skips every other file. A result's case id is the id of the status.json
beside it, else its folder's name (result.json), else its file name. Results
recorded before (the same input files, criteria and protocol) are updated in
place: importing a folder twice adds nothing.

Labels: --machine, --technique, ... apply to every result; --manifest takes each
case's labels from a batch manifest's label columns (by case id), over them.

Exit status: 0 all results recorded, 1 a result could not be (each is named).`,
		Example: `  voxgamma record import results/ --record qa.db --technique VMAT
  voxgamma record import /shared/study --record postgres://qa@db/qa --manifest cases.csv`,
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dsn, _ := f.target("")
			if dsn == "" {
				return fmt.Errorf("--record is required (or set %s): the results store to import into", record.EnvVar)
			}
			d, err := startDeid(g, deidentify, siteKey)
			if err != nil {
				return err
			}
			opt := record.ImportOptions{Labels: f.labels, Deidentify: deidentify, Pseudonym: pseudonymFunc(d)}
			if manifest != "" {
				cases, err := batch.ReadManifest(manifest)
				if err != nil {
					return err
				}
				opt.CaseLabels = map[string]record.Labels{}
				for _, c := range cases {
					opt.CaseLabels[c.ID] = record.Labels{Machine: c.Machine, Technique: c.Technique, Site: c.Site,
						PlanningSystem: c.PlanningSystem, RecalculationEngine: c.RecalculationEngine}
				}
			}
			ctx := cmdContext(cmd)
			st, err := record.Open(ctx, dsn)
			if err != nil {
				return err
			}
			defer st.Close()
			rep, err := st.Import(ctx, args, opt)
			if err != nil {
				return err
			}
			log := runLogger(g, g.stderr)
			for _, e := range rep.Errors {
				log.Error("not recorded", "result", e)
			}
			line := fmt.Sprintf("%d results found: %d recorded as new, %d recorded before (updated); %d other JSON files skipped; store %s",
				rep.Results, rep.New, rep.Updated, rep.Skipped, st.Name())
			if len(rep.Errors) > 0 {
				return fmt.Errorf("record import: %s; %d results could not be recorded (named above)", line, len(rep.Errors))
			}
			fmt.Fprintf(g.stderr, "voxgamma: record import: %s\n", line)
			return nil
		},
	}
	f.register(cmd, false)
	cmd.Flags().StringVar(&manifest, "manifest", "", "a batch manifest whose label columns give each case's labels (by case id)")
	cmd.Flags().BoolVar(&deidentify, "deidentify", false, "record pseudonyms for patient IDs, UIDs and case ids, and no paths")
	deidFlags(cmd, &siteKey)
	return cmd
}

// pseudonymFunc is the pseudonym of a de-identified run's records: keyed
// with the run's key (docs/patient-data.md), as the other outputs' are;
// nil without de-identification.
func pseudonymFunc(d *deid.Run) func(string) string {
	if d == nil {
		return nil
	}
	return func(s string) string { return d.Key.Pseudonym(deid.KindID, s) }
}

func newRecordStats(g *globals) *cobra.Command {
	var dsn string
	cmd := &cobra.Command{
		Use:   "stats --record DB",
		Short: "Count the comparisons recorded, per group of labels and criteria",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if dsn == "" {
				dsn = os.Getenv(record.EnvVar)
			}
			if dsn == "" {
				return fmt.Errorf("--record is required (or set %s)", record.EnvVar)
			}
			ctx := cmdContext(cmd)
			st, err := record.Open(ctx, dsn)
			if err != nil {
				return err
			}
			defer st.Close()
			n, err := st.Count(ctx)
			if err != nil {
				return err
			}
			v, err := st.Version(ctx)
			if err != nil {
				return err
			}
			groups, err := st.Groups(ctx)
			if err != nil {
				return err
			}
			w := g.stdout
			fmt.Fprintf(w, "store %s (schema version %d): %d comparisons\n", st.Name(), v, n)
			if len(groups) > 0 {
				fmt.Fprintf(w, "%-12s %-10s %-12s %-14s %-14s %-26s %8s %8s  %s\n", "machine", "technique", "site", "planning", "engine", "criteria", "plans", "passed", "period")
			}
			for _, gc := range groups {
				l := gc.Labels
				fmt.Fprintf(w, "%-12s %-10s %-12s %-14s %-14s %-26s %8d %8d  %s to %s\n", dash(l.Machine), dash(l.Technique), dash(l.Site),
					dash(l.PlanningSystem), dash(l.RecalculationEngine), fmt.Sprintf("%s, threshold %g %%", gc.CriteriaLabel, gc.ThresholdPercent),
					gc.Comparisons, gc.Passed, gc.First.Format("2006-01-02"), gc.Last.Format("2006-01-02"))
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&dsn, "record", "", "the results store: an SQLite file or a postgres:// URL (default $"+record.EnvVar+")")
	return cmd
}

func dash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// cmdContext is the command's context, never nil.
func cmdContext(cmd *cobra.Command) context.Context {
	if ctx := cmd.Context(); ctx != nil {
		return ctx
	}
	return context.Background()
}

// openCompareStore opens the store compare records in (nil when none), so
// that a store that cannot be opened stops the command before the
// comparison.
func openCompareStore(cmd *cobra.Command, f *compareFlags) (*record.Store, error) {
	dsn, err := f.rec.target(f.protocol)
	if err != nil || dsn == "" {
		return nil, err
	}
	return record.Open(cmdContext(cmd), dsn)
}

// recordCompare records a finished comparison in st (nothing when nil).
func recordCompare(cmd *cobra.Command, g *globals, f *compareFlags, st *record.Store, r *result.Result) error {
	if st == nil {
		return nil
	}
	n, err := st.Record(cmdContext(cmd), r, record.Meta{Source: "compare", CaseID: compareCaseID(f), Labels: f.rec.labels,
		Deidentify: f.deidentify, Pseudonym: pseudonymFunc(g.deid)})
	if err != nil {
		return fmt.Errorf("the comparison finished and its outputs are written, but it was not recorded: %w", err)
	}
	what := "recorded"
	if n.Updated > 0 {
		what = "recorded before; updated"
	}
	g.log.Info(what, "store", st.Name())
	return nil
}
