package analysis

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"runtime/debug"
	"sort"
	"strings"
	"time"

	"voxgamma/dicomio"
	"voxgamma/gamma"
	"voxgamma/result"
	"voxgamma/roi"
	"voxgamma/structure"
	"voxgamma/volume"
)

// Checker checks a result against a protocol's rules.
type Checker interface {
	// Evaluate returns the outcome of every rule and the verdict, "pass"
	// or "fail".
	Evaluate(r *result.Result) ([]result.RuleOutcome, string)
}

// Settings are everything about a comparison besides the input files.
type Settings struct {
	// Criteria of the gamma comparison.
	Criteria gamma.Criteria
	// NormDoseSource says where Criteria.NormDose came from when it is not
	// 0: "prescription" or "user". Empty means "user".
	NormDoseSource string
	// NormDoseFromPrescription normalises to the RT Plan's prescription
	// (Loaded.Plan, PrescriptionGy): Run sets Criteria.NormDose to it. The
	// plan must be the reference dose's (or the dose must name none).
	NormDoseFromPrescription bool
	// Method of the gamma search.
	Method gamma.Method
	// Interpolation of the evaluated dose between its grid nodes.
	Interpolation gamma.Interpolation
	// KindRules classify ROIs by name (see roi.Classify); the first
	// CLIKindRules of them were given on the command line.
	KindRules    []roi.Rule
	CLIKindRules int
	// IsodosePercents adds isodose ROIs: the reference voxels at or above
	// each percentage of the normalisation dose.
	IsodosePercents []float64
	// VDoses are the doses (Gy) at which V_d is reported for every ROI.
	VDoses []float64
	// SubGridROIs names ROIs to evaluate on a finer reference sub-grid of
	// step SubGridStep mm (reference dose interpolated trilinearly).
	SubGridROIs []string
	SubGridStep float64
	// MinClusterCC is the smallest failing cluster listed (cm³).
	MinClusterCC float64
	// MaxClusters bounds the clusters listed; 0 means 20.
	MaxClusters int
	// Raster tunes the rasterisation of ROIs.
	Raster roi.Options
	// Workers and Progress run the gamma search (see gamma.Options).
	Workers  int
	Progress func(done, total int)
	// Checker checks the result against the protocol; Protocol is the
	// protocol recorded in the result, in full.
	Checker  Checker
	Protocol any
	// Version is recorded in the result.
	Version string
	// Choices records the options besides the protocol that change how
	// rules are judged; Run fills in the sub-grid ROIs and step.
	Choices result.Choices
	// AcceptNormDose lets a normalisation dose outside the plausible band
	// (see NormDoseBand) be used.
	AcceptNormDose bool
	// RefuseSwappedDoses refuses a comparison whose files say the doses
	// are the wrong way round (Loaded.SwapEvidence); otherwise it is a
	// warning. AllowDoseTypeMismatch compares doses of different DoseType
	// (Loaded.DoseTypeMismatch) with a warning; otherwise they are refused.
	// Both come from the protocol's inputs section.
	RefuseSwappedDoses, AllowDoseTypeMismatch bool
	// ScaleEvaluated multiplies the evaluated dose before the comparison
	// (a per-fraction dose against a plan total); the zero value leaves it
	// as read. Doses whose ratio is close to a whole number are refused
	// unless scaled (see Prepare).
	ScaleEvaluated Scale
	// Noise says how the evaluated dose's statistical noise is handled.
	Noise NoiseSettings
}

// SwapWarning begins the warning of doses that look swapped (see
// dicomio.SwapEvidence), which the console shows even when quiet.
const SwapWarning = "the reference and evaluated doses look swapped"

// NormDoseBand is the band, as a multiple of the reference maximum, that a
// global normalisation dose given by the user or the protocol must lie in
// unless accepted explicitly. This tool's choice: a plan's maximum normally
// lies between about 100 % and 130 % of its prescription (common practice,
// no source), so a normalisation dose (a prescription, or a value near the
// maximum) below half or above 1.5 times the maximum is almost always a
// unit (cGy read as Gy) or summation (one fraction against the whole plan)
// mistake, and would make every ΔD that many times too wide or too narrow.
var NormDoseBand = [2]float64{0.5, 1.5}

// Outcome is a finished comparison: the result and the maps behind it.
type Outcome struct {
	Result *result.Result
	// Reference and ReferenceInfo are the reference dose and its file's
	// description (nil for a points reference).
	Reference     *volume.Grid
	ReferenceInfo *dicomio.DoseInfo
	// Gamma is Γ on the reference grid (NaN where not evaluated); nil for
	// a points reference.
	Gamma *volume.Grid
	// GammaResult is the engine's result, per reference point.
	GammaResult *gamma.Result
	// Difference is evaluated − reference on the reference grid (NaN
	// outside the evaluated grid); nil for a points reference.
	Difference *volume.Grid
	// Regions are the ROIs in result order.
	Regions []*roi.Region
	// Colors holds each region's display colour, in Regions order.
	Colors [][3]uint8
}

