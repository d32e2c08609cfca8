package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"strconv"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/dicomsend"
	"voxgamma/gamma"
	"voxgamma/job"
	"voxgamma/protocol"
	"voxgamma/result"
)

// compareFlags are the options of compare (and of the commands built on it).
type compareFlags struct {
	comparisonFlags
	reference, evaluated                          []string
	referencePoints, structures, plan             string
	protocol                                      string
	jsonOut, csvOut, gammaMap, diffMap, reportOut string
	reportPDF                                     string
	allowFrameMismatch, force, deidentify         bool
	maxMemory, siteKey                            string
	rec                                           recordFlags
	resultsTo, resultsAET                         string
	uncertainty, uncertaintyUnit                  string
}

// comparisonFlags are the options that shape a comparison beyond its
// protocol, shared by compare, sweep, batch and watch (each registers them
// with its own wording).
type comparisonFlags struct {
	criteria                  string
	local                     bool
	threshold, search         float64
	normDose                  normDoseFlag
	kindRules                 []string
	isodose, vDoses           []float64
	subgrid                   []string
	subgridStep, minClusterCC float64
	exhaustive                bool
	interpolation             string
	workers                   int
	noStructures              bool
	acceptNormDose            bool
	scaleEvaluated            string
	evaluatedNoise            string
}

// normDoseFlag is --norm-dose: a dose in Gy, or the word prescription (the
// RT Plan's prescription dose).
type normDoseFlag struct {
	gy           float64
	prescription bool
}

func (v *normDoseFlag) String() string {
	if v.prescription {
		return job.NormDosePrescription
	}
	return strconv.FormatFloat(v.gy, 'g', -1, 64)
}

func (v *normDoseFlag) Set(s string) error {
	if strings.EqualFold(strings.TrimSpace(s), job.NormDosePrescription) {
		v.prescription, v.gy = true, 0
		return nil
	}
	x, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil {
		return fmt.Errorf("want a dose in Gy, or %s (the RT Plan's prescription dose)", job.NormDosePrescription)
	}
	v.prescription, v.gy = false, x
	return nil
}

func (v *normDoseFlag) Type() string { return "GY|prescription" }

// overrides turns the options given on the command line into job
// overrides: options not given leave the protocol's values.
func (f *comparisonFlags) overrides(cmd *cobra.Command) job.Overrides {
	changed := func(name string) bool { return cmd.Flags().Changed(name) }
	ov := job.Overrides{
		KindRules: f.kindRules, VDoses: f.vDoses, SubGrid: f.subgrid, SubGridStep: f.subgridStep,
		MinClusterCC: f.minClusterCC, Workers: f.workers, Exhaustive: f.exhaustive, Version: version,
		NoStructures: f.noStructures, AcceptNormDose: f.acceptNormDose, ScaleEvaluated: f.scaleEvaluated,
	}
	if changed("criteria") {
		ov.Criteria = f.criteria
	}
	if changed("interpolation") {
		ov.Interpolation = f.interpolation
	}
	if changed("local") {
		ov.Local = &f.local
	}
	if changed("threshold") {
		ov.Threshold = &f.threshold
	}
	if changed("norm-dose") {
		if f.normDose.prescription {
			ov.NormDosePrescription = true
		} else {
			ov.NormDose = &f.normDose.gy
		}
	}
	if changed("search") {
		ov.Search = &f.search
	}
	if changed("isodose") {
		ov.Isodose = append([]float64{}, f.isodose...)
	}
	if changed("evaluated-noise") {
		ov.EvaluatedNoise = f.evaluatedNoise
	}
	return ov
}

// registerVerdictFlags registers the options that change what a verdict
// rests on, shared by compare, sweep, batch and watch.
func (f *comparisonFlags) registerVerdictFlags(cmd *cobra.Command) {
	fl := cmd.Flags()
	fl.BoolVar(&f.noStructures, "no-structures", false, "compare deliberately without a structure set (none is looked for in the reference folder): per-ROI rules are then not applicable instead of not met")
	fl.BoolVar(&f.acceptNormDose, "accept-norm-dose", false, "use --norm-dose (or the protocol's norm_dose_gy) as given even when it lies outside 0.5–1.5 × the reference maximum")
	fl.StringVar(&f.scaleEvaluated, "scale-evaluated", "", "multiply the evaluated dose by a factor before comparing (a per-fraction dose against a plan total): fractions (the RT Plan's number of fractions), a number such as 30, or 1/N; never done unasked")
}

