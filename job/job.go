package job

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime/debug"
	"slices"
	"strconv"
	"strings"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/dicomio"
	"voxgamma/dicomsend"
	"voxgamma/gamma"
	"voxgamma/internal/atomicfile"
	"voxgamma/internal/fault"
	"voxgamma/internal/pathcheck"
	"voxgamma/metaimage"
	"voxgamma/noise"
	"voxgamma/protocol"
	"voxgamma/report"
	"voxgamma/result"
	"voxgamma/roi"
	"voxgamma/volume"
)

// LoadProtocol returns the protocol in the file name, or the built-in
// preset of that name when no such file exists.
func LoadProtocol(name string) (*protocol.Protocol, error) {
	if _, err := os.Stat(name); err == nil {
		return protocol.Load(name)
	}
	if p, ok := protocol.Preset(name); ok {
		return p, nil
	}
	return nil, fmt.Errorf("protocol %q: no such file, and not a preset (%s)", name, strings.Join(protocol.PresetNames(), ", "))
}

// Overrides are settings given besides the protocol (on a command line);
// nil pointers and empty strings leave the protocol's value.
type Overrides struct {
	// Criteria in the trade's notation, e.g. "2%/1mm".
	Criteria string
	// Local selects local (true) or global (false) normalisation.
	Local *bool
	// Threshold in percent, NormDose in Gy, Search in mm.
	Threshold, NormDose, Search *float64
	// NormDosePrescription normalises to the RT Plan's prescription dose
	// (--norm-dose prescription), replacing the protocol's normalisation
	// dose.
	NormDosePrescription bool
	// KindRules in roi.ParseRule's form ("PTV*=target"), applied before
	// the protocol's.
	KindRules []string
	// Isodose replaces the protocol's isodose ROIs when not nil.
	Isodose []float64
	// VDoses are the doses (Gy) at which V_d is reported.
	VDoses []float64
	// SubGrid names ROIs to evaluate on a sub-grid of step SubGridStep mm.
	SubGrid     []string
	SubGridStep float64
	// MinClusterCC is the smallest failing cluster listed.
	MinClusterCC float64
	// Workers for the gamma search; 0 means all cores.
	Workers int
	// Exhaustive selects the exhaustive search.
	Exhaustive bool
	// NoStructures runs the comparison deliberately without a structure
	// set: per-ROI rules are not applicable rather than not met.
	NoStructures bool
	// AcceptNormDose uses a normalisation dose outside the plausible band
	// of the reference maximum as given (see analysis.NormDoseBand).
	AcceptNormDose bool
	// ScaleEvaluated multiplies the evaluated dose before the comparison:
	// "fractions", a factor or "1/N" (see analysis.ParseScale); "" leaves
	// it as read.
	ScaleEvaluated string
	// Interpolation names the evaluated dose's interpolation
	// (gamma.ParseInterpolation); empty means the default.
	Interpolation string
	// EvaluatedNoise replaces the protocol's noise handling when not
	// empty: "auto", "off" or σ at the evaluated maximum in percent.
	EvaluatedNoise string
	// UncertaintyUnit says how an uncertainty map's values are read:
	// "auto" (or empty), "gy", "relative" or "percent".
	UncertaintyUnit string
	// Version is recorded in the result.
	Version string
}

// NormDosePrescription is the word --norm-dose takes for the RT Plan's
// prescription dose.
const NormDosePrescription = "prescription"

// MaxIsodoseROIs bounds the isodose ROIs of one comparison.
const MaxIsodoseROIs = 20