// Prepared is a loaded comparison with its ROIs rasterised, its scale and
// noise settled: the part of the work shared by every criteria set of a
// sweep.
type Prepared struct {
	*Loaded
	noise      *noisePrep
	regions    []*roi.Region
	sources    map[*roi.Region]*structure.ROI
	kindSource map[*roi.Region]string
	sizes      *roi.VoxelSize
	notes      []string
	warnings   []string
	// scale is the factor the evaluated dose was multiplied by and
	// scaleSource who asked for it ("" when nobody did).
	scale       float64
	scaleSource string
	// subGrids holds the sub-grids laid out for ROIs asked to be evaluated
	// on one (planSubGrids).
	subGrids map[*roi.Region]*subGridPlan
}

// Prepare rasterises the structure set's ROIs onto the reference grid. It
// multiplies the evaluated dose by s.ScaleEvaluated when asked, and refuses
// doses that differ by a whole-number ratio of 2 or more (a per-fraction
// dose against a plan total), naming the likely factor (see Scale).
func Prepare(l *Loaded, s Settings) (*Prepared, error) {
	p := &Prepared{Loaded: l, sources: map[*roi.Region]*structure.ROI{}, kindSource: map[*roi.Region]string{}}
	var err error
	if l.Reference == nil {
		if err := p.applyScale(s.ScaleEvaluated); err != nil {
			return nil, err
		}
		return p, p.prepareNoise(s)
	}
	if m := l.DoseTypeMismatch; m != "" {
		if !s.AllowDoseTypeMismatch {
			return nil, badInput("%s; refused (a protocol may compare them with a warning: inputs: {dose_type_mismatch: warn})", m)
		}
		p.warnings = append(p.warnings, m+"; compared as the protocol allows (inputs: dose_type_mismatch: warn)")
	}
	if e := l.SwapEvidence; e != "" {
		msg := SwapWarning + ": " + e + ". voxgamma takes --reference as the planning system's dose and --evaluated as the independent one, and Γ is not symmetric: swapped, failing points can pass"
		if s.RefuseSwappedDoses {
			return nil, badInput("%s; refused by the protocol (inputs: swapped_doses: error)", msg)
		}
		p.warnings = append(p.warnings, msg)
	}
	// The evaluated dose on the reference grid is made by Run once the
	// engine is done, so that it does not sit in memory beside the
	// engine's own structures (BENCHMARKS.md, "Fast when it matters").
	if err := p.applyScale(s.ScaleEvaluated); err != nil {
		return nil, err
	}
	if err := p.prepareNoise(s); err != nil {
		return nil, err
	}
	if s.Choices.NoStructures && l.Structures != nil {
		return nil, badInput("a structure set was loaded for a comparison run with --no-structures")
	}
	z, err := roi.NewRasteriser(l.Reference, s.Raster)
	if err != nil {
		return nil, fmt.Errorf("%w: the reference grid cannot carry ROIs: %w", ErrBadInput, err)
	}
	p.sizes = z.Sizes()
	if l.Structures == nil {
		return p, nil
	}
	for i := range l.Structures.ROIs {
		r := &l.Structures.ROIs[i]
		kind, by := roi.ClassifyBy(r, s.KindRules)
		reg, err := z.Rasterise(r, kind)
		if err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
		p.regions = append(p.regions, reg)
		p.sources[reg] = r
		switch {
		case by < 0:
			p.kindSource[reg] = "interpreted type"
			if strings.TrimSpace(r.InterpretedType) == "" {
				p.kindSource[reg] = "no interpreted type and no name rule"
			}
		case by < s.CLIKindRules:
			p.kindSource[reg] = "command-line rule " + s.KindRules[by].String()
		default:
			p.kindSource[reg] = "protocol rule " + s.KindRules[by].String()
		}
		for _, sk := range reg.Skipped {
			if sk.Type == structure.ClosedPlanar {
				p.warnings = append(p.warnings, fmt.Sprintf("ROI %q: contour %d (CLOSED_PLANAR) not rasterised: %s", r.Name, sk.Contour+1, sk.Reason))
			}
		}
		for _, line := range reg.OverlapSummary() {
			p.warnings = append(p.warnings, fmt.Sprintf("ROI %q: %s", r.Name, line))
		}
		if n := len(reg.Skipped); n > 0 {
			p.notes = append(p.notes, fmt.Sprintf("ROI %q: %d contours not rasterised (%s)", r.Name, n, skippedKinds(reg.Skipped)))
		}
		if reg.OutsideCC > 0.0005 {
			p.warnings = append(p.warnings, fmt.Sprintf("ROI %q: %.3f cc of its %.3f cc lie outside the reference dose grid and are not evaluated", r.Name, reg.OutsideCC, reg.ContourCC))
		}
	}
	p.notes = append(p.notes, fmt.Sprintf("ROIs rasterised on the reference grid: a voxel counts toward an ROI's gamma pass rate when its centre is inside; "+
		"volumes and DVHs weight each voxel by the fraction inside it, from %d×%d sub-samples in plane and %d sub-slices",
		orDefault(s.Raster.InPlane, roi.DefaultInPlane), orDefault(s.Raster.InPlane, roi.DefaultInPlane), orDefault(s.Raster.SubSlices, roi.DefaultSubSlices)))
	if err := p.planSubGrids(s); err != nil {
		return nil, err
	}
	return p, nil
}

