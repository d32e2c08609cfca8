package roi

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"voxgamma/phantom"
	"voxgamma/volume"
)

// summaryGrid returns a grid about a rasterised sphere of radius 9 mm and
// the sphere's region, the grid's doses set by fill.
func summaryGrid(t *testing.T, radius float64, fill func(n int) float32) (*volume.Grid, *Region) {
	t.Helper()
	sph := phantom.Sphere{Centre: [3]float64{0.4, -0.3, 0.2}, Radius: radius}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "PTV", PlaneSpacing: 2})
	g := boxGrid(t, [3]float64{-10, -10, -10}, [3]float64{10, 10, 10}, [3]float64{0.8, 0.9, 1.1}, [3]float64{0.2, 0.3, 0.4})
	for n := range g.Data {
		g.Data[n] = fill(n)
	}
	return g, mustRasterise(t, g, &roi, Options{})
}

// TestRegionSummaryMatchesDVH checks the radix selection's metrics and
// curve (RegionSummary's for regions of 2¹⁶ voxels or more) against those
// of the sorted DVH (RegionDVH, itself checked against numpy in
// TestDVHAgainstNumpy): the doses D_x, minimum, maximum and the curve's
// doses exactly, volumes and the mean to 1e-12 (the sums run in another
// order). RegionSummary itself, on these smaller regions, gives the sorted
// DVH's figures bit for bit. The doses: ties on a quarter-gray lattice with NaN and signed
// zeros; continuous doses; all in a band of 0.2 Gy at 60 Gy, which shares
// one or two buckets of the first digit and is settled by the second;
// negative doses.
func TestRegionSummaryMatchesDVH(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 2026))
	fills := map[string]func(int) float32{
		"ties, NaN and signed zeros": func(int) float32 {
			switch v := rng.Float64(); {
			case v < 0.02:
				return float32(math.NaN())
			case v < 0.05:
				return float32(math.Copysign(0, v-0.035))
			default:
				return float32(math.Round((rng.Float64()*12-1)*4) / 4)
			}
		},
		"continuous":         func(int) float32 { return float32(70 * rng.Float64()) },
		"one narrow band":    func(int) float32 { return float32(59.9 + 0.2*rng.Float64()) },
		"negative and small": func(int) float32 { return float32(rng.NormFloat64() * 1e-3) },
	}
	vDoses := []float64{-1e-3, 0, 2.25, 5, 10.5, 59.95, 60}
	for name, fill := range fills {
		g, reg := summaryGrid(t, 9, fill)
		for _, bin := range []float64{0, 0.05, 0.7} {
			h, err := RegionDVH(g, reg)
			if err != nil {
				t.Fatal(err)
			}
			want := h.Metrics(vDoses)
			wantCurve, err := h.Curve(bin)
			if err != nil {
				t.Fatal(err)
			}
			s, err := radixSummary(g, reg, vDoses, bin)
			if err != nil || s.CurveErr != nil {
				t.Fatalf("%s: %v, %v", name, err, s.CurveErr)
			}
			if small, err := RegionSummary(g, reg, vDoses, bin); err != nil || small.Metrics.Mean != want.Mean || small.Metrics.VolumeCC != want.VolumeCC || small.Curve.CC[0] != wantCurve.CC[0] {
				t.Errorf("%s: RegionSummary of %d voxels: %v, mean %g, volume %g; want the sorted DVH's %g, %g", name, reg.Cover.Len(), err, small.Metrics.Mean, small.Metrics.VolumeCC, want.Mean, want.VolumeCC)
			}
			got := s.Metrics
			tol := 1e-12 * want.VolumeCC
			for what, p := range map[string][2]float64{
				"D98": {got.D98, want.D98}, "D95": {got.D95, want.D95}, "D50": {got.D50, want.D50},
				"D2": {got.D2, want.D2}, "D0.03cc": {got.D003cc, want.D003cc}, "min": {got.Min, want.Min}, "max": {got.Max, want.Max},
			} {
				if math.Float64bits(p[0]) != math.Float64bits(p[1]) {
					t.Errorf("%s: %s = %g, want %g", name, what, p[0], p[1])
				}
			}
			if math.Abs(got.VolumeCC-want.VolumeCC) > tol || got.ExcludedCC != want.ExcludedCC || got.Below003cc != want.Below003cc {
				t.Errorf("%s: volume %g, excluded %g, below 0.03 cm³ %v; want %g, %g, %v", name, got.VolumeCC, got.ExcludedCC, got.Below003cc, want.VolumeCC, want.ExcludedCC, want.Below003cc)
			}
			if math.Abs(got.Mean-want.Mean) > 1e-12*math.Max(math.Abs(want.Max), math.Abs(want.Min)) {
				t.Errorf("%s: mean %.17g, want %.17g", name, got.Mean, want.Mean)
			}
			for i := range vDoses {
				if math.Abs(got.V[i].CC-want.V[i].CC) > tol || math.Abs(got.V[i].Percent-want.V[i].Percent) > 1e-10 {
					t.Errorf("%s: V%g = %g cm³ (%g %%), want %g (%g %%)", name, vDoses[i], got.V[i].CC, got.V[i].Percent, want.V[i].CC, want.V[i].Percent)
				}
			}
			if len(s.Curve.Dose) != len(wantCurve.Dose) {
				t.Fatalf("%s, bin %g: %d curve points, want %d", name, bin, len(s.Curve.Dose), len(wantCurve.Dose))
			}
			for j := range wantCurve.Dose {
				if s.Curve.Dose[j] != wantCurve.Dose[j] || math.Abs(s.Curve.CC[j]-wantCurve.CC[j]) > tol ||
					math.Abs(s.Curve.Percent[j]-wantCurve.Percent[j]) > 1e-10 {
					t.Fatalf("%s, bin %g: point %d (%g, %g, %g), want (%g, %g, %g)", name, bin, j,
						s.Curve.Dose[j], s.Curve.CC[j], s.Curve.Percent[j], wantCurve.Dose[j], wantCurve.CC[j], wantCurve.Percent[j])
				}
			}
		}
	}
}

