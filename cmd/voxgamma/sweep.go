package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"voxgamma/analysis"
	"voxgamma/gamma"
	"voxgamma/internal/atomicfile"
	"voxgamma/internal/safetext"
	"voxgamma/job"
	"voxgamma/result"
)

// sweepRow is one criteria set of a sweep.
type sweepRow struct {
	Criteria result.Criteria   `json:"criteria"`
	Overall  result.GammaStats `json:"overall"`
	// RawPassRate is the overall pass rate against the evaluated dose as
	// given when the pass rates are noise-corrected (absent otherwise).
	RawPassRate *float64   `json:"raw_pass_rate,omitempty"`
	ROIs        []sweepROI `json:"rois"`
}

type sweepROI struct {
	Name         string   `json:"name"`
	Kind         string   `json:"kind"`
	Evaluated    int      `json:"evaluated"`
	PassRate     *float64 `json:"pass_rate"`
	PassRateText string   `json:"pass_rate_text"`
	GammaMean    *float64 `json:"gamma_mean"`
}

// sweepDoc is the JSON a sweep writes.
type sweepDoc struct {
	SchemaVersion string         `json:"schema_version"`
	Version       string         `json:"version"`
	Caution       string         `json:"caution"`
	Inputs        []result.Input `json:"inputs"`
	Rows          []sweepRow     `json:"rows"`
	// Notes say how the document was de-identified (--deidentify) and
	// what was done about the evaluated dose's noise.
	Notes []string `json:"notes,omitempty"`
}

func newSweep(g *globals) *cobra.Command {
	f := &compareFlags{}
	var doses, dtas []float64
	var norms []string
	cmd := &cobra.Command{
		Use:   "sweep --reference REF --evaluated EVAL [--structures RS] [--doses 1,2,3] [--dtas 1,2,3]",
		Short: "Compare at a table of criteria, loading the inputs once",
		Long: `sweep runs the same comparison at every combination of dose criteria, DTA and
normalisation, loading and rasterising once, and prints the overall and per-ROI
pass rates as a table (also written as JSON and CSV): a physicist's check of
how robust a result is to the choice of criteria. Other options are those of
compare (threshold, normalisation dose, search distance, ROI kind rules).`,
		Example: `  voxgamma sweep --reference RD_plan.dcm --evaluated RD_mc.dcm --structures RS.dcm
  voxgamma sweep --reference plan/ --evaluated mc/ --doses 1,2,3 --dtas 1,2 --normalisations global --csv sweep.csv`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runSweep(cmd.Context(), cmd, g, f, doses, dtas, norms)
		},
	}
	f.register(cmd)
	fl := cmd.Flags()
	fl.Float64SliceVar(&doses, "doses", []float64{1, 2, 3}, "dose criteria, percent")
	fl.Float64SliceVar(&dtas, "dtas", []float64{1, 2, 3}, "DTA criteria, mm")
	fl.StringSliceVar(&norms, "normalisations", []string{"global", "local"}, "normalisations: global, local")
	for _, name := range []string{"criteria", "local", "gamma-map", "difference-map", "report", "subgrid", "subgrid-step", "exhaustive"} {
		fl.MarkHidden(name)
	}
	return cmd
}