// evaluatedOnRef returns the evaluated dose (as scaled) resampled
// trilinearly onto the reference grid, NaN outside the evaluated grid.
func (p *Prepared) evaluatedOnRef() (*volume.Grid, error) {
	g, err := p.Evaluated.ResampleOnto(p.Reference, float32(math.NaN()))
	if err != nil && err != volume.ErrNoOverlap {
		return nil, err
	}
	return g, nil
}

// skippedKinds says which kinds of contours were skipped, e.g.
// "2 POINT, 1 CLOSED_PLANAR".
func skippedKinds(sk []roi.SkippedContour) string {
	counts := map[structure.GeometricType]int{}
	var order []structure.GeometricType
	for _, s := range sk {
		if counts[s.Type] == 0 {
			order = append(order, s.Type)
		}
		counts[s.Type]++
	}
	var parts []string
	for _, t := range order {
		parts = append(parts, fmt.Sprintf("%d %s", counts[t], t))
	}
	return strings.Join(parts, ", ")
}

func orDefault(v, d int) int {
	if v == 0 {
		return d
	}
	return v
}

// Run computes the comparison with the given settings.
func (p *Prepared) Run(ctx context.Context, s Settings) (*Outcome, error) {
	started := time.Now()
	res := &result.Result{
		SchemaVersion: result.SchemaVersion, Version: s.Version, Caution: result.Caution,
		Protocol: s.Protocol, Inputs: p.Inputs, DoseSums: p.DoseSums, Plan: p.PlanInfo,
		Warnings: append(append([]string{}, p.Loaded.Warnings...), p.warnings...),
		Notes:    append(append([]string{}, p.Loaded.Notes...), p.notes...),
		ROIs:     []result.ROI{}, Clusters: []result.Cluster{}, Rules: []result.RuleOutcome{},
	}
	// A search distance below the evaluated grid's spacing cannot reach a
	// neighbouring voxel from a reference point at a voxel: refuse it.
	coarsest := 0.0
	for a := 0; a < 3; a++ {
		if sp, _ := p.Evaluated.Spacing(a); sp > coarsest {
			coarsest = sp
		}
	}
	if r := s.Criteria.SearchRadius(); r < coarsest {
		return nil, badInput("search distance %g mm is smaller than the evaluated grid's spacing %g mm: the search could not reach a neighbouring voxel (use --search %g or more)", r, coarsest, coarsest)
	}
	if s.NormDoseFromPrescription {
		rx, err := p.prescription()
		if err != nil {
			return nil, err
		}
		s.Criteria.NormDose, s.NormDoseSource = rx, "prescription"
	}
	if err := p.checkNormDose(s); err != nil {
		return nil, err
	}
	res.Choices = s.Choices
	res.Choices.Overrides = nonNil(res.Choices.Overrides)
	res.Choices.KindRules = nonNil(res.Choices.KindRules)
	res.Choices.SubGridROIs = []string{}
	res.Choices.SubGridStepMM = 0
	res.Choices.UnusualNormDose = s.AcceptNormDose && s.Criteria.NormDose > 0 && !p.normDoseInBand(s.Criteria.NormDose)
	if p.scaleSource != "" {
		res.Choices.EvaluatedScale, res.Choices.EvaluatedScaleSource = result.Ptr(p.scale), p.scaleSource
	}
	opt := gamma.Options{Workers: s.Workers, Progress: s.Progress, Method: s.Method, Interpolation: s.Interpolation}
	t0 := time.Now()
	compare := func(eval *volume.Grid) (*gamma.Result, error) {
		// The engine's own structures (the spline's coefficients and cell
		// bounds, about 8 bytes per evaluated voxel) are garbage once it
		// returns: collect them and hand their pages back now, so that the
		// maps and statistics made next reuse that memory rather than grow
		// the process (BENCHMARKS.md, "Fast when it matters").
		defer debug.FreeOSMemory()
		if p.Reference != nil {
			return gamma.CompareGrids(ctx, p.Reference, eval, s.Criteria, opt)
		}
		return gamma.ComparePoints(ctx, p.Points, eval, s.Criteria, opt)
	}
	// With a noise correction the comparison is made twice: against the
	// dose as given (the raw figures, of which only the statistics are
	// kept) and against the denoised evaluated dose (the result's figures).
	var gres *gamma.Result
	var raw *rawFigures
	var regions []*roi.Region
	var corrected *volume.Grid // the denoised evaluated dose, kept for sub-grid ROIs only
	var denoising time.Duration
	var err error
	if p.noise.correct {
		if raw, regions, err = p.rawComparison(s, compare); err != nil {
			return nil, err
		}
		// The raw comparison's Γ and status (5 bytes a reference point)
		// are garbage now: hand their memory back before the denoised
		// dose and the second comparison take theirs.
		debug.FreeOSMemory()
		if gres, corrected, denoising, err = p.correctedComparison(compare, len(s.SubGridROIs) > 0); err != nil {
			return nil, err
		}
	} else {
		if gres, err = compare(p.Evaluated); err != nil {
			return nil, err
		}
	}
	if p.Reference != nil && raw == nil {
		if regions, err = p.resultRegions(s, gres.Criteria.NormDose); err != nil {
			return nil, err
		}
	}
	gammaSeconds := (time.Since(t0) - denoising).Seconds()

	c := gres.Criteria
	source := s.NormDoseSource
	switch {
	case s.Criteria.NormDose == 0:
		source = "reference maximum"
	case source == "":
		source = "user"
	}
	res.Criteria = result.Criteria{
		DosePercent: c.DosePercent, DTAmm: c.DTA, Normalisation: c.Normalisation.String(),
		NormDoseGy: c.NormDose, NormDoseSource: source, ThresholdPercent: c.ThresholdPercent,
		SearchMM: c.Search, Method: gres.Method.String(), Interpolation: gres.Interpolation.String(), Label: c.Label(),
	}
	if w := coarseGridWarning(p.Evaluated, c.DTA, gres.Interpolation); w != "" {
		res.Warnings = append(res.Warnings, w)
	}
	if gres.Uncertified > 0 {
		res.Warnings = append(res.Warnings, fmt.Sprintf("%d points: the search could prove their Γ only to within %.2g of the interpolated dose's minimum (its bound on work per point was reached)", gres.Uncertified, gres.WorstTolerance))
	}
	res.Overall = toGammaStats(gres.Stats)
	if gres.Stats.Evaluated == 0 {
		res.Warnings = append(res.Warnings, "no reference point was evaluated: every point is below the threshold or outside the evaluated grid")
	}
	if n := gres.Stats.Outside; n > 0 {
		res.Warnings = append(res.Warnings, fmt.Sprintf("%d reference points at or above the threshold lie outside the evaluated grid: not evaluated, not passed", n))
	}
	if n := gres.Stats.Capped; n > 0 {
		res.Notes = append(res.Notes, fmt.Sprintf("%d points found no agreement within the %g mm search distance: reported as Γ = %g and failed", n, c.Search, c.Search/c.DTA))
	}
	out := &Outcome{Result: res, GammaResult: gres, Reference: p.Reference, ReferenceInfo: p.ReferenceInfo}
	if p.noise.info != nil {
		info := *p.noise.info
		res.Noise = &info
	}
	var rawROIs []result.GammaStats

	if p.Reference != nil {
		// The map shares the engine's Γ (read-only from here on).
		g := *p.Reference
		g.Data = gres.Gamma
		out.Gamma = &g
		onRef, err := p.evaluatedOnRef()
		if err != nil {
			return nil, err
		}
		if rawROIs, err = p.regionResults(ctx, s, gres, raw, regions, onRef, corrected, out); err != nil {
			return nil, err
		}
		// The resampled dose is not read again: it becomes the difference
		// map in place (the same float32 subtraction), rather than a map of
		// its own beside it while the DVHs were built (4 bytes a voxel).
		for n, r := range p.Reference.Data {
			onRef.Data[n] -= r
		}
		out.Difference = onRef
		// What the ROIs' figures left (each ROI's selected Γ values, the
		// DVH summaries' histograms) is garbage: collect it so that the
		// clusters' labels reuse it instead of growing the process.
		runtime.GC()
		var note string
		res.Clusters, note = p.clusters(s, gres, out.Regions)
		if note != "" {
			res.Notes = append(res.Notes, note)
		}
	}

	finishNoise(res, raw, rawROIs)
	if s.Checker != nil {
		res.Rules, res.Verdict = s.Checker.Evaluate(judgedView(res))
	} else {
		res.Verdict = "pass"
		if gres.Stats.Evaluated == 0 {
			res.Verdict = "fail"
		}
	}
	workers := s.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	res.Run = result.Run{Started: started.UTC().Format(time.RFC3339), Seconds: time.Since(started).Seconds(), GammaSeconds: gammaSeconds, Workers: workers}
	return out, nil
}