// noiseHelp is the --evaluated-noise option's help.
const noiseHelp = "the evaluated dose's statistical noise, which biases Γ toward passing: auto (estimate it and correct for it), off, or σ at the evaluated maximum in percent, e.g. 2 (default: the protocol's, else auto)"

func (f *compareFlags) register(cmd *cobra.Command) {
	f.registerVerdictFlags(cmd)
	fl := cmd.Flags()
	fl.StringArrayVar(&f.reference, "reference", nil, "reference RT Dose file or folder (the planning system's dose); repeat it to sum per-beam or per-fraction-group doses of one plan")
	fl.StringVar(&f.referencePoints, "reference-points", "", "reference measured points: CSV with header x_mm,y_mm,z_mm,dose_gy (instead of --reference)")
	fl.StringArrayVar(&f.evaluated, "evaluated", nil, "evaluated RT Dose file or folder (the independent dose); repeat it to sum per-beam or per-fraction-group doses")
	fl.StringVar(&f.structures, "structures", "", "RT Structure Set file (default: the one in the reference folder, if any)")
	fl.StringVar(&f.plan, "plan", "", "RT Plan file, shown as context in the report: label, prescription, fractions, beams (default: the plan the reference dose names, when it is in the reference folder)")
	fl.StringVar(&f.criteria, "criteria", "3%/2mm", "dose-difference and distance criteria, e.g. 3%/2mm, 2%/1mm")
	fl.BoolVar(&f.local, "local", false, "local normalisation: ΔD is a percentage of the reference dose at each point")
	fl.Float64Var(&f.threshold, "threshold", 10, "low-dose threshold, percent of the normalisation dose")
	fl.Var(&f.normDose, "norm-dose", "global normalisation dose in Gy, or prescription: the RT Plan's (default: the reference maximum)")
	fl.Float64Var(&f.search, "search", 0, "maximum search distance in mm (default: 3 × DTA)")
	fl.StringVar(&f.protocol, "protocol", "tg218", "protocol file (YAML or JSON) or built-in preset: "+strings.Join(protocol.PresetNames(), ", "))
	fl.StringVar(&f.jsonOut, "json", "", "write the result as JSON to this file")
	fl.StringVar(&f.csvOut, "csv", "", "write the per-ROI table as CSV to this file")
	fl.StringVar(&f.gammaMap, "gamma-map", "", "write the Γ map: RT Dose when the name ends .dcm, MetaImage when .mha")
	fl.StringVar(&f.diffMap, "difference-map", "", "write the dose difference map (evaluated − reference, Gy): .dcm or .mha")
	fl.StringVar(&f.reportOut, "report", "", "write the review page (self-contained HTML) to this file")
	fl.StringVar(&f.reportPDF, "report-pdf", "", "write the review as a paginated PDF (for the archive) to this file")
	fl.IntVar(&f.workers, "workers", 0, "worker goroutines for the gamma search (default: all cores)")
	fl.StringArrayVar(&f.kindRules, "kind", nil, `ROI kind rule PATTERN=KIND (target, oar, body, other), e.g. "PTV*=target"; a trailing ! overrides the file's RTROIInterpretedType (repeatable)`)
	fl.Float64SliceVar(&f.isodose, "isodose", nil, "add isodose ROIs at these percentages of the normalisation dose, e.g. 50,80")
	fl.Float64SliceVar(&f.vDoses, "v-dose", nil, "report V_d (volume receiving at least d Gy) at these doses, e.g. 12,20")
	fl.StringSliceVar(&f.subgrid, "subgrid", nil, "evaluate these ROIs on a finer sub-grid of reference points (small targets)")
	fl.Float64Var(&f.subgridStep, "subgrid-step", 0.5, "step of the --subgrid reference points, mm")
	fl.BoolVar(&f.exhaustive, "exhaustive", false, "use the exhaustive search (slow; for audits)")
	registerInterpolation(cmd, &f.interpolation)
	fl.StringVar(&f.evaluatedNoise, "evaluated-noise", "auto", noiseHelp)
	fl.StringVar(&f.uncertainty, "evaluated-uncertainty", "", "the evaluated dose's per-voxel 1σ as a Monte Carlo engine exports it: RT Dose (GY: absolute; RELATIVE: σ/D) or MetaImage (.mha); replaces the estimate")
	fl.StringVar(&f.uncertaintyUnit, "evaluated-uncertainty-unit", "auto", "how --evaluated-uncertainty's values are read: auto (from the file, else by agreement with the dose's own noise), gy, relative (σ/D) or percent")
	fl.BoolVar(&f.allowFrameMismatch, "allow-frame-mismatch", false, "compare doses and structures of different frames of reference (you vouch that their coordinates agree)")
	fl.BoolVar(&f.force, "force", false, "overwrite existing output files")
	fl.BoolVar(&f.deidentify, "deidentify", false, "de-identify every output and message (DICOM PS3.15 Annex E intent): patient names and IDs become keyed pseudonyms, UIDs are remapped, dates, descriptions and file paths are left out (docs/patient-data.md)")
	deidFlags(cmd, &f.siteKey)
	fl.Float64Var(&f.minClusterCC, "min-cluster", 0.01, "smallest failing cluster listed, cm³")
	fl.StringVar(&f.resultsTo, "results-to", "", "send the gamma and difference maps (RT Dose, DoseType ERROR) to this DICOM node, AET@HOST:PORT, with dcmtk's storescu")
	fl.StringVar(&f.resultsAET, "results-aet", "", "AE title to call --results-to from (default "+dicomsend.DefaultCallingAETitle+")")
	fl.StringVar(&f.maxMemory, "max-memory", "", "memory budget, e.g. 8GiB (default: 70 % of the available memory); a comparison estimated to need more is refused before loading")
}

