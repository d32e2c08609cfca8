package noise

import (
	"fmt"
	"math"
	"testing"

	"voxgamma/gamma"
)

// correctionCase is a field with exact truth (field1D) whose evaluated
// dose is the reference scaled by 1.02 and moved outward by 2.5 mm: the
// high-dose region passes 3 %/2 mm (Γ = 2/3) and the penumbrae partly
// fail, a real disagreement of the kind the gamma test must not hide.
func correctionCase(spherical bool, pen float64) field1D {
	const k, s = 1.02, 2.5
	if spherical {
		return field1D{spherical: true,
			ref:  func(u float64) float64 { return erfEdge(testDmax, 20, pen, u) },
			eval: func(u float64) float64 { return k * erfEdge(testDmax, 20+s, pen, u) }}
	}
	return field1D{n: [3]float64{1 / 3.0, 2 / 3.0, 2 / 3.0},
		ref:  func(u float64) float64 { return erfEdge(testDmax, 15, pen, math.Abs(u)) },
		eval: func(u float64) float64 { return k * erfEdge(testDmax, 15, pen, math.Abs(u-s)) }}
}

// The noise correction against exact truth (issue 14's target): with
// Monte Carlo-like noise of 2–3 % at the maximum (growing as √D), σ
// estimated from the dose itself, the corrected pass rate is within 2.5
// points of the noise-free truth and the mean Γ within 0.05, where the raw
// comparison is off by more. The truth is the exact Γ (a 1D minimum along
// the field's coordinate, see field1D) when the engine's own result on the
// noise-free dose agrees with it within 0.5 points; otherwise the
// interpolant of the evaluated grid is the larger error, and the engine's
// noise-free result is the truth the correction is held to. The raw
// comparison, which only shows that the case tests something, uses the
// simplex interpolation: the engine's cubic spline is many times slower
// on a noisy dose. The cases include those that quadratic fits alone
// missed (BENCHMARKS.md): 5 mm penumbrae on 2 and 3 mm grids, whose
// gentle shoulders a quadratic over 9 to 13 samples rounded by up to half
// of σ (corrected pass rates 3–4 points high).
func TestCorrectionAgainstTruth(t *testing.T) {
	c := gamma.Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10, NormDose: testDmax}
	cases := []struct {
		spherical   bool
		pen, h, sig float64
	}{
		{false, 3, 1, 3}, {true, 5, 2, 3}, {false, 5, 2, 2}, {false, 5, 3, 2}, {true, 5, 1, 3}, {false, 3, 2, 3}, {true, 5, 3, 3},
	}
	if testing.Short() {
		cases = cases[:2]
	}
	for _, cs := range cases {
		name := fmt.Sprintf("planar penumbra %g mm, %g mm grid, σ %g %%", cs.pen, cs.h, cs.sig)
		if cs.spherical {
			name = fmt.Sprintf("sphere penumbra %g mm, %g mm grid, σ %g %%", cs.pen, cs.h, cs.sig)
		}
		t.Run(name, func(t *testing.T) {
			f := correctionCase(cs.spherical, cs.pen)
			size := 56.0
			if cs.h > 1 {
				size = 80
			}
			ref, eval := newGrid(t, size, cs.h, 0), newGrid(t, size, cs.h, 0)
			tc := buildTruth(t, f, ref, eval, c)
			clean := runGamma(t, ref, eval, c)
			truePass, trueMean := tc.pass, tc.mean
			if math.Abs(clean.PassRate-tc.pass) > 0.5 {
				t.Logf("engine on the noise-free dose %.2f %% (mean Γ %.3f), exact %.2f %% (%.3f): the engine's is the truth here",
					clean.PassRate, clean.Mean, tc.pass, tc.mean)
				truePass, trueMean = clean.PassRate, clean.Mean
			}
			noisy, _ := addNoise(eval, cs.sig, testDmax, uint64(17+10*cs.h+cs.pen+100*cs.sig))
			d := mustDose(t, noisy)
			e, err := d.Estimate()
			if err != nil {
				t.Fatal(err)
			}
			den, _, err := d.Denoise(d.ModelSigma(e.SigmaPercent, e.MaxDose), FilterOptions{Floor: 0.05 * e.MaxDose})
			if err != nil {
				t.Fatal(err)
			}
			raw, corr := runGammaFast(t, ref, noisy, c), runGamma(t, ref, den, c)
			t.Logf("truth %.2f %% / %.3f; raw %.2f %% / %.3f; corrected %.2f %% / %.3f (σ estimated %.2f %%)",
				truePass, trueMean, raw.PassRate, raw.Mean, corr.PassRate, corr.Mean, e.SigmaPercent)
			if math.Abs(corr.PassRate-truePass) > 2.5 || math.Abs(corr.Mean-trueMean) > 0.05 {
				t.Errorf("corrected %.2f %% / mean Γ %.3f, truth %.2f %% / %.3f", corr.PassRate, corr.Mean, truePass, trueMean)
			}
			rawClean := runGammaFast(t, ref, eval, c)
			if math.Abs(raw.PassRate-rawClean.PassRate) <= 2.5 && math.Abs(raw.Mean-rawClean.Mean) <= 0.05 {
				t.Errorf("noise moves the raw comparison only from %.2f %% / %.3f to %.2f %% / %.3f: the case does not test the correction",
					rawClean.PassRate, rawClean.Mean, raw.PassRate, raw.Mean)
			}
		})
	}
}