func toGammaStats(st gamma.Stats) result.GammaStats {
	coverage := math.NaN()
	if n := st.Evaluated + st.Outside; n > 0 {
		coverage = 100 * float64(st.Evaluated) / float64(n)
	}
	return result.GammaStats{
		Evaluated: st.Evaluated, Passed: st.Passed, CoveragePercent: result.Ptr(coverage),
		PassRate: result.Ptr(st.PassRate), PassRateText: result.FormatPercent(st.PassRate, 1),
		GammaMean: result.Ptr(st.Mean), GammaMedian: result.Ptr(st.Median), GammaP95: result.Ptr(st.P95),
		GammaP99: result.Ptr(st.P99), GammaMax: result.Ptr(st.Max), AboveOneHalfPercent: result.Ptr(st.AboveOneHalf),
		Capped: st.Capped, BelowThreshold: st.BelowThreshold, OutsideEvaluated: st.Outside,
	}
}

// rawFigures is what a result keeps of the comparison against the
// evaluated dose as given when a noise correction is made: its statistics
// overall and over each region of resultRegions, in that order.
type rawFigures struct {
	overall gamma.Stats
	rois    []result.GammaStats
}

// correctedComparison denoises the evaluated dose and runs the comparison
// against it. The engine keeps the evaluated samples only while it builds
// its interpolant, and nothing here holds the denoised dose beyond the call
// unless keep is set (sub-grid ROIs compare against it again; it is then
// returned): the second comparison then takes the memory of one
// (BENCHMARKS.md, "Fast when it matters"). took is the denoising's time.
func (p *Prepared) correctedComparison(compare func(*volume.Grid) (*gamma.Result, error), keep bool) (gres *gamma.Result, kept *volume.Grid, took time.Duration, err error) {
	t := time.Now()
	den, err := p.noise.denoise(p.Evaluated)
	if err != nil {
		return nil, nil, 0, err
	}
	took = time.Since(t)
	if denoisedHook != nil {
		denoisedHook(den)
	}
	// The denoising's working maps (the smoothed dose, the variance) are
	// garbage: return them before the engine takes its memory.
	debug.FreeOSMemory()
	if keep {
		gres, err = compare(den)
		return gres, den, took, err
	}
	gres, err = compare(den)
	return gres, nil, took, err
}

