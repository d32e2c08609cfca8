package roi

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats"

	"voxgamma/phantom"
	"voxgamma/structure"
)

// Uniform dose in a sphere: every D_x equals that dose, as does the mean,
// the minimum and the maximum (ICRU Report 83 (2010): D_x is the minimum
// dose of the hottest x; with one dose level it is that level), and V_d is
// the whole volume at d and nothing above it.
func TestDVHUniform(t *testing.T) {
	sph := phantom.Sphere{Centre: [3]float64{0.4, -0.3, 0.2}, Radius: 10}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "PTV", PlaneSpacing: 2})
	g := boxGrid(t, [3]float64{-10, -10, -10}, [3]float64{10, 10, 10}, [3]float64{1.5, 1.5, 1.5}, [3]float64{0.2, 0.3, 0.4})
	if err := phantom.Fill(g, phantom.Uniform(2.125)); err != nil {
		t.Fatal(err)
	}
	reg := mustRasterise(t, g, &roi, Options{})
	h, err := RegionDVH(g, reg)
	if err != nil {
		t.Fatal(err)
	}
	m := h.Metrics([]float64{2.125, 2.13})
	for name, v := range map[string]float64{"D98": m.D98, "D95": m.D95, "D50": m.D50, "D2": m.D2, "D0.03cc": m.D003cc, "Dmin": m.Min, "Dmax": m.Max} {
		if v != 2.125 {
			t.Errorf("%s = %g, want 2.125", name, v)
		}
	}
	if math.Abs(m.Mean-2.125) > 1e-12 {
		t.Errorf("Dmean = %.15g, want 2.125", m.Mean)
	}
	if math.Abs(m.VolumeCC-reg.VolumeCC()) > 1e-12 || m.V[0].Percent != 100 || m.V[1].CC != 0 {
		t.Errorf("volume %g cm³ (region %g), V2.125Gy %v, V2.13Gy %v", m.VolumeCC, reg.VolumeCC(), m.V[0], m.V[1])
	}
}

// A linear dose ramp across a box. For D(x) = a + g·x over x ∈ [0, L] on a
// box of uniform cross-section, the volume with dose ≥ D is the part with
// x ≥ (D − a)/g, so the hottest fraction f of the volume is x ≥ L(1 − f),
// whose minimum dose is D_f = a + g·L(1 − f) (ICRU Report 83 definition of
// D_x); likewise V_d / V = (L − (d − a)/g) / L for a ≤ d ≤ a + g·L.
//
// Tolerance tied to the voxel size h along x: each voxel carries its
// centre's dose, within g·h/2 of the dose anywhere in its part of the box
// (so every quantile moves by at most g·h/2), and the partial-volume
// fractions of the voxels cut by the box's faces x = 0 and x = L are
// quantised by the 4 sub-samples per voxel, which can misplace up to a
// quarter voxel layer: 0.75·g·h in all. For V_d the same argument gives
// 0.75 of a voxel layer, 0.75·h/L of the volume.
func TestDVHRamp(t *testing.T) {
	const a, grad, L = 10.0, 0.5, 40.0
	for _, hx := range []float64{1, 2, 2.5} {
		box := phantom.Box{Min: [3]float64{0, 0, 0}, Max: [3]float64{L, 20, 20}}
		// Planes at 0.5, 1.5, ..., 19.5: slabs fill z ∈ [0, 20] exactly.
		roi := mustROI(t, box, phantom.ROISpec{Name: "box", PlaneSpacing: 1, PlanePhase: 0.5})
		g := boxGrid(t, box.Min, box.Max, [3]float64{hx, hx, hx}, [3]float64{0.3 * hx, 0.1 * hx, 0.6 * hx})
		if err := phantom.Fill(g, phantom.Ramp([3]float64{}, [3]float64{1, 0, 0}, a, grad)); err != nil {
			t.Fatal(err)
		}
		reg := mustRasterise(t, g, &roi, Options{})
		h, err := RegionDVH(g, reg)
		if err != nil {
			t.Fatal(err)
		}
		tol := 0.75 * grad * hx
		vtol := 75 * hx / L // percent
		var worst float64
		for _, f := range []float64{0.02, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.98} {
			want := a + grad*L*(1-f)
			got := h.DPercent(100 * f)
			worst = math.Max(worst, math.Abs(got-want))
			if math.Abs(got-want) > tol {
				t.Errorf("h = %g mm: D%g%% = %.4f Gy, analytic %.4f Gy, beyond ±%g Gy", hx, 100*f, got, want, tol)
			}
		}
		var worstV float64
		for _, d := range []float64{11, 15, 20, 25, 29} {
			want := (L - (d-a)/grad) / L * 100
			_, got := h.V(d)
			worstV = math.Max(worstV, math.Abs(got-want))
			if math.Abs(got-want) > vtol {
				t.Errorf("h = %g mm: V%gGy = %.3f %%, analytic %.3f %%, beyond ±%g %%", hx, d, got, want, vtol)
			}
		}
		if math.Abs(h.Mean-(a+grad*L/2)) > tol {
			t.Errorf("h = %g mm: Dmean %.4f Gy, analytic %.4f Gy", hx, h.Mean, a+grad*L/2)
		}
		t.Logf("h = %g mm: worst D_x error %.4f Gy (tolerance %g), worst V_d error %.3f %% (tolerance %g)", hx, worst, tol, worstV, vtol)
	}
}

