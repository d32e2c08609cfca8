package main

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"voxgamma/analysis"
	"voxgamma/dicomio"
	"voxgamma/gamma"
	"voxgamma/metaimage"
	"voxgamma/protocol"
	"voxgamma/report"
	"voxgamma/result"
	"voxgamma/roi"
	"voxgamma/volume"
)

// compareFlags are the options of compare (and of the commands built on it).
type compareFlags struct {
	reference, referencePoints, evaluated, structures string
	criteria                                          string
	local                                             bool
	threshold, normDose, search                       float64
	protocol                                          string
	jsonOut, csvOut, gammaMap, diffMap, reportOut     string
	workers                                           int
	kindRules                                         []string
	isodose                                           []float64
	vDoses                                            []float64
	subgrid                                           []string
	subgridStep                                       float64
	exhaustive                                        bool
	allowFrameMismatch, force, deidentify             bool
	minClusterCC                                      float64
}

func (f *compareFlags) register(cmd *cobra.Command) {
	fl := cmd.Flags()
	fl.StringVar(&f.reference, "reference", "", "reference RT Dose file or folder (the planning system's dose)")
	fl.StringVar(&f.referencePoints, "reference-points", "", "reference measured points: CSV with header x_mm,y_mm,z_mm,dose_gy (instead of --reference)")
	fl.StringVar(&f.evaluated, "evaluated", "", "evaluated RT Dose file or folder (the independent dose)")
	fl.StringVar(&f.structures, "structures", "", "RT Structure Set file (default: the one in the reference folder, if any)")
	fl.StringVar(&f.criteria, "criteria", "3%/2mm", "dose-difference and distance criteria, e.g. 3%/2mm, 2%/1mm")
	fl.BoolVar(&f.local, "local", false, "local normalisation: ΔD is a percentage of the reference dose at each point")
	fl.Float64Var(&f.threshold, "threshold", 10, "low-dose threshold, percent of the normalisation dose")
	fl.Float64Var(&f.normDose, "norm-dose", 0, "global normalisation dose in Gy (default: the reference maximum)")
	fl.Float64Var(&f.search, "search", 0, "maximum search distance in mm (default: 3 × DTA)")
	fl.StringVar(&f.protocol, "protocol", "tg218", "protocol file (YAML or JSON) or built-in preset: "+strings.Join(protocol.PresetNames(), ", "))
	fl.StringVar(&f.jsonOut, "json", "", "write the result as JSON to this file")
	fl.StringVar(&f.csvOut, "csv", "", "write the per-ROI table as CSV to this file")
	fl.StringVar(&f.gammaMap, "gamma-map", "", "write the Γ map: RT Dose when the name ends .dcm, MetaImage when .mha")
	fl.StringVar(&f.diffMap, "difference-map", "", "write the dose difference map (evaluated − reference, Gy): .dcm or .mha")
	fl.StringVar(&f.reportOut, "report", "", "write the review page (self-contained HTML) to this file")
	fl.IntVar(&f.workers, "workers", 0, "worker goroutines for the gamma search (default: all cores)")
	fl.StringArrayVar(&f.kindRules, "kind", nil, `ROI kind rule PATTERN=KIND (target, oar, body, other), e.g. "PTV*=target"; a trailing ! overrides the file's RTROIInterpretedType (repeatable)`)
	fl.Float64SliceVar(&f.isodose, "isodose", nil, "add isodose ROIs at these percentages of the normalisation dose, e.g. 50,80")
	fl.Float64SliceVar(&f.vDoses, "v-dose", nil, "report V_d (volume receiving at least d Gy) at these doses, e.g. 12,20")
	fl.StringSliceVar(&f.subgrid, "subgrid", nil, "evaluate these ROIs on a finer sub-grid of reference points (small targets)")
	fl.Float64Var(&f.subgridStep, "subgrid-step", 0.5, "step of the --subgrid reference points, mm")
	fl.BoolVar(&f.exhaustive, "exhaustive", false, "use the exhaustive search (slow; for audits)")
	fl.BoolVar(&f.allowFrameMismatch, "allow-frame-mismatch", false, "compare doses and structures of different frames of reference (you vouch that their coordinates agree)")
	fl.BoolVar(&f.force, "force", false, "overwrite existing output files")
	fl.BoolVar(&f.deidentify, "deidentify", false, "replace patient names and IDs with a hash and leave dates out of every output")
	fl.Float64Var(&f.minClusterCC, "min-cluster", 0.01, "smallest failing cluster listed, cm³")
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
			out, err := runCompare(cmd.Context(), cmd, g, f)
			if err != nil {
				return err
			}
			return verdictOf(out.Result)
		},
	}
	f.register(cmd)
	return cmd
}