// denoisedHook, when set (by tests), is given the denoised dose as it is
// made.
var denoisedHook func(*volume.Grid)

// rawComparison runs the comparison against the evaluated dose as given
// and keeps its figures (and, for a reference grid, the regions they were
// taken over); its Γ map and status are not kept.
func (p *Prepared) rawComparison(s Settings, compare func(*volume.Grid) (*gamma.Result, error)) (*rawFigures, []*roi.Region, error) {
	graw, err := compare(p.Evaluated)
	if err != nil {
		return nil, nil, err
	}
	raw := &rawFigures{overall: graw.Stats}
	if p.Reference == nil {
		return raw, nil, nil
	}
	regions, err := p.resultRegions(s, graw.Criteria.NormDose)
	if err != nil {
		return nil, nil, err
	}
	for _, reg := range regions {
		raw.rois = append(raw.rois, toGammaStats(graw.StatsOver(&reg.Centres)))
	}
	return raw, regions, nil
}

// resultRegions returns the regions a result reports on, in its order: the
// structure set's ROIs, then the derived ones (all targets, the body) and
// the isodose regions asked for, at percentages of normDose.
func (p *Prepared) resultRegions(s Settings, normDose float64) ([]*roi.Region, error) {
	regions := append([]*roi.Region{}, p.regions...)
	if t, err := roi.AllTargets(p.regions); err != nil {
		return nil, err
	} else if t != nil {
		regions = append(regions, t)
	}
	if b, err := roi.BodyOf(p.regions); err != nil {
		return nil, err
	} else if b != nil {
		regions = append(regions, b)
	}
	for _, pct := range s.IsodosePercents {
		iso, err := roi.Isodose(p.Reference, pct, normDose, s.Raster)
		if err != nil {
			return nil, err
		}
		regions = append(regions, iso)
	}
	return regions, nil
}