// checkMemory refuses, before anything is loaded, a comparison whose grids
// (read from the dose headers) need more memory than the budget.
func checkMemory(f *compareFlags) error {
	budget, source := job.DefaultBudget()
	if f.maxMemory != "" {
		b, err := job.ParseBytes(f.maxMemory)
		if err != nil {
			return fmt.Errorf("--max-memory: %w", err)
		}
		budget, source = b, "--max-memory"
	}
	var nr int64
	if len(f.reference) > 0 {
		n, err := job.DoseSetVoxels(f.reference)
		if err != nil {
			return fmt.Errorf("reference %s: %w", strings.Join(f.reference, ", "), err)
		}
		nr = n
	}
	ne, err := job.DoseSetVoxels(f.evaluated)
	if err != nil {
		return fmt.Errorf("evaluated dose %s: %w", strings.Join(f.evaluated, ", "), err)
	}
	need := job.EstimateBytes(nr, ne)
	if need > budget {
		return fmt.Errorf("the comparison needs about %s of memory (estimated from the dose grids' sizes); the budget is %s (%s): raise --max-memory or use coarser grids",
			job.FormatBytes(need), job.FormatBytes(budget), source)
	}
	return nil
}

func newCompare(g *globals) *cobra.Command {
	f := &compareFlags{}
	cmd := &cobra.Command{
		Use:   "compare --reference REF --evaluated EVAL [--structures RS] [options]",
		Short: "Compare an evaluated dose with a reference dose, per ROI",
		Long: `compare computes the gamma index of every reference voxel (or measured point)
against the evaluated dose, then pass rates, Γ statistics and dose-volume
differences for every ROI of the structure set, and checks them against a
protocol. Defaults follow AAPM TG-218 (Miften et al., Med Phys 45 (2018) e53):
3%/2mm, global normalisation to the reference maximum, 10 % threshold. Options
given on the command line override the protocol's.

Exit status: 0 every rule met, 2 a rule not met, 1 could not evaluate.`,
		Example: `  voxgamma compare --reference plan/RD.dcm --evaluated mc/RD.dcm --structures plan/RS.dcm \
      --json result.json --report report.html
  voxgamma compare --reference plan/ --evaluated mc/ --criteria 2%/1mm --protocol stereotactic
  voxgamma compare --reference-points array.csv --evaluated plan/RD.dcm --criteria 3%/3mm`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			st, err := openCompareStore(cmd, f)
			if err != nil {
				return err
			}
			if st != nil {
				defer st.Close()
			}
			out, err := runCompare(cmd.Context(), cmd, g, f)
			if err != nil {
				return err
			}
			if err := recordCompare(cmd, g, f, st, out.Result); err != nil {
				return err
			}
			return verdictOf(g, out.Result)
		},
	}
	f.register(cmd)
	f.rec.register(cmd, true)
	return cmd
}