// verdictOf turns a result into the command's outcome: nil when every rule
// was met, a verdictError otherwise.
func verdictOf(r *result.Result) error {
	failed := 0
	for _, o := range r.Rules {
		if !o.Met {
			failed++
		}
	}
	if r.Verdict == "pass" {
		return nil
	}
	return &verdictError{msg: fmt.Sprintf("verdict fail: %d of %d rule checks not met (exit 2)", failed, len(r.Rules))}
}

// settingsFrom resolves the protocol and the command-line overrides into
// analysis settings.
func settingsFrom(cmd *cobra.Command, f *compareFlags) (analysis.Settings, *protocol.Protocol, []string, error) {
	var s analysis.Settings
	var warnings []string
	p, err := loadProtocol(f.protocol)
	if err != nil {
		return s, nil, nil, err
	}
	c, err := p.GammaCriteria()
	if err != nil {
		return s, nil, nil, fmt.Errorf("protocol %s: %w", p.Name, err)
	}
	changed := func(name string) bool { return cmd.Flags().Changed(name) }
	if changed("criteria") {
		if c.DosePercent, c.DTA, err = gamma.ParseCriteria(f.criteria); err != nil {
			return s, nil, nil, fmt.Errorf("--criteria: %w", err)
		}
	}
	if changed("local") {
		c.Normalisation = gamma.Global
		if f.local {
			c.Normalisation = gamma.Local
		}
	}
	if changed("threshold") {
		c.ThresholdPercent = f.threshold
	}
	if changed("norm-dose") {
		if !(f.normDose > 0) {
			return s, nil, nil, fmt.Errorf("--norm-dose %g: want a dose above 0 Gy", f.normDose)
		}
		c.NormDose = f.normDose
	}
	if changed("search") {
		if !(f.search > 0) {
			return s, nil, nil, fmt.Errorf("--search %g: want a distance above 0 mm", f.search)
		}
		c.Search = f.search
	}
	if err := c.Validate(); err != nil {
		return s, nil, nil, err
	}
	rules, err := p.ROIRules()
	if err != nil {
		return s, nil, nil, fmt.Errorf("protocol %s: %w", p.Name, err)
	}
	for _, kr := range f.kindRules {
		r, err := roi.ParseRule(kr)
		if err != nil {
			return s, nil, nil, fmt.Errorf("--kind %q: %w", kr, err)
		}
		rules = append([]roi.Rule{r}, rules...) // command-line rules first
	}
	iso := p.Isodose
	if changed("isodose") {
		iso = f.isodose
	}
	for _, v := range iso {
		if !(v > 0 && v <= 100) {
			return s, nil, nil, fmt.Errorf("isodose level %g %%: want a percentage above 0 and at most 100", v)
		}
	}
	for _, v := range f.vDoses {
		if !(v >= 0) {
			return s, nil, nil, fmt.Errorf("--v-dose %g: want a dose of 0 Gy or more", v)
		}
	}
	if f.subgridStep <= 0 {
		return s, nil, nil, fmt.Errorf("--subgrid-step %g: want a step above 0 mm", f.subgridStep)
	}
	if f.workers < 0 {
		return s, nil, nil, fmt.Errorf("--workers %d: want 0 (all cores) or more", f.workers)
	}
	s = analysis.Settings{
		Criteria: c, KindRules: rules, IsodosePercents: iso, VDoses: f.vDoses,
		SubGridROIs: f.subgrid, SubGridStep: f.subgridStep, MinClusterCC: f.minClusterCC,
		Workers: f.workers, Checker: p, Protocol: p, Version: version,
	}
	if c.NormDose > 0 {
		s.NormDoseSource = "user"
		if !changed("norm-dose") {
			s.NormDoseSource = "protocol"
		}
	}
	if f.exhaustive {
		s.Method = gamma.Exhaustive
	}
	return s, p, warnings, nil
}

