package analysis

import (
	"errors"
	"fmt"
	"math"
	"path/filepath"
	"strings"

	"voxgamma/dicomio"
	"voxgamma/metaimage"
	"voxgamma/noise"
	"voxgamma/result"
	"voxgamma/volume"
)

// NoiseHandling says what is done about the evaluated dose's statistical
// noise.
type NoiseHandling int

const (
	// NoiseAuto estimates the noise from the evaluated dose and corrects
	// for it when it is at least MinCorrectedSigmaPercent.
	NoiseAuto NoiseHandling = iota
	// NoiseOff neither estimates nor corrects.
	NoiseOff
	// NoiseGiven takes σ at the maximum from NoiseSettings.Percent and
	// corrects for it.
	NoiseGiven
)

// String returns "auto", "off" or "given".
func (h NoiseHandling) String() string {
	switch h {
	case NoiseOff:
		return "off"
	case NoiseGiven:
		return "given"
	}
	return "auto"
}

// MinCorrectedSigmaPercent is the smallest estimated noise (1σ at the
// maximum, percent) that the automatic handling corrects for: below it a
// dose is taken as noise-free (a planning system's dose estimates at
// about 0.00–0.03 %), and the comparison is not run a second time.
const MinCorrectedSigmaPercent = 0.1

// ShiftWarningPP is the pass-rate change (percentage points) between the
// raw and the corrected comparison, overall or in any ROI, from which
// every output warns.
const ShiftWarningPP = 1.0

// NoiseSettings say how the evaluated dose's statistical noise is handled.
type NoiseSettings struct {
	// Handling is NoiseAuto (the zero value), NoiseOff or NoiseGiven. An
	// uncertainty map (Inputs.EvaluatedUncertainty) takes precedence over
	// both auto and given.
	Handling NoiseHandling
	// Percent is σ at the evaluated maximum, percent, for NoiseGiven (0:
	// declared noise-free, nothing corrected).
	Percent float64
	// MapUnit says how the uncertainty map's values are read.
	MapUnit noise.MapUnit
	// JudgeRaw makes the protocol's rules judge the raw (uncorrected)
	// figures instead of the corrected ones.
	JudgeRaw bool
	// Filter tunes the correction (zero: the defaults).
	Filter noise.FilterOptions
}

// The method texts recorded in the result.
const (
	noiseEstimatorText = "σ at the maximum from the median absolute residual of a local linear fit along each axis " +
		"(tensor product of three-point second differences: Gasser, Sroka and Jennen-Steinmetz, Biometrika 73 (1986) 625; " +
		"Immerkær, CVIU 64 (1996) 300), scaled by 1.4826 (the MAD; Donoho and Johnstone, Biometrika 81 (1994) 425), " +
		"over the flat voxels of the high-dose region, under σ(D) = σ_max·√(D/D_max)"
	noiseFilterText = "locally adaptive Savitzky–Golay filter: weighted local least-squares fits along each axis " +
		"(Savitzky and Golay, Anal Chem 36 (1964) 1627), quadratic over 5 and 7 samples and quartic over 9 to 17 " +
		"(quadratic over 5 to 13 on the dose's detail on grids of 1.5 mm or finer), at most 24 mm each side, chosen per voxel from σ " +
		"(Lepski's rule and a χ² test) with range weights that keep steep edges (El Naqa et al., Phys Med Biol 50 (2005) 909; " +
		"Kawrakow, Phys Med Biol 47 (2002) 3087)"
)

// noisePrep is what Prepare found about the evaluated dose's noise.
type noisePrep struct {
	info *result.Noise // without the raw figures, filled in by Run
	// correct says that the evaluated dose is to be denoised, which Run
	// does once the comparison against the dose as given is done (denoise),
	// so that the denoised dose is not held beside that comparison: with σ
	// from sigmaMap (Gy, per evaluated voxel) or, when it is nil, from the
	// noise model at sigmaPercent of dmax.
	correct            bool
	sigmaMap           []float32
	sigmaPercent, dmax float64
	filter             noise.FilterOptions
	warnings           []string
	notes              []string
}

