package analysis

import (
	"strings"
	"testing"

	"voxgamma/gamma"
	"voxgamma/volume"
)

// TestCoarseGridWarning checks when the coarse evaluated-grid warning is
// given (spacing above a third of the DTA along any axis: the reading of
// Low and Dempsey, Med Phys 30 (2003) 2455, marked from memory) and that it
// names the spacing, the DTA, the interpolation and the measured figures
// of its spacing class.
func TestCoarseGridWarning(t *testing.T) {
	grid := func(sp [3]float64) *volume.Grid {
		g, err := volume.NewUniform([3]int{4, 4, 4}, [3]float64{0, 0, 0}, sp, volume.Identity)
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	for _, tc := range []struct {
		sp     [3]float64
		dta    float64
		interp gamma.Interpolation
		want   []string // empty: no warning
	}{
		{[3]float64{1, 1, 1}, 3, gamma.CubicBSpline, nil},
		{[3]float64{0.6, 0.6, 0.6}, 2, gamma.CubicBSpline, nil},
		{[3]float64{1, 1, 1}, 2, gamma.CubicBSpline, []string{"(1 × 1 × 1 mm)", "2 mm DTA", "cubic B-spline", "0.5 × the DTA", "within 0.001", "0.02 percentage points", "from memory"}},
		{[3]float64{3, 3, 2.5}, 2, gamma.CubicBSpline, []string{"(3 × 3 × 2.5 mm)", "1.5 × the DTA", "within 0.11"}},
		{[3]float64{3, 3, 2.5}, 2, gamma.LinearSimplex, []string{"six tetrahedra", "within 0.97", "12 percentage points"}},
		{[3]float64{2, 2, 4}, 2, gamma.Trilinear, []string{"beyond the largest measured", "may be off by more"}},
	} {
		w := coarseGridWarning(grid(tc.sp), tc.dta, tc.interp)
		if len(tc.want) == 0 {
			if w != "" {
				t.Errorf("%v at %g mm DTA: warning %q, want none", tc.sp, tc.dta, w)
			}
			continue
		}
		for _, s := range tc.want {
			if !strings.Contains(w, s) {
				t.Errorf("%v at %g mm DTA (%v): warning %q lacks %q", tc.sp, tc.dta, tc.interp, w, s)
			}
		}
	}
}