func loadProtocol(name string) (*protocol.Protocol, error) {
	if _, err := os.Stat(name); err == nil {
		p, err := protocol.Load(name)
		if err != nil {
			return nil, err
		}
		return p, nil
	}
	if p, ok := protocol.Preset(name); ok {
		return p, nil
	}
	return nil, fmt.Errorf("--protocol %q: no such file, and not a preset (%s)", name, strings.Join(protocol.PresetNames(), ", "))
}

// outputs are the files compare writes, checked before any computation.
type outputs struct {
	json, csv, gammaMap, diffMap, report string
}

func (o outputs) list() []string {
	var l []string
	for _, p := range []string{o.json, o.csv, o.gammaMap, o.diffMap, o.report} {
		if p != "" {
			l = append(l, p)
		}
	}
	return l
}

// checkOutputs refuses output paths that would replace an input or another
// output, existing files unless force, missing directories, unwritable
// directories and map names without a known extension.
func checkOutputs(o outputs, inputs []string, force bool) error {
	seen := map[string]string{}
	in := map[string]bool{}
	for _, p := range inputs {
		if p != "" {
			in[canonical(p)] = true
		}
	}
	for _, m := range []struct{ flag, path string }{{"--gamma-map", o.gammaMap}, {"--difference-map", o.diffMap}} {
		if m.path != "" {
			ext := strings.ToLower(filepath.Ext(m.path))
			if ext != ".dcm" && ext != ".mha" {
				return fmt.Errorf("%s %s: the name must end in .dcm (RT Dose) or .mha (MetaImage)", m.flag, m.path)
			}
		}
	}
	for _, p := range o.list() {
		c := canonical(p)
		if in[c] {
			return fmt.Errorf("output %s is an input file: refusing to overwrite it", p)
		}
		if other, dup := seen[c]; dup {
			return fmt.Errorf("output %s is named twice (also as %s)", p, other)
		}
		seen[c] = p
		if st, err := os.Stat(p); err == nil {
			if st.IsDir() {
				return fmt.Errorf("output %s is a directory", p)
			}
			if !force {
				return fmt.Errorf("output %s exists (pass --force to overwrite)", p)
			}
		}
		dir := filepath.Dir(p)
		st, err := os.Stat(dir)
		if err != nil || !st.IsDir() {
			return fmt.Errorf("output %s: directory %s does not exist", p, dir)
		}
		tmp, err := os.CreateTemp(dir, ".voxgamma-write-test-*")
		if err != nil {
			return fmt.Errorf("output %s: directory %s is not writable: %v", p, dir, err)
		}
		tmp.Close()
		os.Remove(tmp.Name())
	}
	return nil
}

// canonical returns an absolute, symlink-resolved form of path for
// comparisons (the path as given when it cannot be resolved).
func canonical(p string) string {
	a, err := filepath.Abs(p)
	if err != nil {
		return p
	}
	if r, err := filepath.EvalSymlinks(a); err == nil {
		return r
	}
	if r, err := filepath.EvalSymlinks(filepath.Dir(a)); err == nil {
		return filepath.Join(r, filepath.Base(a))
	}
	return a
}