// denoise returns the evaluated dose eval denoised as Prepare decided, and
// records the filter's figures in the noise information. It is made anew
// at each Run (a sweep's criteria sets each run it: a few seconds against
// the two comparisons' minutes) rather than kept, so that it never sits in
// memory beside a comparison that does not use it (BENCHMARKS.md, "Fast
// when it matters").
func (np *noisePrep) denoise(eval *volume.Grid) (*volume.Grid, error) {
	d, err := noise.NewDose(eval, np.filter.Workers)
	if err != nil {
		return nil, fmt.Errorf("%w: evaluated dose: %w", ErrBadInput, err)
	}
	var out *volume.Grid
	var st noise.FilterStats
	if np.sigmaMap != nil {
		out, st, err = d.Denoise(np.sigmaMap, np.filter)
	} else {
		out, st, err = d.DenoiseModel(np.sigmaPercent, np.dmax, np.filter)
	}
	if err != nil {
		return nil, err
	}
	np.info.Filter = &result.NoiseFilter{MeanWindowSamples: st.MeanWidth, ResidualSigmaRatio: result.Ptr(st.ResidualSigmaRatio), FloorGy: np.filter.Floor}
	return out, nil
}

// readUncertaintyMap reads an uncertainty map: an RT Dose (its DoseUnits
// decide the unit unless given: GY absolute, RELATIVE σ/D) or a MetaImage
// (.mha). It returns the grid and the unit the file states (UnitAuto when
// it says nothing).
func readUncertaintyMap(path string) (*volume.Grid, noise.MapUnit, *dicomio.DoseInfo, error) {
	if strings.EqualFold(filepath.Ext(path), ".mha") {
		g, err := metaimage.Read(path)
		if err != nil {
			return nil, 0, nil, fmt.Errorf("%w: uncertainty map: %w", ErrBadInput, err)
		}
		return g, noise.UnitAuto, nil, nil
	}
	g, info, err := dicomio.ReadDose(path)
	if err != nil {
		return nil, 0, nil, fmt.Errorf("%w: uncertainty map: %w", ErrBadInput, err)
	}
	unit := noise.UnitGy
	if info.Relative() {
		unit = noise.UnitAuto
	}
	return g, unit, info, nil
}

// prepareNoise estimates or reads the evaluated dose's noise (after the
// evaluated dose was scaled, if it was) and, when there is noise to
// correct for, denoises it.
func (p *Prepared) prepareNoise(s Settings) error {
	np, err := prepareNoise(p.Loaded, s, p.scale)
	if err != nil {
		return err
	}
	p.noise = np
	p.warnings = append(p.warnings, np.warnings...)
	p.notes = append(p.notes, np.notes...)
	return nil
}