// regionResults fills one result.ROI per region of resultRegions: Γ
// statistics over its centre voxels, failing volume and centroid, and the
// dose-volume metrics of both doses. With raw (when a noise correction was
// made) it also returns each ROI's raw Γ statistics, in result order.
func (p *Prepared) regionResults(ctx context.Context, s Settings, gres *gamma.Result, raw *rawFigures, regions []*roi.Region, onRef, corrected *volume.Grid, out *Outcome) ([]result.GammaStats, error) {
	subgrid := map[string]bool{}
	for _, name := range s.SubGridROIs {
		subgrid[strings.ToLower(name)] = true
	}
	found := map[string]bool{}
	res := out.Result
	var rawROIs []result.GammaStats
	for ri, reg := range regions {
		src := p.sources[reg]
		r := result.ROI{Name: reg.Name, Number: reg.Number, Kind: reg.Kind.String(), Voxels: reg.Centres.Len()}
		var color [3]uint8
		switch {
		case src != nil:
			r.Source, r.InterpretedType = "structure set", src.InterpretedType
			if src.HasColor {
				color = src.Color
			} else {
				color = defaultColor(len(out.Regions))
			}
		case strings.HasPrefix(reg.Name, "isodose"):
			r.Source, color = "isodose", [3]uint8{200, 120, 0}
		default:
			r.Source, color = "derived", [3]uint8{90, 90, 200}
		}
		r.GammaStats = toGammaStats(gres.StatsOver(&reg.Centres))
		r.VolumeCC = reg.VolumeCC()
		r.CoveredPercent = p.coveredPercent(reg, onRef)
		r.KindSource = p.kindSource[reg]
		if src == nil {
			r.KindSource = "derived"
		}
		r.FailingVolumeCC, r.WorstCentroidMM = p.failing(&reg.Centres, gres)
		r.Status, r.StatusDetail = regionStatus(reg, src, r.GammaStats)
		var rawStats result.GammaStats
		if raw != nil {
			rawStats = raw.rois[ri]
		}

		if src != nil && subgrid[strings.ToLower(reg.Name)] && reg.Centres.Len() > 0 {
			found[strings.ToLower(reg.Name)] = true
			res.Choices.SubGridROIs = append(res.Choices.SubGridROIs, reg.Name)
			res.Choices.SubGridStepMM = s.SubGridStep
			eval := p.Evaluated
			if corrected != nil {
				eval = corrected
			}
			st, step, err := p.subGrid(ctx, s, src, reg, gres.Criteria, eval)
			if err != nil {
				return nil, err
			}
			if raw != nil {
				rst, _, err := p.subGrid(ctx, s, src, reg, gres.Criteria, p.Evaluated)
				if err != nil {
					return nil, err
				}
				rawStats = toGammaStats(rst)
			}
			r.GammaStats = toGammaStats(st)
			r.SubGridMM = &step
			r.Status = regionStatusStats(r.Status, r.GammaStats)
			if r.Status.Evaluated() {
				r.StatusDetail = ""
			}
			res.Notes = append(res.Notes, fmt.Sprintf("ROI %q evaluated on a %g mm sub-grid of reference points (reference dose interpolated trilinearly): %d points instead of %d voxels", reg.Name, step, st.Evaluated+st.BelowThreshold+st.Outside, reg.Centres.Len()))
		}
		if r.VolumeCC > 0 {
			dvh, err := p.dvhPair(reg, onRef, s, gres.Criteria.NormDose)
			if err != nil {
				return nil, err
			}
			r.DVH = dvh
		}
		res.ROIs = append(res.ROIs, r)
		rawROIs = append(rawROIs, rawStats)
		out.Regions = append(out.Regions, reg)
		out.Colors = append(out.Colors, color)
	}
	for _, name := range s.SubGridROIs {
		if !found[strings.ToLower(name)] {
			res.Warnings = append(res.Warnings, fmt.Sprintf("sub-grid evaluation asked for ROI %q, which is not a rasterised ROI of the structure set", name))
		}
	}
	return rawROIs, nil
}

func defaultColor(i int) [3]uint8 {
	palette := [][3]uint8{{220, 50, 50}, {50, 160, 50}, {50, 90, 220}, {200, 160, 0}, {160, 60, 200}, {0, 170, 170}}
	return palette[i%len(palette)]
}

// failing returns the volume (cm³) of the failing voxels in set and their
// volume-weighted centroid in patient coordinates (nil when none).
func (p *Prepared) failing(set *volume.Runs, gres *gamma.Result) (float64, *[3]float64) {
	vol := 0.0
	var c [3]float64
	for n := range set.All() {
		st := gres.Status[n]
		if !(st == gamma.Capped || (st == gamma.Evaluated && gres.Gamma[n] > 1)) {
			continue
		}
		v := p.sizes.Volume(int(n))
		i, j, k := p.Reference.IJK(int(n))
		w := p.Reference.WorldOf(i, j, k)
		for a := 0; a < 3; a++ {
			c[a] += v * w[a]
		}
		vol += v
	}
	if vol == 0 {
		return 0, nil
	}
	for a := 0; a < 3; a++ {
		c[a] = roundTo(c[a]/vol, 0.01)
	}
	return vol / 1000, &c
}

func roundTo(v, step float64) float64 { return math.Round(v/step) * step }

func nonNil(s []string) []string {
	if s == nil {
		return []string{}
	}
	return s
}

// referenceMax returns the reference's maximum dose (grid or points), NaN
// when it has none.
func (p *Prepared) referenceMax() float64 {
	if p.Reference != nil {
		m, at := p.Reference.Max()
		if at < 0 {
			return math.NaN()
		}
		return float64(m)
	}
	m := math.NaN()
	for _, pt := range p.Points {
		if !(pt.Dose <= m) {
			m = pt.Dose
		}
	}
	return m
}

// normDoseInBand reports whether a normalisation dose lies within
// NormDoseBand of the reference maximum.
func (p *Prepared) normDoseInBand(norm float64) bool {
	m := p.referenceMax()
	return m > 0 && norm >= NormDoseBand[0]*m && norm <= NormDoseBand[1]*m
}