// D_x, V_d and the curve on a hand-made DVH (values worked out by hand from
// the stated definitions).
func TestDVHDefinitions(t *testing.T) {
	// Doses 1..5 Gy, volumes 0.01, 0.02, 0.03, 0.04, 0.10 cm³ (total 0.2).
	h, err := NewDVH("hand", []float64{3, 1, 5, 2, 4, math.NaN()}, []float64{0.03, 0.10, 0.01, 0.04, 0.02, 0.5})
	if err != nil {
		t.Fatal(err)
	}
	// Sorted: 5 (0.01, cum 0.01), 4 (cum 0.03), 3 (cum 0.06), 2 (cum 0.10), 1 (cum 0.20).
	cases := []struct{ pct, want float64 }{
		{0, 5}, {5, 5}, {5.01, 4}, {15, 4}, {30, 3}, {30.01, 2}, {50, 2}, {50.5, 1}, {100, 1},
	}
	for _, c := range cases {
		if got := h.DPercent(c.pct); got != c.want {
			t.Errorf("D%g%% = %g, want %g", c.pct, got, c.want)
		}
	}
	if d, ok := h.DCC(0.03); d != 4 || !ok {
		t.Errorf("D0.03cc = %g (%v), want 4", d, ok)
	}
	if d, ok := h.DCC(0.3); d != 1 || ok {
		t.Errorf("D0.3cc of a 0.2 cm³ region = %g (%v), want the minimum and ok = false", d, ok)
	}
	if cc, pct := h.V(3); math.Abs(cc-0.06) > 1e-15 || math.Abs(pct-30) > 1e-12 {
		t.Errorf("V3Gy = %g cm³, %g %%, want 0.06 and 30", cc, pct)
	}
	if cc, _ := h.V(5.0001); cc != 0 {
		t.Errorf("V above the maximum = %g, want 0", cc)
	}
	if math.Abs(h.ExcludedCC-0.5) > 1e-15 || math.Abs(h.TotalCC-0.2) > 1e-15 {
		t.Errorf("excluded %g, total %g", h.ExcludedCC, h.TotalCC)
	}
	if want := (5*0.01 + 4*0.02 + 3*0.03 + 2*0.04 + 1*0.10) / 0.2; math.Abs(h.Mean-want) > 1e-12 {
		t.Errorf("mean %g, want %g", h.Mean, want)
	}
	c, err := h.Curve(0.5)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Dose) != 12 || c.Dose[0] != 0 || c.Percent[0] != 100 || c.Dose[11] != 5.5 || c.CC[11] != 0 || math.Abs(c.CC[6]-0.06) > 1e-15 {
		t.Errorf("curve: %v / %v", c.Dose, c.CC)
	}
	for q := 1; q < len(c.CC); q++ {
		if c.CC[q] > c.CC[q-1] {
			t.Fatalf("curve not decreasing at %g Gy", c.Dose[q])
		}
	}
	if c, _ := h.Curve(0); len(c.Dose) != 1002 {
		t.Errorf("default curve has %d points, want 0.1 %% steps of the maximum: 1002", len(c.Dose))
	}
	if _, err := NewDVH("bad", []float64{1}, []float64{-1}); err == nil {
		t.Error("negative volume accepted")
	}
	if _, err := NewDVH("nan only", []float64{math.NaN()}, []float64{1}); !errors.Is(err, ErrEmpty) {
		t.Errorf("all-NaN DVH: err %v, want ErrEmpty", err)
	}
}

