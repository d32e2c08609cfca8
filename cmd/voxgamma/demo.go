package main

import (
	"fmt"
	"path/filepath"

	"github.com/spf13/cobra"

	"voxgamma/analysis"
	"voxgamma/demo"
	"voxgamma/dicomio"
	"voxgamma/job"
)

func newDemo(g *globals) *cobra.Command {
	var dir string
	var workers int
	cmd := &cobra.Command{
		Use:   "demo [--out DIR]",
		Short: "Write an invented stereotactic case and compare it, writing every output",
		Long: `demo writes a made-up stereotactic case into a folder (a head-sized phantom,
three small targets, four organs at risk; a "planning system" dose and an
"independent recalculation" with Monte Carlo-like noise, a 0.6 mm shift and a
9 % dose error inside the smallest target), then compares them with the TG-218
protocol and writes the JSON and CSV results, the gamma and difference maps
(RT Dose and MetaImage) and the review page (HTML and PDF).

It shows why per-ROI results matter: the overall pass rate passes while the
smallest target fails. The case is invented; no patient data is involved.
demo exits 0 when everything was computed and written, whatever the verdict.`,
		Example: `  voxgamma demo
  voxgamma demo --out /tmp/vg-demo`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			files, err := demo.Write(dir)
			if err != nil {
				return err
			}
			if !g.quiet {
				fmt.Fprintf(g.stdout, "demo case written to %s (reference.dcm, evaluated.dcm, structures.dcm, plan.dcm)\n", dir)
			}
			f := &compareFlags{protocol: "tg218", comparisonFlags: comparisonFlags{subgridStep: 0.5, minClusterCC: 0.01, workers: workers}}
			s, err := settingsFrom(cmd, f)
			if err != nil {
				return err
			}
			s.IsodosePercents = []float64{50}
			s.VDoses = []float64{12}
			out := job.Outputs{
				JSON: filepath.Join(dir, "result.json"), CSV: filepath.Join(dir, "result.csv"),
				GammaMap: filepath.Join(dir, "gamma.dcm"), DifferenceMap: filepath.Join(dir, "difference.dcm"),
				Report: filepath.Join(dir, "report.html"), ReportPDF: filepath.Join(dir, "report.pdf"),
			}
			in := analysis.Inputs{Reference: files.Reference, Evaluated: files.Evaluated, Structures: files.Structures, Plan: files.Plan}
			if err := out.Check([]string{files.Reference, files.Evaluated, files.Structures, files.Plan}, true); err != nil {
				return err
			}
			o, err := compareInputs(cmd.Context(), g, in, s, out, true)
			if err != nil {
				return err
			}
			if err := job.Write(out, o, nil); err != nil {
				return err
			}
			if !g.quiet {
				printSummary(g, o.Result)
			}
			mha := filepath.Join(dir, "gamma.mha")
			if err := job.WriteMap(mha, o.Gamma, dicomio.Identifiers{}, dicomio.GammaOptions("")); err != nil {
				return err
			}
			if !g.quiet {
				fmt.Fprintf(g.stdout, "outputs: %s, %s, %s, %s, %s, %s, %s\n", out.JSON, out.CSV, out.GammaMap, mha, out.DifferenceMap, out.Report, out.ReportPDF)
			}
			g.outcome = "demo: " + verdictLine(o.Result) + " (exit 0: the demo ran completely, whatever its verdict)"
			return nil
		},
	}
	cmd.Flags().StringVar(&dir, "out", "voxgamma-demo", "folder to write the demo case and its outputs into")
	cmd.Flags().IntVar(&workers, "workers", 0, "worker goroutines (default: all cores)")
	return cmd
}