// checkNormDose refuses a normalisation dose (given on the command line or
// in the protocol) outside NormDoseBand of the reference maximum, naming
// the likely cause, unless s.AcceptNormDose.
func (p *Prepared) checkNormDose(s Settings) error {
	norm := s.Criteria.NormDose
	if norm == 0 || s.AcceptNormDose || p.normDoseInBand(norm) {
		return nil
	}
	m := p.referenceMax()
	if !(m > 0) {
		return nil // the engine refuses a reference without positive dose
	}
	ratio := norm / m
	what, check := fmt.Sprintf("the normalisation dose %.4g Gy", norm), "check --norm-dose or the protocol's norm_dose_gy"
	rx := s.NormDoseSource == "prescription"
	if rx {
		// A prescription is in Gy by the standard (PS3.3 C.8.8.10): no
		// cGy mistake, but a per-fraction reference against the course's
		// prescription, or the plan of another dose.
		what = fmt.Sprintf("the normalisation dose, the RT Plan's prescription %.4g Gy,", norm)
		check = "check that the RT Plan is this dose's (a prescription is for the whole course)"
	}
	cause := fmt.Sprintf("%s is %.3g × the reference maximum %.4g Gy, outside the plausible %g–%g × (this tool's choice: a plan's maximum normally lies near 100–130 %% of its prescription)",
		what, ratio, m, NormDoseBand[0], NormDoseBand[1])
	switch {
	case !rx && ratio >= 30 && ratio <= 300:
		cause += fmt.Sprintf("; it looks like a dose in cGy read as Gy: did you mean %.4g Gy?", norm/100)
	case !rx && ratio <= 1/30.0 && ratio >= 1/300.0:
		cause += fmt.Sprintf("; it looks like a dose in Gy where the reference is in cGy, or %.4g Gy meant as cGy", norm)
	case ratio > 1 && nearWhole(ratio):
		k, why := p.likelyFactor(ratio)
		cause += fmt.Sprintf("; it is about %.0f × the maximum: a plan total against a per-fraction reference (%d fractions: %s)?", math.Round(ratio), k, why)
	case ratio < 1 && nearWhole(1/ratio):
		cause += fmt.Sprintf("; the maximum is about %.0f × it: a per-fraction dose against a plan-total reference (%.0f fractions)?", math.Round(1/ratio), math.Round(1/ratio))
	}
	return badInput("%s; %s, or pass --accept-norm-dose to use it as given", cause, check)
}

// nearWhole reports whether v ≥ 2 lies within 5 % of a whole number.
func nearWhole(v float64) bool {
	r := math.Round(v)
	return r >= 2 && math.Abs(v-r) <= 0.05*r
}

func regionStatus(reg *roi.Region, src *structure.ROI, st result.GammaStats) (result.ROIStatus, string) {
	switch {
	case reg.NoContours:
		return result.StatusNoContours, ""
	case src != nil && reg.Planes == 0 && len(reg.Skipped) > 0:
		for _, sk := range reg.Skipped {
			if sk.Type == structure.ClosedPlanar {
				return result.StatusNotRasterised, sk.Reason
			}
		}
		return result.StatusNoClosedContours, ""
	case reg.Centres.Len() == 0 && reg.OutsideCC > 0:
		return result.StatusOutsideDoseGrid, ""
	case reg.Centres.Len() == 0:
		return result.StatusTooSmall, ""
	}
	return regionStatusStats(result.StatusEvaluated, st), ""
}

func regionStatusStats(prev result.ROIStatus, st result.GammaStats) result.ROIStatus {
	if st.Evaluated > 0 {
		return result.StatusEvaluated
	}
	if st.OutsideEvaluated > 0 && st.BelowThreshold == 0 {
		return result.StatusOutsideEvaluated
	}
	if st.BelowThreshold > 0 && st.OutsideEvaluated == 0 {
		return result.StatusBelowThreshold
	}
	if st.BelowThreshold > 0 {
		return result.StatusBelowOrOutside
	}
	if !prev.Evaluated() {
		return prev
	}
	return result.StatusNotEvaluated
}

// coveredPercent returns the part of the region's volume inside both dose
// grids, in percent: the contoured volume inside the reference grid (1 −
// OutsideCC/ContourCC, exact from the contours) times the partial-volume
// weighted share of its voxels inside the evaluated grid. Nil for a region
// without volume.
func (p *Prepared) coveredPercent(reg *roi.Region, onRef *volume.Grid) *float64 {
	inRef := 1.0
	if reg.ContourCC > 0 {
		// Areas clipped and unclipped differ by rounding only when the
		// ROI is wholly inside: 1e-9 of the volume is not a gap.
		if out := reg.OutsideCC / reg.ContourCC; out > 1e-9 {
			inRef = math.Max(0, 1-out)
		}
	}
	var all, covered float64
	for n, f := range reg.Cover.All() {
		v := float64(f) * p.sizes.Volume(int(n))
		all += v
		if !math.IsNaN(float64(onRef.Data[n])) {
			covered += v
		}
	}
	if all == 0 {
		// Centres only (contours thinner than the sub-samples).
		for n := range reg.Centres.All() {
			v := p.sizes.Volume(int(n))
			all += v
			if !math.IsNaN(float64(onRef.Data[n])) {
				covered += v
			}
		}
	}
	switch {
	case all == 0 && reg.ContourCC > 0:
		// Wholly outside the reference grid.
		return result.Ptr(0)
	case all == 0:
		return nil
	}
	inEval := 1.0
	if covered < all {
		inEval = covered / all
	}
	return result.Ptr(100 * inRef * inEval)
}