// TestRegionSummaryEdges: a region under 0.03 cm³, a region with no known
// dose, a curve that cannot be made (its metrics still given), and a dose
// on another grid, for RegionSummary (which sorts regions this small) and
// the radix selection alike.
func TestRegionSummaryEdges(t *testing.T) {
	ways := map[string]func(*volume.Grid, *Region, []float64, float64) (Summary, error){
		"RegionSummary": RegionSummary, "radix selection": radixSummary,
	}
	for way, summary := range ways {
		g, reg := summaryGrid(t, 1.8, func(n int) float32 { return float32(n % 7) })
		h, err := RegionDVH(g, reg)
		if err != nil {
			t.Fatal(err)
		}
		s, err := summary(g, reg, nil, 0)
		if err != nil {
			t.Fatal(err)
		}
		if want := h.Metrics(nil); !s.Metrics.Below003cc || s.Metrics.D003cc != want.D003cc || s.Metrics.D003cc != h.Min {
			t.Errorf("%s, tiny region: D0.03cc %g (below %v), want the minimum %g", way, s.Metrics.D003cc, s.Metrics.Below003cc, h.Min)
		}

		g, reg = summaryGrid(t, 5, func(int) float32 { return float32(math.NaN()) })
		if _, err := summary(g, reg, nil, 0); !errors.Is(err, ErrEmpty) {
			t.Errorf("%s, no known dose: error %v, want ErrEmpty", way, err)
		}

		g, reg = summaryGrid(t, 5, func(n int) float32 { return float32(n % 50) })
		for _, bin := range []float64{math.NaN(), math.Inf(1), 1e-9} {
			s, err := summary(g, reg, []float64{10}, bin)
			if err != nil || s.CurveErr == nil || len(s.Curve.Dose) != 0 {
				t.Errorf("%s, bin %g: error %v, curve error %v, %d points; want a curve error and no curve", way, bin, err, s.CurveErr, len(s.Curve.Dose))
			}
			if s.Metrics.Max != 49 || len(s.Metrics.V) != 1 {
				t.Errorf("%s, bin %g: metrics %+v lost with the curve", way, bin, s.Metrics)
			}
		}
	}

	g, reg := summaryGrid(t, 5, func(n int) float32 { return 1 })
	other := boxGrid(t, [3]float64{-10, -10, -10}, [3]float64{10, 10, 10}, [3]float64{1, 1, 1}, [3]float64{})
	if _, err := RegionSummary(other, reg, nil, 0); err == nil {
		t.Error("a dose on another grid gave no error")
	}
	if _, err := RegionSummary(g, nil, nil, 0); err == nil {
		t.Error("no region gave no error")
	}
}