// runCompare is compare from flags to written outputs.
func runCompare(ctx context.Context, cmd *cobra.Command, g *globals, f *compareFlags) (*analysis.Outcome, error) {
	s, _, warnings, err := settingsFrom(cmd, f)
	if err != nil {
		return nil, err
	}
	outs := outputs{json: f.jsonOut, csv: f.csvOut, gammaMap: f.gammaMap, diffMap: f.diffMap, report: f.reportOut}
	if f.referencePoints != "" && (f.gammaMap != "" || f.diffMap != "") {
		return nil, errors.New("--gamma-map and --difference-map need a reference grid, not --reference-points")
	}
	if err := checkOutputs(outs, []string{f.reference, f.referencePoints, f.evaluated, f.structures}, f.force); err != nil {
		return nil, err
	}
	in := analysis.Inputs{Reference: f.reference, ReferencePoints: f.referencePoints, Evaluated: f.evaluated,
		Structures: f.structures, AllowFrameMismatch: f.allowFrameMismatch}
	if in.Reference == "" && in.ReferencePoints == "" {
		return nil, errors.New("--reference (or --reference-points) is required")
	}
	if in.Evaluated == "" {
		return nil, errors.New("--evaluated is required")
	}
	out, err := compareInputs(ctx, g, in, s, warnings)
	if err != nil {
		return nil, err
	}
	if err := writeOutputs(g, outs, out, f.force, f.deidentify); err != nil {
		return nil, err
	}
	return out, nil
}

// compareInputs loads, prepares and runs one comparison, with a progress bar
// on a terminal.
func compareInputs(ctx context.Context, g *globals, in analysis.Inputs, s analysis.Settings, warnings []string) (*analysis.Outcome, error) {
	if ctx == nil {
		ctx = context.Background()
	}
	ctx, stop := signal.NotifyContext(ctx, os.Interrupt, syscall.SIGTERM)
	defer stop()
	g.log.Debug("loading", "reference", in.Reference, "points", in.ReferencePoints, "evaluated", in.Evaluated, "structures", in.Structures)
	l, err := analysis.Load(in)
	if err != nil {
		return nil, err
	}
	p, err := analysis.Prepare(l, s)
	if err != nil {
		return nil, err
	}
	bar := newProgress(g.stderr, g.quiet, "gamma")
	s.Progress = bar.update
	out, err := p.Run(ctx, s)
	bar.done()
	if err != nil {
		return nil, err
	}
	r := out.Result
	r.Warnings = append(r.Warnings, warnings...)
	if pr, ok := s.Protocol.(*protocol.Protocol); ok {
		if err := pr.CheckCriteria(r.Criteria); err != nil {
			r.Warnings = append(r.Warnings, fmt.Sprintf("criteria differ from protocol %q (its limits were set for its own criteria): %v", pr.Name, oneLine(err.Error())))
		}
	}
	if !g.quiet {
		printSummary(g, r)
	}
	return out, nil
}

// writeOutputs writes every requested output; the first failure is the
// command's error (exit status 1).
func writeOutputs(g *globals, o outputs, out *analysis.Outcome, force, deidentify bool) error {
	r := out.Result
	ids := referenceIdentifiers(out)
	if deidentify {
		deidentifyResult(r)
		ids = deidentifyIDs(ids)
	}
	if o.json != "" {
		if err := report.WriteJSON(o.json, r); err != nil {
			return err
		}
	}
	if o.csv != "" {
		if err := report.WriteCSV(o.csv, r); err != nil {
			return err
		}
	}
	if o.gammaMap != "" {
		desc := "gamma index " + r.Criteria.Label + ", unitless"
		if err := writeMap(o.gammaMap, out.Gamma, ids, dicomio.GammaOptions(desc)); err != nil {
			return err
		}
	}
	if o.diffMap != "" {
		if err := writeMap(o.diffMap, out.Difference, ids, dicomio.DifferenceOptions("dose difference evaluated-reference, Gy")); err != nil {
			return err
		}
	}
	if o.report != "" {
		page := report.Page{Result: r, Reference: out.Reference, Gamma: out.Gamma}
		for i, reg := range out.Regions {
			if len(reg.Centres) == 0 || reg.Number == 0 {
				continue
			}
			page.ROIs = append(page.ROIs, report.PageROI{Name: reg.Name, Color: out.Colors[i], Mask: reg.Mask()})
		}
		if !deidentify {
			page.Generated = r.Run.Started
		}
		if err := report.WriteHTML(o.report, page); err != nil {
			return err
		}
	}
	for _, p := range o.list() {
		g.log.Info("wrote", "file", p)
	}
	return nil
}