// Settings resolves a protocol and overrides into analysis settings. Every
// error names the option or the protocol at fault.
func Settings(p *protocol.Protocol, ov Overrides) (analysis.Settings, error) {
	var s analysis.Settings
	c, err := p.GammaCriteria()
	if err != nil {
		return s, fmt.Errorf("protocol %s: %w", p.Name, err)
	}
	want := c
	var overrides []string
	if ov.Criteria != "" {
		if c.DosePercent, c.DTA, err = gamma.ParseCriteria(ov.Criteria); err != nil {
			return s, fmt.Errorf("--criteria: %w", err)
		}
	}
	if ov.Local != nil {
		c.Normalisation = gamma.Global
		if *ov.Local {
			c.Normalisation = gamma.Local
		}
	}
	// In gamma.Criteria, 0 means "the default" for the normalisation dose
	// and the search distance; given as an option, 0 is a mistake.
	if ov.Threshold != nil {
		c.ThresholdPercent = *ov.Threshold
	}
	if ov.NormDose != nil {
		if *ov.NormDose == 0 {
			return s, fmt.Errorf("--norm-dose 0: want a dose above 0 Gy")
		}
		c.NormDose = *ov.NormDose
	}
	if ov.Search != nil {
		if *ov.Search == 0 {
			return s, fmt.Errorf("--search 0: want a distance above 0 mm")
		}
		c.Search = *ov.Search
	}
	// Record every option that replaced a protocol value with another.
	if ov.Criteria != "" && (c.DosePercent != want.DosePercent || c.DTA != want.DTA) {
		overrides = append(overrides, fmt.Sprintf("criteria %s%%/%smm from --criteria (protocol: %s)", num(c.DosePercent), num(c.DTA), p.Criteria.Criteria))
	}
	if ov.Local != nil && c.Normalisation != want.Normalisation {
		overrides = append(overrides, fmt.Sprintf("%s normalisation from --local (protocol: %s)", c.Normalisation, want.Normalisation))
	}
	if ov.Threshold != nil && c.ThresholdPercent != want.ThresholdPercent {
		overrides = append(overrides, fmt.Sprintf("threshold %s %% from --threshold (protocol: %s %%)", num(c.ThresholdPercent), num(want.ThresholdPercent)))
	}
	fromPlan := p.NormDoseFromPlan() && ov.NormDose == nil
	if ov.NormDosePrescription {
		c.NormDose = 0
		if !p.NormDoseFromPlan() {
			was := "the reference maximum"
			if want.NormDose > 0 {
				was = num(want.NormDose) + " Gy"
			}
			overrides = append(overrides, fmt.Sprintf("normalisation dose the RT Plan's prescription from --norm-dose prescription (protocol: %s)", was))
		}
		fromPlan = true
	}
	if ov.NormDose != nil && p.NormDoseFromPlan() {
		overrides = append(overrides, fmt.Sprintf("normalisation dose %s Gy from --norm-dose (protocol: the RT Plan's prescription)", num(c.NormDose)))
	}
	if ov.NormDose != nil && c.NormDose != want.NormDose && !p.NormDoseFromPlan() {
		was := "the reference maximum"
		if want.NormDose > 0 {
			was = num(want.NormDose) + " Gy"
		}
		overrides = append(overrides, fmt.Sprintf("normalisation dose %s Gy from --norm-dose (protocol: %s)", num(c.NormDose), was))
	}
	if ov.Search != nil && c.SearchRadius() != want.SearchRadius() {
		overrides = append(overrides, fmt.Sprintf("search distance %s mm from --search (protocol: %s mm)", num(c.SearchRadius()), num(want.SearchRadius())))
	}
	if err := c.Validate(); err != nil {
		// Name the option when the value came from one.
		var ce *gamma.CriteriaError
		given := map[string]bool{"dose": ov.Criteria != "", "dta": ov.Criteria != "",
			"threshold": ov.Threshold != nil, "norm-dose": ov.NormDose != nil, "search": ov.Search != nil}
		if errors.As(err, &ce) && given[ce.Field] {
			opt := ce.Field
			if opt == "dose" || opt == "dta" {
				opt = "criteria"
			}
			return s, fmt.Errorf("--%s %g: %s", opt, ce.Value, ce.Want)
		}
		return s, fmt.Errorf("protocol %s: %w", p.Name, err)
	}
	rules, err := p.ROIRules()
	if err != nil {
		return s, fmt.Errorf("protocol %s: %w", p.Name, err)
	}
	var cli []roi.Rule
	for _, kr := range ov.KindRules {
		r, err := roi.ParseRule(kr)
		if err != nil {
			return s, fmt.Errorf("--kind %q: %w", kr, err)
		}
		cli = append(cli, r)
	}
	rules = append(cli, rules...)
	iso := p.Isodose
	if ov.Isodose != nil {
		iso = ov.Isodose
		if !slices.Equal(iso, p.Isodose) {
			overrides = append(overrides, fmt.Sprintf("isodose ROIs %s from --isodose (protocol: %s)", percents(iso), percents(p.Isodose)))
		}
	}
	if len(iso) > MaxIsodoseROIs {
		what := "protocol " + p.Name + ": isodose_rois"
		if ov.Isodose != nil {
			what = "--isodose"
		}
		// Each level is a region as large as the reference grid: a
		// thousand of them would exhaust the memory.
		return s, fmt.Errorf("%s: %d levels, at most %d", what, len(iso), MaxIsodoseROIs)
	}
	for _, v := range iso {
		if !(v > 0 && v <= 100) {
			what := "protocol " + p.Name + ": "
			if ov.Isodose != nil {
				what = "--isodose: "
			}
			return s, fmt.Errorf("%sisodose level %g %%: want a percentage above 0 and at most 100", what, v)
		}
	}
	for _, v := range ov.VDoses {
		if !(v >= 0) {
			return s, fmt.Errorf("--v-dose %g: want a dose of 0 Gy or more", v)
		}
	}
	step := ov.SubGridStep
	if step == 0 {
		step = 0.5
	}
	if !(step > 0) || math.IsInf(step, 0) {
		return s, fmt.Errorf("--subgrid-step %g: want a finite step above 0 mm", step)
	}
	if ov.Workers < 0 {
		return s, fmt.Errorf("--workers %d: want 0 (all cores) or more", ov.Workers)
	}
	if ov.MinClusterCC < 0 {
		return s, fmt.Errorf("--min-cluster %g: want 0 cc or more", ov.MinClusterCC)
	}
	s = analysis.Settings{
		Criteria: c, KindRules: rules, CLIKindRules: len(cli), IsodosePercents: iso, VDoses: ov.VDoses,
		SubGridROIs: ov.SubGrid, SubGridStep: step, MinClusterCC: ov.MinClusterCC,
		Workers: ov.Workers, Checker: p, Protocol: p.Resolved(), Version: ov.Version,
		AcceptNormDose: ov.AcceptNormDose, NormDoseFromPrescription: fromPlan,
		RefuseSwappedDoses: p.RefuseSwappedDoses(), AllowDoseTypeMismatch: !p.RefuseDoseTypeMismatch(),
	}
	s.Choices = result.Choices{Overrides: overrides, KindRules: []string{}, NoStructures: ov.NoStructures}
	for _, r := range cli {
		s.Choices.KindRules = append(s.Choices.KindRules, r.String())
	}
	if c.NormDose > 0 {
		s.NormDoseSource = "protocol"
		if ov.NormDose != nil {
			s.NormDoseSource = "user"
		}
	}
	if ov.ScaleEvaluated != "" {
		if s.ScaleEvaluated, err = analysis.ParseScale(ov.ScaleEvaluated); err != nil {
			return s, err
		}
	}
	if ov.Exhaustive {
		s.Method = gamma.Exhaustive
		s.Choices.Method = s.Method.String()
	}
	if ov.Interpolation != "" {
		if s.Interpolation, err = gamma.ParseInterpolation(ov.Interpolation); err != nil {
			return s, fmt.Errorf("--interpolation: %w", err)
		}
		s.Choices.Interpolation = s.Interpolation.String()
	}
	if s.Noise, err = noiseSettings(p, ov); err != nil {
		return s, err
	}
	return s, nil
}