// verdictOf turns a result into the command's outcome: nil when the
// verdict is pass (the line for stderr left in g.outcome), a verdictError
// otherwise.
func verdictOf(g *globals, r *result.Result) error {
	line := verdictLine(r)
	if r.Verdict == "pass" {
		g.outcome = line + " (exit 0)"
		return nil
	}
	return &verdictError{msg: line + " (exit 2)"}
}

// verdictLine says the verdict with the count of rule checks by outcome.
func verdictLine(r *result.Result) string {
	var met, notMet, na int
	for _, o := range r.Rules {
		switch o.Outcome {
		case result.Met:
			met++
		case result.NotApplicable:
			na++
		default:
			notMet++
		}
	}
	var s string
	switch {
	case r.Verdict == "pass":
		s = fmt.Sprintf("verdict pass: %d of %d rule checks met", met, len(r.Rules))
	case notMet == 0:
		s = fmt.Sprintf("verdict fail: no rule check could be met (%d of %d not applicable)", na, len(r.Rules))
	default:
		s = fmt.Sprintf("verdict fail: %d of %d rule checks not met", notMet, len(r.Rules))
	}
	if na > 0 && notMet > 0 || na > 0 && r.Verdict == "pass" {
		s += fmt.Sprintf(", %d not applicable", na)
	}
	return s
}

// settingsFrom resolves the protocol and the command-line overrides into
// analysis settings.
func settingsFrom(cmd *cobra.Command, f *compareFlags) (analysis.Settings, error) {
	p, err := job.LoadProtocol(f.protocol)
	if err != nil {
		return analysis.Settings{}, fmt.Errorf("--protocol: %w", err)
	}
	ov := f.overrides(cmd)
	ov.UncertaintyUnit = f.uncertaintyUnit
	return job.Settings(p, ov)
}

// inputs are the input files given, for analysis: one path per dose, or
// several files to sum.
func (f *compareFlags) inputs() analysis.Inputs {
	in := analysis.Inputs{ReferencePoints: f.referencePoints, Structures: f.structures, Plan: f.plan,
		AllowFrameMismatch: f.allowFrameMismatch, NoStructures: f.noStructures, EvaluatedUncertainty: f.uncertainty}
	if len(f.reference) == 1 {
		in.Reference = f.reference[0]
	} else {
		in.ReferenceFiles = f.reference
	}
	if len(f.evaluated) == 1 {
		in.Evaluated = f.evaluated[0]
	} else {
		in.EvaluatedFiles = f.evaluated
	}
	return in
}

// givenPaths lists every input path given, which no output may replace.
func (f *compareFlags) givenPaths() []string {
	p := append(append([]string{}, f.reference...), f.evaluated...)
	return append(p, f.referencePoints, f.structures, f.plan, f.uncertainty)
}

func (f *compareFlags) outputs() job.Outputs {
	return job.Outputs{JSON: f.jsonOut, CSV: f.csvOut, GammaMap: f.gammaMap, DifferenceMap: f.diffMap, Report: f.reportOut, ReportPDF: f.reportPDF,
		ResultsTo: f.resultsTo, ResultsAET: f.resultsAET}
}

// deidScope starts the de-identification when asked (see startDeid) and
// returns the scope of this comparison's inputs, their paths registered;
// nil without --deidentify.
func (f *compareFlags) deidScope(g *globals) (*deid.Scope, error) {
	run, err := startDeid(g, f.deidentify, f.siteKey)
	if run == nil {
		return nil, err
	}
	d := run.Base()
	for _, p := range f.reference {
		d.Path(p, "reference")
	}
	d.Path(f.referencePoints, "reference points")
	for _, p := range f.evaluated {
		d.Path(p, "evaluated")
	}
	d.Path(f.structures, "structures")
	d.Path(f.plan, "plan")
	return d, nil
}