// prepareNoise estimates or reads the evaluated dose's noise and, when
// there is noise to correct for, denoises the evaluated dose. scale is the
// factor the evaluated dose was multiplied by (0 or 1: none): an absolute
// uncertainty map is multiplied by it too.
func prepareNoise(l *Loaded, s Settings, scale float64) (*noisePrep, error) {
	ns := s.Noise
	if ns.Handling == NoiseOff && l.uncertainty == nil {
		return &noisePrep{notes: []string{"evaluated-dose noise handling is off: the noise of a Monte Carlo dose, which lowers Γ, was neither estimated nor corrected"}}, nil
	}
	d, err := noise.NewDose(l.Evaluated, s.Workers)
	if err != nil {
		return nil, fmt.Errorf("%w: evaluated dose: %w", ErrBadInput, err)
	}
	np := &noisePrep{info: &result.Noise{Handling: ns.Handling.String(), Judged: "corrected"}}
	if ns.JudgeRaw {
		np.info.Judged = "raw"
	}
	info := np.info
	dmax := d.SmoothedMax()
	info.MaxDoseGy = dmax
	est, estErr := d.Estimate()
	if estErr == nil {
		info.EstimatedSigmaPercent = result.Ptr(est.SigmaPercent)
		info.EstimatedUncertaintyPercent = result.Ptr(est.UncertaintyPercent)
	} else if !errors.Is(estErr, noise.ErrNoEstimate) {
		return nil, estErr
	}
	var sigma []float32
	switch {
	case l.uncertainty != nil:
		info.Handling, info.Source, info.Model = "map", "map", "per-voxel uncertainty map"
		onEval := l.uncertainty
		if !onEval.SameGeometry(l.Evaluated) {
			onEval, err = l.uncertainty.ResampleOnto(l.Evaluated, float32(math.NaN()))
			if err != nil {
				return nil, fmt.Errorf("%w: the uncertainty map does not overlap the evaluated dose", ErrBadInput)
			}
			np.notes = append(np.notes, "the uncertainty map was interpolated (trilinearly) onto the evaluated dose's grid")
		}
		unit := ns.MapUnit
		if unit == noise.UnitAuto {
			unit = l.uncertaintyUnit
		}
		if unit == noise.UnitAuto {
			var why string
			unit, why, err = d.InferUnit(onEval.Data, est)
			if err != nil {
				return nil, fmt.Errorf("%w: %w: give its unit (--evaluated-uncertainty-unit gy, relative or percent)", ErrBadInput, err)
			}
			np.notes = append(np.notes, "the uncertainty map does not state its unit: "+why)
		}
		info.MapUnit = unit.String()
		if sigma, err = d.MapSigma(onEval.Data, unit); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
		if unit == noise.UnitGy && scale > 0 && scale != 1 {
			for n := range sigma {
				sigma[n] *= float32(scale)
			}
			np.notes = append(np.notes, fmt.Sprintf("the uncertainty map (Gy) was multiplied by %g with the evaluated dose", scale))
		}
		info.SigmaPercent = result.Ptr(d.SigmaAtMax(sigma))
	case ns.Handling == NoiseGiven:
		info.Source, info.Model = "given", noiseModelText
		info.SigmaPercent = result.Ptr(ns.Percent)
		if ns.Percent == 0 {
			np.notes = append(np.notes, "the evaluated dose was declared noise-free (--evaluated-noise 0): no noise correction")
			return np, nil
		}
		np.sigmaPercent = ns.Percent
	default: // auto
		info.Model = noiseModelText
		np.notes = append(np.notes, fmt.Sprintf("evaluated-dose noise handling auto (the default): σ is estimated from the evaluated dose and corrected for from %g %% at the maximum; "+
			"a planning system's dose estimates at about 0 and is left as it is", MinCorrectedSigmaPercent))
		if estErr != nil {
			np.warnings = append(np.warnings, fmt.Sprintf("the evaluated dose's noise could not be estimated (%v): no noise correction was made; "+
				"for a Monte Carlo dose give --evaluated-noise PERCENT or --evaluated-uncertainty FILE", strings.TrimPrefix(estErr.Error(), noise.ErrNoEstimate.Error()+": ")))
			info.Method = noiseEstimatorText
			return np, nil
		}
		info.Source = "estimated"
		if est.Voxels < noise.EnoughResiduals {
			np.notes = append(np.notes, fmt.Sprintf("the evaluated dose's noise was estimated from %d flat voxels only (a small or steep high-dose region): σ %.3g ± %.2g %%",
				est.Voxels, est.SigmaPercent, est.UncertaintyPercent))
		}
		info.SigmaPercent = result.Ptr(est.SigmaPercent)
		info.SigmaUncertaintyPercent = result.Ptr(est.UncertaintyPercent)
		info.Method = noiseEstimatorText
		if est.SigmaPercent < MinCorrectedSigmaPercent {
			np.notes = append(np.notes, fmt.Sprintf("evaluated-dose noise estimated at %.3g ± %.2g %% at the maximum (%s): below %g %%, taken as noise-free, no correction",
				est.SigmaPercent, est.UncertaintyPercent, info.Model, MinCorrectedSigmaPercent))
			return np, nil
		}
		np.sigmaPercent = est.SigmaPercent
	}
	if info.Source != "estimated" && estErr == nil && *info.SigmaPercent > 0 && est.SigmaPercent > 3*est.UncertaintyPercent {
		if r := *info.SigmaPercent / est.SigmaPercent; r > 2 || r < 0.5 {
			np.warnings = append(np.warnings, fmt.Sprintf("the %s noise, %.3g %% at the maximum, disagrees with the evaluated dose's own estimate, %.3g ± %.2g %%: check the value or the map",
				info.Source, *info.SigmaPercent, est.SigmaPercent, est.UncertaintyPercent))
		}
	}
	if !ns.JudgeRaw {
		np.notes = append(np.notes, "the protocol's rules judge the noise-corrected figures (the default): noise in the evaluated dose biases Γ toward passing "+
			"(Low and Dempsey, Med Phys 30 (2003) 2455), and a wrong pass can reach a patient; the raw figures are under noise in the JSON result")
	}
	np.notes = append(np.notes, "with the noise correction, Γ statistics, the Γ map and the failing clusters come from the comparison against the denoised evaluated dose; "+
		"DVH metrics and the difference map use the evaluated dose as given, whose noise lowers D98 and D95 and raises D2 and D0.03cc")
	np.filter = ns.Filter
	np.filter.Workers = s.Workers
	// Voxels below half the low-dose threshold are far from any point
	// evaluated and are left as they are.
	np.filter.Floor = s.Criteria.ThresholdPercent / 200 * dmax
	np.correct, np.sigmaMap, np.dmax = true, sigma, dmax
	info.Corrected = true
	if info.Method != "" {
		info.Method += "; "
	}
	info.Method += "correction: " + noiseFilterText
	return np, nil
}