// dvhPair computes the dose-volume metrics of both doses over reg.
func (p *Prepared) dvhPair(reg *roi.Region, onRef *volume.Grid, s Settings, norm float64) (*result.DVHPair, error) {
	// Curves on common bins: 0.5 % of the normalisation dose. The DVHs
	// are summarised as they are read (roi.RegionSummary): a body
	// outline's millions of voxels are never held sorted.
	bin := norm / 200
	ref, err := roi.RegionSummary(p.Reference, reg, s.VDoses, bin)
	if err != nil {
		return nil, err
	}
	rm := ref.Metrics
	ev, err := roi.RegionSummary(onRef, reg, s.VDoses, bin)
	if err != nil {
		// The whole ROI lies outside the evaluated grid: no evaluated DVH.
		return &result.DVHPair{Reference: toDVHStats(rm), Evaluated: nanDVHStats(s.VDoses), DifferenceGy: nanDVHStats(s.VDoses), DifferencePercent: nanDVHStats(s.VDoses)}, nil
	}
	em := ev.Metrics
	pair := &result.DVHPair{Reference: toDVHStats(rm), Evaluated: toDVHStats(em)}
	diffs, err := roi.CompareMetrics(rm, em, 0)
	if err != nil {
		return nil, err
	}
	pair.DifferenceGy, pair.DifferencePercent = differenceStats(diffs, s.VDoses)
	if ref.CurveErr != nil {
		return nil, ref.CurveErr
	}
	if ev.CurveErr != nil {
		return nil, ev.CurveErr
	}
	pair.Curves = commonCurves(ref.Curve, ev.Curve)
	return pair, nil
}

func toDVHStats(m roi.Metrics) result.DVHStats {
	d := result.DVHStats{
		MeanGy: result.Ptr(m.Mean), MaxGy: result.Ptr(m.Max), MinGy: result.Ptr(m.Min),
		D98Gy: result.Ptr(m.D98), D95Gy: result.Ptr(m.D95), D50Gy: result.Ptr(m.D50), D2Gy: result.Ptr(m.D2),
		D003ccGy: result.Ptr(m.D003cc),
	}
	for _, v := range m.V {
		d.VolumeAtD = append(d.VolumeAtD, result.VAt{DoseGy: v.Dose, CC: result.Ptr(v.CC), Percent: result.Ptr(v.Percent)})
	}
	return d
}

func nanDVHStats(vDoses []float64) result.DVHStats {
	d := result.DVHStats{}
	for _, v := range vDoses {
		d.VolumeAtD = append(d.VolumeAtD, result.VAt{DoseGy: v})
	}
	return d
}

// differenceStats turns roi.CompareMetrics' list into the two DVHStats of
// differences in Gy (cm³ for V) and in percent.
func differenceStats(diffs []roi.Difference, vDoses []float64) (gy, pct result.DVHStats) {
	gy, pct = nanDVHStats(vDoses), nanDVHStats(vDoses)
	vi := 0
	for _, d := range diffs {
		dg, dp := result.Ptr(d.Delta), result.Ptr(d.Percent)
		switch d.Metric {
		case "Dmean":
			gy.MeanGy, pct.MeanGy = dg, dp
		case "Dmax":
			gy.MaxGy, pct.MaxGy = dg, dp
		case "Dmin":
			gy.MinGy, pct.MinGy = dg, dp
		case "D98%":
			gy.D98Gy, pct.D98Gy = dg, dp
		case "D95%":
			gy.D95Gy, pct.D95Gy = dg, dp
		case "D50%":
			gy.D50Gy, pct.D50Gy = dg, dp
		case "D2%":
			gy.D2Gy, pct.D2Gy = dg, dp
		case "D0.03cc":
			gy.D003ccGy, pct.D003ccGy = dg, dp
		default:
			if d.Unit == "cm3" && vi < len(vDoses) {
				gy.VolumeAtD[vi].CC, pct.VolumeAtD[vi].Percent = dg, dp
				vi++
			}
		}
	}
	return gy, pct
}

func commonCurves(r, e roi.Curve) *result.DVHCurves {
	n := max(len(r.Dose), len(e.Dose))
	dose := r.Dose
	if len(e.Dose) > len(r.Dose) {
		dose = e.Dose
	}
	c := &result.DVHCurves{DoseGy: make([]float64, n), ReferencePercent: make([]float64, n), EvaluatedPercent: make([]float64, n)}
	for i := 0; i < n; i++ {
		c.DoseGy[i] = roundTo(dose[i], 1e-6)
		if i < len(r.Percent) {
			c.ReferencePercent[i] = roundTo(r.Percent[i], 1e-4)
		}
		if i < len(e.Percent) {
			c.EvaluatedPercent[i] = roundTo(e.Percent[i], 1e-4)
		}
	}
	return c
}

// sortClusters orders clusters largest first, then by position, so the
// order is deterministic.
func sortClusters(cs []result.Cluster) {
	sort.SliceStable(cs, func(a, b int) bool {
		if cs[a].Voxels != cs[b].Voxels {
			return cs[a].Voxels > cs[b].Voxels
		}
		for i := 0; i < 3; i++ {
			if cs[a].CentroidMM[i] != cs[b].CentroidMM[i] {
				return cs[a].CentroidMM[i] < cs[b].CentroidMM[i]
			}
		}
		return false
	})
}