// runCompare is compare from flags to written outputs.
func runCompare(ctx context.Context, cmd *cobra.Command, g *globals, f *compareFlags) (*analysis.Outcome, error) {
	d, err := f.deidScope(g)
	if err != nil {
		return nil, err
	}
	s, err := settingsFrom(cmd, f)
	if err != nil {
		return nil, err
	}
	if f.referencePoints != "" && (f.gammaMap != "" || f.diffMap != "" || f.reportOut != "" || f.reportPDF != "") {
		return nil, errors.New("--gamma-map, --difference-map, --report and --report-pdf need a reference grid, not --reference-points")
	}
	if len(f.reference) == 0 && f.referencePoints == "" {
		return nil, errors.New("--reference (or --reference-points) is required")
	}
	if len(f.evaluated) == 0 {
		return nil, errors.New("--evaluated is required")
	}
	outs := f.outputs()
	if err := outs.Check(f.givenPaths(), f.force); err != nil {
		return nil, err
	}
	if err := checkMemory(f); err != nil {
		return nil, err
	}
	in := f.inputs()
	if d != nil {
		in.Seen = d.Seen
	}
	out, err := compareInputs(ctx, g, in, s, outs, f.force)
	if err != nil {
		return nil, err
	}
	if err := job.Write(outs, out, d); err != nil {
		return nil, err
	}
	for _, p := range outs.List() {
		g.log.Info("wrote", "file", p)
	}
	if !g.quiet {
		printSummary(g, out.Result)
	} else {
		// Quiet keeps the one warning that says the result may answer
		// the wrong question.
		for _, w := range out.Result.Warnings {
			if strings.HasPrefix(w, analysis.SwapWarning) {
				fmt.Fprintf(g.stderr, "warning: %s\n", w)
			}
		}
	}
	return out, nil
}

// compareInputs runs one comparison with a progress bar on a terminal.
func compareInputs(ctx context.Context, g *globals, in analysis.Inputs, s analysis.Settings, outs job.Outputs, force bool) (*analysis.Outcome, error) {
	if ctx == nil {
		ctx = context.Background()
	}
	ctx, stop := signal.NotifyContext(ctx, os.Interrupt, syscall.SIGTERM)
	defer stop()
	g.log.Debug("loading", "reference", in.Reference, "points", in.ReferencePoints, "evaluated", in.Evaluated, "structures", in.Structures)
	bar := newProgress(g.term, g.quiet, "gamma")
	s.Progress = bar.update
	out, err := job.CompareFor(ctx, in, s, outs, force)
	bar.done()
	if err != nil {
		return nil, err
	}
	return out, nil
}