// Differences: evaluated − reference, percent of the normalisation dose or
// of the reference value, V_d in percent of the region.
func TestCompareMetrics(t *testing.T) {
	ref := Metrics{Name: "PTV", VolumeCC: 50, Mean: 60, Max: 63, Min: 55, D003cc: 62.5, D98: 57, D95: 58, D50: 60, D2: 62,
		V: []VolumeAt{{Dose: 57, CC: 49, Percent: 98}}}
	ev := ref
	ev.Mean, ev.D98 = 61.2, 56.4
	ev.V = []VolumeAt{{Dose: 57, CC: 47.5, Percent: 95}}
	ds, err := CompareMetrics(ref, ev, 60)
	if err != nil {
		t.Fatal(err)
	}
	get := func(name string) Difference {
		for _, d := range ds {
			if d.Metric == name {
				return d
			}
		}
		t.Fatalf("no %s", name)
		return Difference{}
	}
	if d := get("Dmean"); math.Abs(d.Delta-1.2) > 1e-12 || math.Abs(d.Percent-2) > 1e-12 || !strings.Contains(d.Basis, "normalisation") {
		t.Errorf("Dmean difference %+v", d)
	}
	if d := get("V57Gy"); math.Abs(d.Delta+1.5) > 1e-12 || math.Abs(d.Percent+3) > 1e-12 || d.Unit != "cm3" {
		t.Errorf("V57Gy difference %+v", d)
	}
	ds, _ = CompareMetrics(ref, ev, 0)
	if d := ds[4]; d.Metric != "D98%" || math.Abs(d.Percent-100*(-0.6)/57) > 1e-12 || d.Basis != "reference value" {
		t.Errorf("D98%% difference relative to the reference value: %+v", d)
	}
	ev.V = nil
	if _, err := CompareMetrics(ref, ev, 60); err == nil {
		t.Error("different V_d levels accepted")
	}
}

// The DVH needs the region's grid geometry.
func TestRegionDVHGeometry(t *testing.T) {
	g := unitGrid(t, 10, 10, []float64{0, 1, 2})
	other := unitGrid(t, 10, 10, []float64{0, 1, 2.5})
	r := structure.ROI{Name: "Cord", Contours: []structure.Contour{square(2, 2, 6, 6, 1)}}
	reg := mustRasterise(t, g, &r, Options{})
	if _, err := RegionDVH(other, reg); err == nil || !strings.Contains(err.Error(), `"Cord"`) {
		t.Errorf("DVH on another geometry: err %v", err)
	}
	// NaN doses are excluded and reported.
	for n := range g.Data {
		g.Data[n] = 1
	}
	g.Data[reg.Cover.Voxels.Runs()[0].Start] = float32(math.NaN())
	h, err := RegionDVH(g, reg)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(h.ExcludedCC-0.001) > 1e-12 || math.Abs(h.TotalCC-0.015) > 1e-12 {
		t.Errorf("excluded %g cm³, total %g cm³; want 0.001 and 0.015", h.ExcludedCC, h.TotalCC)
	}
	empty := &Region{Name: "nothing", grid: g, sizes: reg.sizes}
	if _, err := RegionDVH(g, empty); !errors.Is(err, ErrEmpty) {
		t.Errorf("empty region: err %v", err)
	}
}

func randomDVHInput(n int, seed uint64) (d, w []float64) {
	rng := rand.New(rand.NewPCG(seed, 7))
	d = make([]float64, n)
	w = make([]float64, n)
	for q := range d {
		d[q] = 60 * rng.Float64() * rng.Float64()
		w[q] = 0.001 * (0.05 + rng.Float64())
	}
	return d, w
}

// The DVH builder sums the cumulative volumes in place over the weights
// (floats.CumSum(w, w)); gonum documents CumSum with a separate
// destination. The in-place sum must equal the separate one bit for bit,
// at every length the assembly's four-wide loop and its tail take.
func TestCumSumInPlace(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	for n := 1; n <= 67; n++ {
		w := make([]float64, n)
		for i := range w {
			w[i] = rng.Float64() * 3
		}
		want := floats.CumSum(make([]float64, n), w)
		got := floats.CumSum(w, w)
		for i := range want {
			if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
				t.Fatalf("n=%d: in-place cumulative sum [%d] = %v, separate %v", n, i, got[i], want[i])
			}
		}
	}
}