func writeMap(path string, grid *volume.Grid, ids dicomio.Identifiers, opt dicomio.WriteOptions) error {
	if grid == nil {
		return fmt.Errorf("%s: no map to write (the reference is not a grid)", path)
	}
	if strings.EqualFold(filepath.Ext(path), ".mha") {
		return metaimage.Write(path, grid)
	}
	_, err := dicomio.WriteDose(path, grid, ids, opt)
	return err
}

func referenceIdentifiers(out *analysis.Outcome) dicomio.Identifiers {
	if out.ReferenceInfo != nil {
		return out.ReferenceInfo.Identifiers
	}
	return dicomio.Identifiers{}
}

// pseudonym is a stable hash standing in for a patient name or ID.
func pseudonym(s string) string {
	if s == "" {
		return ""
	}
	h := sha256.Sum256([]byte("voxgamma-deidentify:" + s))
	return "ANON-" + strings.ToUpper(hex.EncodeToString(h[:6]))
}

func deidentifyResult(r *result.Result) {
	for i := range r.Inputs {
		r.Inputs[i].PatientName = pseudonym(r.Inputs[i].PatientName)
		r.Inputs[i].PatientID = pseudonym(r.Inputs[i].PatientID)
	}
	r.Run.Started = ""
	r.Notes = append(r.Notes, "de-identified: patient names and IDs replaced with hashes, dates left out")
}

func deidentifyIDs(ids dicomio.Identifiers) dicomio.Identifiers {
	return dicomio.Identifiers{
		PatientName: pseudonym(ids.PatientName), PatientID: pseudonym(ids.PatientID),
		StudyInstanceUID: dicomio.NewUID(), FrameOfReferenceUID: dicomio.NewUID(),
	}
}

func printSummary(g *globals, r *result.Result) {
	w := g.stdout
	fmt.Fprintf(w, "voxgamma %s: %s, threshold %g %%, normalisation dose %.4g Gy (%s), search %g mm\n",
		r.Version, r.Criteria.Label, r.Criteria.ThresholdPercent, r.Criteria.NormDoseGy, r.Criteria.NormDoseSource, r.Criteria.SearchMM)
	fmt.Fprintf(w, "overall: %s %% of %d points pass (Γ mean %s, P95 %s, max %s)\n",
		r.Overall.PassRateText, r.Overall.Evaluated, num(r.Overall.GammaMean), num(r.Overall.GammaP95), num(r.Overall.GammaMax))
	if len(r.ROIs) > 0 {
		fmt.Fprintf(w, "%-24s %-6s %10s %9s %8s %7s %7s  %s\n", "ROI", "kind", "volume cc", "evaluated", "pass %", "Γ mean", "ΔD95 %", "status")
		for _, x := range r.ROIs {
			d95 := "-"
			if x.DVH != nil && x.DVH.DifferencePercent.D95Gy != nil {
				d95 = fmt.Sprintf("%+.2f", *x.DVH.DifferencePercent.D95Gy)
			}
			fmt.Fprintf(w, "%-24s %-6s %10.3f %9d %8s %7s %7s  %s\n", truncate(x.Name, 24), x.Kind, x.VolumeCC, x.Evaluated, x.PassRateText, num(x.GammaMean), d95, x.Status)
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
		mark := "met    "
		if !o.Met {
			mark = "NOT MET"
		}
		value := "n/a"
		if o.Value != nil {
			value = fmt.Sprintf("%.2f", *o.Value)
		}
		fmt.Fprintf(w, "[%s] %s (%s): %s\n", mark, o.Rule, o.Subject, value)
	}
	for _, x := range r.Warnings {
		fmt.Fprintf(g.stderr, "warning: %s\n", x)
	}
	fmt.Fprintf(w, "verdict: %s. %s\n", r.Verdict, result.Caution)
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