const noiseModelText = "σ(D) = σ_max·√(D/D_max) (Monte Carlo variance grows with the dose)"

// finishNoise fills in the raw figures, the shift between raw and
// corrected pass rates and the warning, once both comparisons are done.
// raw is nil when no correction was made (the raw figures are then the
// result's own).
func finishNoise(res *result.Result, raw *rawFigures, rawROIs []result.GammaStats) {
	n := res.Noise
	if n == nil {
		return
	}
	if raw == nil {
		n.RawOverall = res.Overall
		for _, r := range res.ROIs {
			n.ROIs = append(n.ROIs, result.NoiseROI{Name: r.Name, GammaStats: r.GammaStats})
		}
		if !n.Corrected {
			n.Judged = "raw"
		}
		return
	}
	n.RawOverall = toGammaStats(raw.overall)
	for i, r := range res.ROIs {
		n.ROIs = append(n.ROIs, result.NoiseROI{Name: r.Name, GammaStats: rawROIs[i]})
	}
	shift := func(corr, raw *float64) float64 {
		if corr == nil || raw == nil {
			return 0
		}
		return *corr - *raw
	}
	n.PassRateShiftPP = result.Ptr(roundTo(shift(res.Overall.PassRate, n.RawOverall.PassRate), 1e-6))
	worst, where := math.Abs(*n.PassRateShiftPP), "overall"
	var moved []string
	for i, r := range res.ROIs {
		if d := math.Abs(shift(r.PassRate, n.ROIs[i].PassRate)); d > ShiftWarningPP {
			moved = append(moved, fmt.Sprintf("%s %s → %s %%", r.Name, n.ROIs[i].PassRateText, r.PassRateText))
			if d > worst {
				worst, where = d, "ROI "+r.Name
			}
		}
	}
	if worst <= ShiftWarningPP {
		return
	}
	n.Warning = true
	msg := fmt.Sprintf("Monte Carlo noise: σ = %s %% of the evaluated maximum (%s) moves pass rates by up to %.1f percentage points (%s); "+
		"pass rates raw → corrected: overall %s → %s %%",
		sigmaText(n), n.Source, worst, where, n.RawOverall.PassRateText, res.Overall.PassRateText)
	if len(moved) > 0 {
		msg += ", " + strings.Join(moved, ", ")
	}
	msg += fmt.Sprintf(". The protocol's rules judged the %s figures", n.Judged)
	res.Warnings = append(res.Warnings, msg)
}

// sigmaText formats σ at the maximum with its uncertainty when known.
func sigmaText(n *result.Noise) string {
	if n.SigmaPercent == nil {
		return "unknown"
	}
	s := fmt.Sprintf("%.3g", *n.SigmaPercent)
	if n.SigmaUncertaintyPercent != nil {
		s += fmt.Sprintf(" ± %.2g", *n.SigmaUncertaintyPercent)
	}
	return s
}

// judgedView returns the result as the protocol's rules are to see it:
// r itself, or, when the raw figures are judged, a copy holding the raw Γ
// statistics overall and per ROI.
func judgedView(r *result.Result) *result.Result {
	n := r.Noise
	if n == nil || !n.Corrected || n.Judged != "raw" {
		return r
	}
	v := *r
	v.Overall = n.RawOverall
	v.ROIs = append([]result.ROI(nil), r.ROIs...)
	for i := range v.ROIs {
		if i < len(n.ROIs) {
			v.ROIs[i].GammaStats = n.ROIs[i].GammaStats
		}
	}
	return &v
}