// RegionDVH, which sorts one key per voxel and reads the weights again,
// builds the same DVH as NewDVH given the region's doses and weights (an
// identity of this package): the same doses in the same order, ties among
// them (doses rounded to 0.25 Gy), negative and zero doses and NaN voxels
// included; cumulative volumes (at the end of each run of equal doses) and
// the mean to the rounding of a sum taken in another order; every metric
// alike.
func TestRegionDVHMatchesNewDVH(t *testing.T) {
	sph := phantom.Sphere{Centre: [3]float64{0.4, -0.3, 0.2}, Radius: 9}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "PTV", PlaneSpacing: 2})
	g := boxGrid(t, [3]float64{-10, -10, -10}, [3]float64{10, 10, 10}, [3]float64{1.5, 1.5, 1.5}, [3]float64{0.2, 0.3, 0.4})
	rng := rand.New(rand.NewPCG(7, 11))
	for n := range g.Data {
		switch v := rng.Float64(); {
		case v < 0.02:
			g.Data[n] = float32(math.NaN())
		case v < 0.05:
			g.Data[n] = float32(math.Copysign(0, v-0.035))
		default:
			g.Data[n] = float32(math.Round((rng.Float64()*12-1)*4) / 4)
		}
	}
	reg := mustRasterise(t, g, &roi, Options{})
	h, err := RegionDVH(g, reg)
	if err != nil {
		t.Fatal(err)
	}
	var d, w []float64
	for n, f := range reg.Cover.All() {
		d = append(d, float64(g.Data[n]))
		w = append(w, float64(f)*reg.sizes.Volume(int(n))/1000)
	}
	want, err := NewDVH("PTV", d, w)
	if err != nil {
		t.Fatal(err)
	}
	if len(h.Dose) != len(want.Dose) || h.ExcludedCC != want.ExcludedCC {
		t.Fatalf("%d voxels, %g cm³ excluded; want %d, %g", len(h.Dose), h.ExcludedCC, len(want.Dose), want.ExcludedCC)
	}
	for m := range h.Dose {
		if h.Dose[m] != want.Dose[m] {
			t.Fatalf("Dose[%d] = %g, want %g", m, h.Dose[m], want.Dose[m])
		}
		// Within a run of equal doses the voxels may come in another
		// order: the cumulative volumes agree where the dose changes.
		last := m == len(h.Dose)-1 || h.Dose[m+1] != h.Dose[m]
		if last && math.Abs(h.Cum[m]-want.Cum[m]) > 1e-12*want.TotalCC {
			t.Fatalf("Cum[%d] = %.17g, want %.17g", m, h.Cum[m], want.Cum[m])
		}
	}
	if math.Abs(h.Mean-want.Mean) > 1e-12*math.Abs(want.Mean) || h.Max != want.Max || h.Min != want.Min {
		t.Errorf("mean, max, min %g, %g, %g; want %g, %g, %g", h.Mean, h.Max, h.Min, want.Mean, want.Max, want.Min)
	}
	vd := []float64{0, 2.25, 5, 10.5}
	got, exp := h.Metrics(vd), want.Metrics(vd)
	for name, p := range map[string][2]float64{"D98": {got.D98, exp.D98}, "D95": {got.D95, exp.D95}, "D50": {got.D50, exp.D50}, "D2": {got.D2, exp.D2}, "D0.03cc": {got.D003cc, exp.D003cc}} {
		if p[0] != p[1] {
			t.Errorf("%s = %g, want %g", name, p[0], p[1])
		}
	}
	for i := range vd {
		if math.Abs(got.V[i].CC-exp.V[i].CC) > 1e-12*want.TotalCC {
			t.Errorf("V%gGy = %g cm³, want %g", vd[i], got.V[i].CC, exp.V[i].CC)
		}
	}
	// The keys order every float32 as the floats are ordered, descending.
	vals := []float32{float32(math.Inf(1)), math.MaxFloat32, 2, 1e-45, 0, float32(math.Copysign(0, -1)), -1e-45, -2, -math.MaxFloat32, float32(math.Inf(-1))}
	for i, v := range vals {
		if back := doseOfKey(descendingKey(v)); math.Float32bits(back) != math.Float32bits(v) {
			t.Errorf("key of %g gives back %g", v, back)
		}
		if i > 0 && !(descendingKey(vals[i-1]) < descendingKey(v)) {
			t.Errorf("key of %g not before key of %g", vals[i-1], v)
		}
	}
}