func printSummary(g *globals, r *result.Result) {
	w := g.stdout
	fmt.Fprintf(w, "voxgamma %s: %s, threshold %g %%, normalisation dose %.4g Gy (%s), search %g mm\n",
		r.Version, r.Criteria.Label, r.Criteria.ThresholdPercent, r.Criteria.NormDoseGy, r.Criteria.NormDoseSource, r.Criteria.SearchMM)
	fmt.Fprintf(w, "overall: %s %% of %d points pass (Γ mean %s, P95 %s, max %s); %s %% of the points above the threshold compared\n",
		r.Overall.PassRateText, r.Overall.Evaluated, num(r.Overall.GammaMean), num(r.Overall.GammaP95), num(r.Overall.GammaMax),
		percentText(r.Overall.CoveragePercent))
	corrected := r.Noise != nil && r.Noise.Corrected
	if n := r.Noise; n != nil {
		fmt.Fprintf(w, "evaluated-dose noise: %s\n", noiseLine(n, r))
	}
	if len(r.ROIs) > 0 {
		raw := ""
		if corrected {
			raw = fmt.Sprintf(" %8s", "raw %")
		}
		fmt.Fprintf(w, "%-24s %-6s %10s %9s %8s%s %7s %7s %8s  %s\n", "ROI", "kind", "volume cc", "evaluated", "pass %", raw, "Γ mean", "ΔD95 %", "covered", "status")
		for i, x := range r.ROIs {
			d95 := "-"
			if x.DVH != nil && x.DVH.DifferencePercent.D95Gy != nil {
				d95 = fmt.Sprintf("%+.2f", *x.DVH.DifferencePercent.D95Gy)
			}
			status := string(x.Status)
			if x.StatusDetail != "" {
				status += " (" + x.StatusDetail + ")"
			}
			raw := ""
			if corrected && i < len(r.Noise.ROIs) {
				raw = fmt.Sprintf(" %8s", r.Noise.ROIs[i].PassRateText)
			}
			fmt.Fprintf(w, "%-24s %-6s %10.3f %9d %8s%s %7s %7s %8s  %s\n", truncate(x.Name, 24), x.Kind, x.VolumeCC, x.Evaluated, x.PassRateText, raw, num(x.GammaMean), d95,
				percentText(x.CoveredPercent), status)
		}
	}
	for _, c := range r.Clusters {
		if len(r.Clusters) > 0 && c.VolumeCC == r.Clusters[0].VolumeCC {
			fmt.Fprintf(w, "largest failing cluster: %.3f cc at (%.1f, %.1f, %.1f) mm, max Γ %.2f, touching %s\n",
				c.VolumeCC, c.CentroidMM[0], c.CentroidMM[1], c.CentroidMM[2], c.GammaMax, strings.Join(c.ROIs, ", "))
			break
		}
	}
	for _, o := range r.Rules {
		fmt.Fprintln(w, ruleLine(o))
	}
	for _, x := range r.Warnings {
		fmt.Fprintf(g.stderr, "warning: %s\n", x)
	}
	fmt.Fprintf(w, "verdict: %s. %s\n", r.Verdict, result.Caution)
}

// ruleLine writes one rule outcome for the console: its mark, the rule,
// the subject, the value as every output shows it, why it was not met or
// not applicable, and the choices it was judged under.
func ruleLine(o result.RuleOutcome) string {
	mark := "met           "
	switch o.Outcome {
	case result.NotApplicable:
		mark = "not applicable"
	case result.NotMet:
		mark = "NOT MET       "
	}
	value := o.ValueText
	if value == "" {
		value = "n/a"
	}
	line := fmt.Sprintf("[%s] %s (%s): %s", mark, o.Rule, o.Subject, value)
	if o.Outcome != result.Met && o.Reason != "" {
		line += ": " + o.Reason
	}
	for _, c := range o.Conditions {
		line += "\n    under: " + c
	}
	return line
}

// percentText writes a percentage by the one display rule, two decimals.
func percentText(p *float64) string {
	if p == nil {
		return "n/a"
	}
	return result.FormatPercent(*p, 2)
}

// noiseLine says in one line what is known of the evaluated dose's noise
// and what was done: σ, its source, and the raw and corrected overall
// pass rates side by side.
func noiseLine(n *result.Noise, r *result.Result) string {
	sigma := "unknown"
	if n.SigmaPercent != nil {
		sigma = fmt.Sprintf("σ %.3g", *n.SigmaPercent)
		if n.SigmaUncertaintyPercent != nil {
			sigma += fmt.Sprintf(" ± %.2g", *n.SigmaUncertaintyPercent)
		}
		sigma += " % at the maximum"
	}
	src := n.Source
	if src == "" {
		src = "not estimated"
	}
	s := fmt.Sprintf("%s (%s)", sigma, src)
	if !n.Corrected {
		return s + ", no correction"
	}
	return s + fmt.Sprintf("; overall pass rate raw %s %% → corrected %s %%; the rules judged the %s figures",
		n.RawOverall.PassRateText, r.Overall.PassRateText, n.Judged)
}

func num(p *float64) string {
	if p == nil {
		return "n/a"
	}
	return fmt.Sprintf("%.3g", *p)
}

func truncate(s string, n int) string {
	r := []rune(s)
	if len(r) <= n {
		return s
	}
	return string(r[:n-1]) + "…"
}

// registerInterpolation registers --interpolation, shared by every command
// that runs comparisons.
func registerInterpolation(cmd *cobra.Command, v *string) {
	cmd.Flags().StringVar(v, "interpolation", gamma.CubicBSpline.String(), "evaluated dose between its grid nodes: "+strings.Join(gamma.InterpolationNames(), ", ")+" (recorded in the result)")
}