// num writes a number in the shortest form that reads back exactly.
func num(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// percents writes a list of percentages, "none" when empty.
func percents(v []float64) string {
	if len(v) == 0 {
		return "none"
	}
	parts := make([]string, len(v))
	for i, x := range v {
		parts[i] = num(x) + " %"
	}
	return strings.Join(parts, ", ")
}

// noiseSettings resolves the noise handling: the option, else the
// protocol's, else auto.
func noiseSettings(p *protocol.Protocol, ov Overrides) (analysis.NoiseSettings, error) {
	var ns analysis.NoiseSettings
	handling, what := "auto", ""
	if p.Noise.Handling != "" {
		handling, what = p.Noise.Handling, "protocol "+p.Name+": evaluated_noise: "
	}
	if ov.EvaluatedNoise != "" {
		handling, what = ov.EvaluatedNoise, "--evaluated-noise: "
	}
	mode, pct, err := protocol.ParseNoiseHandling(handling)
	if err != nil {
		return ns, fmt.Errorf("%s%w", what, err)
	}
	switch mode {
	case "off":
		ns.Handling = analysis.NoiseOff
	case "given":
		ns.Handling, ns.Percent = analysis.NoiseGiven, pct
	}
	if ns.MapUnit, err = noise.ParseMapUnit(ov.UncertaintyUnit); err != nil {
		return ns, fmt.Errorf("--evaluated-uncertainty-unit: %w", err)
	}
	ns.JudgeRaw = p.NoiseJudgesRaw()
	return ns, nil
}

// Outputs are the files one comparison writes; empty names are not written.
// Report is the HTML review page, ReportPDF the same review as a PDF.
type Outputs struct {
	JSON, CSV, GammaMap, DifferenceMap, Report, ReportPDF string
	// ResultsTo, when not empty, is a DICOM node (AET@HOST:PORT, see
	// dicomsend.ParseDestination) the gamma and difference maps are sent
	// to as RT Dose files (written for the purpose when not asked for as
	// .dcm files); ResultsAET is the AE title voxgamma calls from
	// (dicomsend.DefaultCallingAETitle when empty).
	ResultsTo, ResultsAET string
}

// Destination returns the node the results are sent to; nil when none.
func (o Outputs) Destination() (*dicomsend.Destination, error) {
	if o.ResultsTo == "" {
		return nil, nil
	}
	d, err := dicomsend.ParseDestination(o.ResultsTo)
	if err != nil {
		return nil, fmt.Errorf("--results-to %w", err)
	}
	if o.ResultsAET != "" {
		if err := dicomsend.CheckAETitle(o.ResultsAET); err != nil {
			return nil, fmt.Errorf("--results-aet: %w", err)
		}
		d.CallingAETitle = o.ResultsAET
	}
	return &d, nil
}

// List returns the names of the outputs to write.
func (o Outputs) List() []string {
	var l []string
	for _, p := range []string{o.JSON, o.CSV, o.GammaMap, o.DifferenceMap, o.Report, o.ReportPDF} {
		if p != "" {
			l = append(l, p)
		}
	}
	return l
}

// Check refuses, before any computation, output paths that would replace an
// input or another output, or land inside an input folder, existing files unless force, anything but a
// regular file even with force (a directory, symbolic link, named pipe,
// socket or device node), missing or unwritable directories and map names
// without a known extension.
func (o Outputs) Check(inputs []string, force bool) error {
	if d, err := o.Destination(); err != nil {
		return err
	} else if d != nil {
		if err := dicomsend.Available(); err != nil {
			return fmt.Errorf("--results-to %s: %w", d, err)
		}
	}
	seen := map[string]string{}
	in := map[string]bool{}
	for _, p := range inputs {
		if p != "" {
			in[canonical(p)] = true
		}
	}
	for _, m := range []struct{ flag, path string }{{"--gamma-map", o.GammaMap}, {"--difference-map", o.DifferenceMap}} {
		if m.path != "" {
			ext := strings.ToLower(filepath.Ext(m.path))
			if ext != ".dcm" && ext != ".mha" {
				return fmt.Errorf("%s %s: the name must end in .dcm (RT Dose) or .mha (MetaImage)", m.flag, m.path)
			}
		}
	}
	for _, p := range o.List() {
		c := canonical(p)
		if in[c] {
			return fmt.Errorf("output %s is an input file: refusing to overwrite it", p)
		}
		if folder := pathcheck.FileInFolder(p, inputs); folder != "" {
			return fmt.Errorf("output %s is inside the input folder %s: refusing to write into an input (write the outputs elsewhere)", p, folder)
		}
		if other, dup := seen[c]; dup {
			return fmt.Errorf("output %s is named twice (also as %s)", p, other)
		}
		seen[c] = p
		if st, err := os.Lstat(p); err == nil {
			switch {
			case st.IsDir():
				return fmt.Errorf("output %s is a directory", p)
			case !st.Mode().IsRegular():
				return fmt.Errorf("output %s is %s, not a regular file: refusing to replace it (--force overwrites regular files only)", p, atomicfile.Kind(st.Mode()))
			case !force:
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
// comparisons (as absolute as it gets when it cannot be resolved).
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

// ErrNothingEvaluated is returned by Compare when no reference point could
// be evaluated (all below the threshold, or outside the evaluated grid): a
// comparison that could not evaluate, whatever the protocol says.
var ErrNothingEvaluated = errors.New("nothing was evaluated: every reference point is below the low-dose threshold or outside the evaluated grid")

// Compare loads the inputs, prepares and runs one comparison. A protocol
// whose criteria differ from those applied (overridden) adds a warning. A
// comparison that evaluated nothing is ErrNothingEvaluated.
func Compare(ctx context.Context, in analysis.Inputs, s analysis.Settings) (*analysis.Outcome, error) {
	return CompareFor(ctx, in, s, Outputs{}, false)
}

// CompareFor is Compare for the given outputs: once the inputs are read, it
// checks the outputs against every file actually read (the files chosen in
// a folder too) before computing anything.
func CompareFor(ctx context.Context, in analysis.Inputs, s analysis.Settings, outs Outputs, force bool) (*analysis.Outcome, error) {
	l, err := analysis.Load(in)
	if err != nil {
		return nil, err
	}
	given := append([]string{in.Reference, in.ReferencePoints, in.Evaluated, in.Structures, in.Plan, in.EvaluatedUncertainty}, in.ReferenceFiles...)
	given = append(given, in.EvaluatedFiles...)
	if err := outs.Check(append(given, l.Paths...), force); err != nil {
		return nil, err
	}
	// Reading leaves the DICOM parser's garbage, preparing the resampling's
	// and the rasteriser's: collect it and hand its pages back before each
	// larger phase, or the process keeps them resident on top of what the
	// next phase needs (on a 256×256×160 comparison without ROIs, 13 % of
	// the peak; BENCHMARKS.md).
	debug.FreeOSMemory()
	p, err := analysis.Prepare(l, s)
	if err != nil {
		return nil, err
	}
	debug.FreeOSMemory()
	out, err := p.Run(ctx, s)
	if err != nil {
		return nil, err
	}
	r := out.Result
	if r.Overall.Evaluated == 0 {
		return nil, ErrNothingEvaluated
	}
	if pr, ok := s.Protocol.(*protocol.Protocol); ok {
		if c := pr.Coverage; c.OverallPercent > 0 || c.ROIPercent > 0 {
			r.Notes = append(r.Notes, fmt.Sprintf("coverage is part of the verdict: at least %s %% of the reference points at or above the threshold must have been compared, "+
				"and a rule on an ROI is judged only when at least %s %% of its volume lies inside both dose grids (protocol coverage; the defaults 99.5 %% and 100 %% are this tool's choice)",
				num(c.OverallPercent), num(c.ROIPercent)))
		}
		if r.Criteria.NormDoseSource != "reference maximum" {
			r.Notes = append(r.Notes, fmt.Sprintf("a normalisation dose outside %g–%g × the reference maximum is refused unless accepted explicitly (this tool's choice: a plan's maximum normally lies near 100–130 %% of its prescription, common practice)",
				analysis.NormDoseBand[0], analysis.NormDoseBand[1]))
		}
		if err := pr.CheckCriteria(r.Criteria); err != nil {
			r.Warnings = append(r.Warnings, fmt.Sprintf("criteria differ from protocol %q (its limits were set for its own criteria): %s",
				pr.Name, strings.ReplaceAll(err.Error(), "\n", "; ")))
		}
	}
	return out, nil
}

// Write writes every requested output of a finished comparison, all or
// none: each is first written (atomically) under a staging name beside its
// target, and only when every one has been written are they renamed into
// place; on any failure the staged files are removed and the error, naming
// the file, returned. With a de-identification scope d (nil: none), the
// result is de-identified first (see [DeidentifyResult]), ROI names on the
// review page are scrubbed, and the DICOM maps carry the patient's
// pseudonyms, remapped study, frame of reference and plan UIDs and no
// dates. A reference without a study or frame-of-reference UID gets new
// ones in the maps (the result says so). With o.ResultsTo, the gamma and
// difference maps are sent to that DICOM node (see sendMaps) before
// anything is put in place.
func Write(o Outputs, out *analysis.Outcome, d *deid.Scope) (err error) {
	r := out.Result
	var ids dicomio.Identifiers
	if out.ReferenceInfo != nil {
		ids = out.ReferenceInfo.Identifiers
	}
	gammaOpt := dicomio.GammaOptions("gamma index " + r.Criteria.Label + ", unitless")
	diffOpt := dicomio.DifferenceOptions("dose difference evaluated-reference, Gy")
	scrub := func(s string) string { return s }
	if d != nil {
		DeidentifyResult(r, d)
		ids = deidentifyIDs(ids, d.Key())
		gammaOpt.OmitDates, diffOpt.OmitDates = true, true
		scrub = d.Scrub
	}
	// The maps take the reference's summation and plan references when
	// they can be written validly, else dicomio.MapSummationType without a
	// plan (PS3.3 C.8.8.3: PLAN and the like require a referenced plan).
	sum, fg, beam := dicomio.MapSummation(out.ReferenceInfo)
	if ids.ReferencedRTPlanUID == "" {
		sum, fg, beam = dicomio.MapSummationType, 0, 0
	}
	for _, o := range []*dicomio.WriteOptions{&gammaOpt, &diffOpt} {
		o.DoseSummationType, o.ReferencedFractionGroupNumber, o.ReferencedBeamNumber = sum, fg, beam
	}
	if o.GammaMap != "" || o.DifferenceMap != "" || o.ResultsTo != "" {
		if ids.StudyInstanceUID == "" {
			ids.StudyInstanceUID = dicomio.NewUID()
			r.Notes = append(r.Notes, "the reference has no StudyInstanceUID: the DICOM maps carry a new one")
		}
		if ids.FrameOfReferenceUID == "" {
			ids.FrameOfReferenceUID = dicomio.NewUID()
			r.Warnings = append(r.Warnings, "the reference has no FrameOfReferenceUID: the DICOM maps carry a new one, and a planning system will not place them on the reference without registration")
		}
	}
	type staged struct{ tmp, final string }
	var done []staged
	renamed, finished := 0, false
	// However Write ends (an error, or a panic on its way up to a caller
	// that recovers it), no staging file stays behind: those not renamed
	// into place are removed.
	defer func() {
		if !finished {
			for _, s := range done[renamed:] {
				os.Remove(s.tmp)
			}
		}
	}()
	stage := func(final string, write func(path string) error) error {
		if final == "" {
			return nil
		}
		tmp := filepath.Join(filepath.Dir(final), "."+filepath.Base(final)+".voxgamma-staging")
		done = append(done, staged{tmp, final})
		if err := write(tmp); err != nil {
			return fmt.Errorf("%w (nothing written)", renameErr(err, tmp, final))
		}
		fault.Point(fault.JobWriteStaged)
		return nil
	}
	if err := stage(o.GammaMap, func(p string) error { return writeMapAs(p, o.GammaMap, out.Gamma, ids, gammaOpt) }); err != nil {
		return err
	}
	if err := stage(o.DifferenceMap, func(p string) error { return writeMapAs(p, o.DifferenceMap, out.Difference, ids, diffOpt) }); err != nil {
		return err
	}
	// Sent before anything is put in place (a node that cannot be
	// reached leaves no outputs, like any other output that fails), and
	// before the result is written, which says where they went.
	if err := sendMaps(o, out, ids, gammaOpt, diffOpt, func(final string) string {
		for _, s := range done {
			if s.final == final {
				return s.tmp
			}
		}
		return ""
	}); err != nil {
		return err
	}
	if err := stage(o.JSON, func(p string) error { return report.WriteJSON(p, r) }); err != nil {
		return err
	}
	if err := stage(o.CSV, func(p string) error { return report.WriteCSV(p, r) }); err != nil {
		return err
	}
	var page *report.Page
	reviewPage := func() report.Page {
		if page == nil {
			page = &report.Page{Result: r, Reference: out.Reference, Gamma: out.Gamma, Difference: out.Difference}
			for _, reg := range out.Regions {
				if reg.Centres.Len() == 0 || reg.Number == 0 {
					continue
				}
				page.ROIs = append(page.ROIs, report.PageROI{Name: scrub(reg.Name), Mask: reg.Mask()})
			}
			if d == nil {
				page.Generated = r.Run.Started
			}
		}
		return *page
	}
	if err := stage(o.Report, func(p string) error { return report.WriteHTML(p, reviewPage()) }); err != nil {
		return err
	}
	if err := stage(o.ReportPDF, func(p string) error { return report.WritePDF(p, reviewPage()) }); err != nil {
		return err
	}
	for _, s := range done {
		if err := atomicfile.CheckTarget(s.final); err != nil {
			return err
		}
		if err := os.Rename(s.tmp, s.final); err != nil {
			// Those already renamed stay (complete); the rest are removed.
			return fmt.Errorf("writing %s: %w", s.final, err)
		}
		renamed++
	}
	finished = true
	return nil
}

// sendMaps sends the gamma and difference maps to o's DICOM node, when it
// names one: the staged RT Dose files when they were asked for as .dcm
// outputs (staged(final) returns the staging path), else maps written for
// the purpose into a temporary folder (removed after).
func sendMaps(o Outputs, out *analysis.Outcome, ids dicomio.Identifiers, gammaOpt, diffOpt dicomio.WriteOptions, staged func(string) string) error {
	d, err := o.Destination()
	if err != nil || d == nil {
		return err
	}
	if out.Gamma == nil || out.Difference == nil {
		return fmt.Errorf("--results-to %s: there are no maps to send (the reference is not a grid)", d)
	}
	var files []string
	var tmpDir string
	defer func() {
		if tmpDir != "" {
			os.RemoveAll(tmpDir)
		}
	}()
	for _, m := range []struct {
		final, name string
		grid        *volume.Grid
		opt         dicomio.WriteOptions
	}{{o.GammaMap, "gamma.dcm", out.Gamma, gammaOpt}, {o.DifferenceMap, "difference.dcm", out.Difference, diffOpt}} {
		if strings.EqualFold(filepath.Ext(m.final), ".dcm") {
			if p := staged(m.final); p != "" {
				files = append(files, p)
				continue
			}
		}
		if tmpDir == "" {
			if tmpDir, err = os.MkdirTemp("", "voxgamma-send-"); err != nil {
				return fmt.Errorf("--results-to %s: %w", d, err)
			}
		}
		p := filepath.Join(tmpDir, m.name)
		if _, err := dicomio.WriteDose(p, m.grid, ids, m.opt); err != nil {
			return fmt.Errorf("--results-to %s: %w", d, err)
		}
		files = append(files, p)
	}
	if err := dicomsend.Send(context.Background(), *d, files); err != nil {
		return fmt.Errorf("results not sent (nothing written): %w", err)
	}
	out.Result.Notes = append(out.Result.Notes, fmt.Sprintf("the gamma and difference maps were sent to %s (DICOM C-STORE, dcmtk's storescu)", d))
	return nil
}

// renameErr rewrites an error about the staging file to name the output the
// user asked for.
func renameErr(err error, tmp, final string) error {
	return errors.New(strings.ReplaceAll(err.Error(), tmp, final))
}

// writeMapAs writes a map to path in the format that the name final asks
// for (the staging path's own extension is not the user's).
func writeMapAs(path, final string, grid *volume.Grid, ids dicomio.Identifiers, opt dicomio.WriteOptions) error {
	if grid == nil {
		return fmt.Errorf("%s: no map to write (the reference is not a grid)", final)
	}
	if strings.EqualFold(filepath.Ext(final), ".mha") {
		return metaimage.Write(path, grid)
	}
	_, err := dicomio.WriteDose(path, grid, ids, opt)
	return err
}

// WriteMap writes a map as RT Dose (.dcm) or MetaImage (.mha, by the name).
func WriteMap(path string, grid *volume.Grid, ids dicomio.Identifiers, opt dicomio.WriteOptions) error {
	return writeMapAs(path, path, grid, ids, opt)
}

// DeidentifyResult de-identifies a result after the intent of DICOM
// PS3.15 Annex E's basic profile, with the values d knows from the inputs:
// each input's path becomes its role, its patient name and ID their keyed
// pseudonyms, its UIDs their remapped ones, and its description loses the
// series description, dose comment or structure set label; warnings,
// notes, rules, ROI names (also under noise) and statuses and cluster ROI
// lists are scrubbed
// of every identifying value; the run's date is left out; and notes say so.
func DeidentifyResult(r *result.Result, d *deid.Scope) {
	DeidentifyInputs(r.Inputs, d)
	for _, list := range [][]string{r.Warnings, r.Notes} {
		for i := range list {
			list[i] = d.Scrub(list[i])
		}
	}
	for i := range r.ROIs {
		r.ROIs[i].Name = d.Scrub(r.ROIs[i].Name)
		r.ROIs[i].StatusDetail = d.Scrub(r.ROIs[i].StatusDetail)
	}
	for i := range r.Rules {
		o := &r.Rules[i]
		o.Rule, o.Subject, o.Reason = d.Scrub(o.Rule), d.Scrub(o.Subject), d.Scrub(o.Reason)
		for j := range o.Conditions {
			o.Conditions[j] = d.Scrub(o.Conditions[j])
		}
	}
	for _, list := range [][]string{r.Choices.SubGridROIs, r.Choices.KindRules, r.Choices.Overrides} {
		for i := range list {
			list[i] = d.Scrub(list[i])
		}
	}
	for i := range r.Clusters {
		for j := range r.Clusters[i].ROIs {
			r.Clusters[i].ROIs[j] = d.Scrub(r.Clusters[i].ROIs[j])
		}
	}
	if n := r.Noise; n != nil {
		for i := range n.ROIs {
			n.ROIs[i].Name = d.Scrub(n.ROIs[i].Name)
		}
	}
	if p := r.Plan; p != nil {
		// The plan's label and name are free text a planner may have put
		// a name in: Seen registered them as text to remove, as a dose's
		// series description. Its description goes; its instance UID is
		// remapped; prescription and beam names are scrubbed like ROI
		// names.
		p.Label, p.Name = d.Scrub(p.Label), d.Scrub(p.Name)
		if p.Description != "" {
			p.Description = deid.Removed
		}
		p.SOPInstanceUID = d.Key().UID(p.SOPInstanceUID)
		for i := range p.Prescriptions {
			p.Prescriptions[i].Description = d.Scrub(p.Prescriptions[i].Description)
		}
		for i := range p.Beams {
			p.Beams[i].Name = d.Scrub(p.Beams[i].Name)
		}
	}
	for i := range r.DoseSums {
		// The method names the files summed.
		r.DoseSums[i].Method, r.DoseSums[i].PlanCheck = d.Scrub(r.DoseSums[i].Method), d.Scrub(r.DoseSums[i].PlanCheck)
	}
	r.Choices.EvaluatedScaleSource = d.Scrub(r.Choices.EvaluatedScaleSource)
	r.Run.Started = ""
	r.Notes = append(r.Notes, DeidentifiedNote, d.Key().Note())
}

// DeidentifiedNote says in the results what de-identification did.
const DeidentifiedNote = "de-identified after the intent of the DICOM basic application level confidentiality profile (PS3.15 Annex E): patient names and IDs replaced with keyed pseudonyms, UIDs remapped, dates and free-text descriptions removed, file paths replaced with role names"

// DeidentifyInputs de-identifies input descriptions (see
// [DeidentifyResult]).
func DeidentifyInputs(inputs []result.Input, d *deid.Scope) {
	k := d.Key()
	for i := range inputs {
		in := &inputs[i]
		in.Path = in.Role
		in.PatientName = k.Pseudonym(deid.KindName, in.PatientName)
		in.PatientID = k.Pseudonym(deid.KindID, in.PatientID)
		in.SOPInstanceUID = k.UID(in.SOPInstanceUID)
		in.FrameOfReferenceUID = k.UID(in.FrameOfReferenceUID)
		in.Description = d.Scrub(in.Description)
	}
}

// deidentifyIDs returns the identifiers the de-identified DICOM maps carry:
// the patient's pseudonyms and the remapped study, frame of reference and
// plan UIDs (the same for both maps, and for every run with the key); no
// dates, study ID, accession number or physician.
func deidentifyIDs(ids dicomio.Identifiers, k *deid.Key) dicomio.Identifiers {
	return dicomio.Identifiers{
		PatientName: k.Pseudonym(deid.KindName, ids.PatientName), PatientID: k.Pseudonym(deid.KindID, ids.PatientID),
		StudyInstanceUID: k.UID(ids.StudyInstanceUID), FrameOfReferenceUID: k.UID(ids.FrameOfReferenceUID),
		ReferencedRTPlanUID: k.UID(ids.ReferencedRTPlanUID),
		// LO: at most 64 characters (PS3.5 6.2).
		DeidentificationMethod: "voxgamma: keyed pseudonyms, UIDs remapped, no dates or text",
	}
}