func runSweep(ctx context.Context, cmd *cobra.Command, g *globals, f *compareFlags, doses, dtas []float64, norms []string) error {
	d, err := f.deidScope(g)
	if err != nil {
		return err
	}
	if f.gammaMap != "" || f.diffMap != "" || f.reportOut != "" {
		return fmt.Errorf("sweep writes tables only: use compare for maps and the review page")
	}
	s, err := settingsFrom(cmd, f)
	if err != nil {
		return err
	}
	var normList []gamma.Normalisation
	for _, n := range norms {
		switch strings.ToLower(strings.TrimSpace(n)) {
		case "global":
			normList = append(normList, gamma.Global)
		case "local":
			normList = append(normList, gamma.Local)
		default:
			return fmt.Errorf("--normalisations %q: want global and/or local", n)
		}
	}
	for _, d := range doses {
		if !(d > 0) {
			return fmt.Errorf("--doses %g: want percentages above 0", d)
		}
	}
	for _, d := range dtas {
		if !(d > 0) {
			return fmt.Errorf("--dtas %g: want distances above 0 mm", d)
		}
	}
	if len(doses) == 0 || len(dtas) == 0 || len(normList) == 0 {
		return fmt.Errorf("a sweep needs at least one dose criterion, one DTA and one normalisation")
	}
	if err := (job.Outputs{JSON: f.jsonOut, CSV: f.csvOut}).Check(f.givenPaths(), f.force); err != nil {
		return err
	}
	if len(f.reference) == 0 && f.referencePoints == "" {
		return fmt.Errorf("--reference (or --reference-points) is required")
	}
	in := f.inputs()
	if d != nil {
		in.Seen = d.Seen
	}
	l, err := analysis.Load(in)
	if err != nil {
		return err
	}
	p, err := analysis.Prepare(l, s)
	if err != nil {
		return err
	}
	if ctx == nil {
		ctx = context.Background()
	}
	doc := sweepDoc{SchemaVersion: result.SchemaVersion, Version: version, Caution: result.Caution, Inputs: l.Inputs}
	name := func(s string) string { return s }
	if d != nil {
		job.DeidentifyInputs(doc.Inputs, d)
		doc.Notes = []string{job.DeidentifiedNote, d.Key().Note()}
		name = d.Scrub
	}
	noiseNote, noiseWarned := "", false
	for _, n := range normList {
		for _, d := range doses {
			for _, dta := range dtas {
				run := s
				run.Criteria.DosePercent, run.Criteria.DTA, run.Criteria.Normalisation = d, dta, n
				if !cmd.Flags().Changed("search") {
					run.Criteria.Search = 0 // 3 × each DTA
				}
				run.Checker = nil
				bar := newProgress(g.term, g.quiet, run.Criteria.Label())
				run.Progress = bar.update
				out, err := p.Run(ctx, run)
				bar.done()
				if err != nil {
					return err
				}
				row := sweepRow{Criteria: out.Result.Criteria, Overall: out.Result.Overall}
				if nz := out.Result.Noise; nz != nil && nz.Corrected {
					row.RawPassRate = nz.RawOverall.PassRate
					if noiseNote == "" {
						noiseNote = "evaluated-dose noise: " + noiseLine(nz, out.Result) + " (first criteria set); every pass rate of the sweep is noise-corrected, raw_pass_rate holds the raw overall one"
					}
					if nz.Warning {
						noiseWarned = true
					}
				}
				for _, x := range out.Result.ROIs {
					row.ROIs = append(row.ROIs, sweepROI{Name: name(x.Name), Kind: x.Kind, Evaluated: x.Evaluated, PassRate: x.PassRate, PassRateText: x.PassRateText, GammaMean: x.GammaMean})
				}
				doc.Rows = append(doc.Rows, row)
			}
		}
	}
	if noiseNote != "" {
		doc.Notes = append(doc.Notes, noiseNote)
		if noiseWarned {
			fmt.Fprintf(g.stderr, "warning: Monte Carlo noise moves a pass rate by more than 1 percentage point: %s\n", noiseNote)
		}
	}
	if !g.quiet {
		printSweep(g.stdout, doc)
	}
	if f.jsonOut != "" {
		if err := atomicfile.Write(f.jsonOut, func(w io.Writer) error {
			enc := json.NewEncoder(w)
			enc.SetIndent("", "  ")
			return enc.Encode(doc)
		}); err != nil {
			return err
		}
	}
	if f.csvOut != "" {
		if err := atomicfile.Write(f.csvOut, func(w io.Writer) error { return writeSweepCSV(w, doc) }); err != nil {
			return err
		}
	}
	g.outcome = fmt.Sprintf("sweep: %d criteria sets computed (a sweep checks no protocol: no verdict)", len(doc.Rows))
	return nil
}

// sweepColumns are the ROIs shown as table columns: targets, then organs at
// risk, in result order.
func sweepColumns(doc sweepDoc) []string {
	if len(doc.Rows) == 0 {
		return nil
	}
	var cols []string
	for _, kind := range []string{"target", "oar"} {
		for _, r := range doc.Rows[0].ROIs {
			if r.Kind == kind {
				cols = append(cols, r.Name)
			}
		}
	}
	return cols
}

func printSweep(w io.Writer, doc sweepDoc) {
	cols := sweepColumns(doc)
	fmt.Fprintf(w, "%-20s %8s", "criteria", "overall")
	for _, c := range cols {
		fmt.Fprintf(w, " %12s", truncate(c, 12))
	}
	fmt.Fprintln(w)
	for _, row := range doc.Rows {
		fmt.Fprintf(w, "%-20s %8s", row.Criteria.Label, row.Overall.PassRateText)
		for _, c := range cols {
			v := "-"
			for _, r := range row.ROIs {
				if r.Name == c {
					v = r.PassRateText
				}
			}
			fmt.Fprintf(w, " %12s", v)
		}
		fmt.Fprintln(w)
	}
	fmt.Fprintf(w, "pass rates in %%, Γ ≤ 1. %s\n", result.Caution)
}

func writeSweepCSV(w io.Writer, doc sweepDoc) error {
	cw := csv.NewWriter(w)
	if err := cw.Write([]string{"dose_percent", "dta_mm", "normalisation", "roi", "kind", "evaluated", "pass_rate", "gamma_mean"}); err != nil {
		return err
	}
	f := func(p *float64) string {
		if p == nil {
			return ""
		}
		return strconv.FormatFloat(*p, 'g', 10, 64)
	}
	for _, row := range doc.Rows {
		c := row.Criteria
		base := []string{strconv.FormatFloat(c.DosePercent, 'g', -1, 64), strconv.FormatFloat(c.DTAmm, 'g', -1, 64), c.Normalisation}
		if err := cw.Write(append(append([]string{}, base...), "overall", "", strconv.Itoa(row.Overall.Evaluated), f(row.Overall.PassRate), f(row.Overall.GammaMean))); err != nil {
			return err
		}
		for _, r := range row.ROIs {
			if err := cw.Write(append(append([]string{}, base...), safetext.CSVCell(r.Name), safetext.CSVCell(r.Kind), strconv.Itoa(r.Evaluated), f(r.PassRate), f(r.GammaMean))); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	return cw.Error()
}
