package analysis

import (
	"fmt"
	"strings"

	"voxgamma/gamma"
	"voxgamma/volume"
)

// coarseLimit is the largest evaluated-grid spacing, as a fraction of the
// DTA, below which no warning is given. Low and Dempsey (Med Phys 30 (2003)
// 2455) discuss how the evaluated distribution's resolution relative to the
// DTA biases Γ; a third of the DTA is the usual reading of that guidance
// (from memory: not checked against the paper's text).
const coarseLimit = 1.0 / 3

// coarseAccuracy holds, per interpolation, what the accuracy study of
// BENCHMARKS.md measured against the true Γ of analytic doses (planar edges
// along six directions and a spherical edge, 3.5 mm penumbra, 3 %/2 mm
// global, evaluated grids of 1, 2, 2.5 and 3 mm: gamma/accuracy_test.go)
// up to a spacing of ratio × the DTA: the largest |Γ − Γ_true| and the
// largest distance of the pass rate from the true one (percentage points),
// each the largest at that spacing or any finer one.
var coarseAccuracy = map[gamma.Interpolation][]struct{ ratio, maxGamma, passPP float64 }{
	gamma.CubicBSpline:  {{0.5, 0.001, 0.02}, {1, 0.017, 0.5}, {1.25, 0.045, 0.7}, {1.5, 0.11, 1.0}},
	gamma.Trilinear:     {{0.5, 0.06, 5.3}, {1, 0.23, 10.6}, {1.25, 0.34, 10.6}, {1.5, 0.48, 10.6}},
	gamma.LinearSimplex: {{0.5, 0.15, 12}, {1, 0.53, 12}, {1.25, 0.77, 12}, {1.5, 0.97, 12}},
}

// coarseGridWarning returns the warning for an evaluated grid whose
// spacing is coarse for the DTA, saying how far the result may move, or ""
// when its spacing is at most coarseLimit × DTA along every axis.
func coarseGridWarning(eval *volume.Grid, dta float64, interp gamma.Interpolation) string {
	var sp [3]float64
	coarsest := 0.0
	for a := 0; a < 3; a++ {
		sp[a], _ = eval.Spacing(a)
		coarsest = max(coarsest, sp[a])
	}
	ratio := coarsest / dta
	if ratio <= coarseLimit*(1+1e-9) {
		return ""
	}
	spacing := fmt.Sprintf("%s × %s × %s mm", trimNum(sp[0]), trimNum(sp[1]), trimNum(sp[2]))
	var b strings.Builder
	fmt.Fprintf(&b, "the evaluated grid's spacing (%s) is coarse for the %s mm DTA: more than a third of it (the limit is the usual reading of Low and Dempsey, Med Phys 30 (2003) 2455, from memory). Between grid nodes Γ depends on the interpolation of the evaluated dose (%s here), ", spacing, trimNum(dta), interp.Describe())
	rows := coarseAccuracy[interp]
	found := false
	for _, r := range rows {
		if ratio <= r.ratio*(1+1e-9) {
			fmt.Fprintf(&b, "and on analytic dose edges (3.5 mm penumbra, 3 %%/2 mm) on grids of up to %s × the DTA it gave Γ within %.2g of the true Γ and pass rates within %.2g percentage points of the true ones (BENCHMARKS.md): this result may be off by as much, and by more where its dose edges are sharper", trimNum(r.ratio), r.maxGamma, r.passPP)
			found = true
			break
		}
	}
	if !found {
		last := rows[len(rows)-1]
		fmt.Fprintf(&b, "and the spacing is beyond the largest measured (%s × the DTA, where Γ was within %.2g of the true Γ and pass rates within %.2g percentage points): this result may be off by more", trimNum(last.ratio), last.maxGamma, last.passPP)
	}
	return b.String()
}

func trimNum(v float64) string {
	return strings.TrimRight(strings.TrimRight(fmt.Sprintf("%.3f", v), "0"), ".")
}
