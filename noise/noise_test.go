package noise

import (
	"fmt"
	"math"
	"testing"

	"voxgamma/volume"
)

const testDmax = 60.0 // Gy

// estimateFields are invented doses of the kinds the estimator meets: a
// planar field with its gradient along (1, 2, 2) (no axis sees a constant
// profile), spherical fields, and a smooth dose cloud without a plateau.
func estimateFields() []struct {
	name string
	f    field1D
} {
	var out []struct {
		name string
		f    field1D
	}
	add := func(name string, f field1D) {
		out = append(out, struct {
			name string
			f    field1D
		}{name, f})
	}
	for _, pen := range []float64{3, 5} {
		p := pen
		add(fmt.Sprintf("planar (1,2,2) penumbra %g mm", p), field1D{n: [3]float64{1 / 3.0, 2 / 3.0, 2 / 3.0},
			eval: func(u float64) float64 { return erfEdge(testDmax, 15, p, math.Abs(u)) }})
		add(fmt.Sprintf("sphere r 20 mm penumbra %g mm", p), field1D{spherical: true,
			eval: func(u float64) float64 { return erfEdge(testDmax, 20, p, u) }})
	}
	add("Gaussian cloud sd 15 mm", field1D{spherical: true, eval: func(u float64) float64 { return testDmax * math.Exp(-u*u/(2*15*15)) }})
	return out
}

// The estimate of σ on invented doses with Gaussian noise of known σ
// (σ at the maximum, growing as √D, the model the estimator assumes) is
// within 25 % of the truth from 0.5 % to 5 % (issue 14's requirement), on
// 1, 2 and 3 mm grids. The truth is the σ the noise was drawn with.
func TestEstimateKnownSigma(t *testing.T) {
	for _, fl := range estimateFields() {
		for _, h := range []float64{1, 2, 3} {
			g := newGrid(t, 64, h, 0.3)
			fillField(g, fl.f, fl.f.eval)
			for _, sig := range []float64{0.5, 1, 2, 3, 5} {
				noisy, _ := addNoise(g, sig, testDmax, uint64(1000*sig+10*h))
				e, err := mustDose(t, noisy).Estimate()
				if err != nil {
					t.Errorf("%s, %g mm, σ %g %%: %v", fl.name, h, sig, err)
					continue
				}
				if r := e.SigmaPercent / sig; r < 0.75 || r > 1.25 {
					t.Errorf("%s, %g mm: σ %g %% estimated as %.3g %% (ratio %.2f)", fl.name, h, sig, e.SigmaPercent, r)
				}
				if !(e.UncertaintyPercent > 0) || e.UncertaintyPercent > 0.25*e.SigmaPercent {
					t.Errorf("%s, %g mm, σ %g %%: uncertainty %.3g %% of an estimate of %.3g %%", fl.name, h, sig, e.UncertaintyPercent, e.SigmaPercent)
				}
			}
		}
	}
}

// On the same doses without noise the estimate is ≈ 0 (at most 0.05 %,
// a tenth of the smallest σ of interest): steep penumbrae, resolved or
// not, are not taken for noise.
func TestEstimateNoiseFree(t *testing.T) {
	for _, fl := range estimateFields() {
		for _, h := range []float64{1, 2, 3} {
			g := newGrid(t, 64, h, 0.3)
			fillField(g, fl.f, fl.f.eval)
			e, err := mustDose(t, g).Estimate()
			if err != nil {
				t.Errorf("%s, %g mm: %v", fl.name, h, err)
				continue
			}
			if e.SigmaPercent > 0.05 {
				t.Errorf("%s, %g mm: noise-free dose estimated at σ %.3g %%", fl.name, h, e.SigmaPercent)
			}
		}
	}
}

// A dose that does not vary along one axis gives a residual of exactly 0
// whatever its profile along the others: the residual is the tensor
// product of second differences, and the second difference of a constant
// is 0 (here a step edge, the steepest there is, along x and y only).
func TestEstimateExactlyZeroAlongAxis(t *testing.T) {
	g := newGrid(t, 40, 2, 0)
	d := g.Dims()
	for n := range g.Data {
		i, j, _ := g.IJK(n)
		v := 10.0
		if i > d[0]/2 && j < d[1]/3 {
			v = 50
		}
		g.Data[n] = float32(v + 0.1*float64(i))
	}
	e, err := mustDose(t, g).Estimate()
	if err != nil {
		t.Fatal(err)
	}
	if e.SigmaPercent != 0 {
		t.Errorf("σ %g %%, want exactly 0", e.SigmaPercent)
	}
}

// A dose with no flat high-dose voxel (a sphere five voxels across) gives
// no estimate rather than taking its edge for noise.
func TestEstimateRefusesTinyTarget(t *testing.T) {
	f := field1D{spherical: true, eval: func(u float64) float64 { return erfEdge(testDmax, 8, 3, u) }}
	g := newGrid(t, 48, 3, 0.3)
	fillField(g, f, f.eval)
	e, err := mustDose(t, g).Estimate()
	if err == nil && e.SigmaPercent > 0.05 {
		t.Errorf("estimated σ %.3g %% on a noise-free sphere of 8 mm radius on a 3 mm grid", e.SigmaPercent)
	}
}

// ModelSigma is σ_max·√(D/D_max) of the smoothed dose: on a uniform dose
// the smoothing changes nothing, so σ = σ_max·√(D/D_max) exactly.
func TestModelSigma(t *testing.T) {
	g := newGrid(t, 10, 1, 0)
	for n := range g.Data {
		g.Data[n] = 15
	}
	s := mustDose(t, g).ModelSigma(2, 60)
	want := 0.02 * 60 * math.Sqrt(15.0/60)
	for n, v := range s {
		if math.Abs(float64(v)-want) > 1e-6 {
			t.Fatalf("voxel %d: σ %g, want %g", n, v, want)
		}
	}
}

// A local quadratic or quartic least-squares fit reproduces a quadratic
// exactly (Savitzky and Golay, Anal Chem 36 (1964) 1627), with any weights: a
// dose quadratic along every grid line is returned unchanged, wherever
// the windows end up. On a 2 mm grid the filter works on the dose itself:
// every voxel is reproduced. On a 1 mm grid it works on the dose minus its
// binomial smoothing, a constant for a quadratic (the smoothing of a
// quadratic is the quadratic plus a constant times its second
// derivative) away from the faces, where the smoothing repeats the end
// samples: the voxels whose windows (6 samples) reach a voxel within 2 of
// a face are left out.
func TestDenoiseReproducesQuadratics(t *testing.T) {
	for _, h := range []float64{2, 1} {
		g := newGrid(t, 30*h, h, 0)
		for n := range g.Data {
			i, j, k := g.IJK(n)
			p := g.WorldOf(i, j, k)
			g.Data[n] = float32(30 + 0.5*p[0] - 0.02*p[1]*p[1] + 0.01*p[0]*p[2] + 0.003*p[2]*p[2])
		}
		d := mustDose(t, g)
		out, st, err := d.Denoise(d.ModelSigma(3, 60), FilterOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if st.Detail != (h == 1) {
			t.Errorf("%g mm: detail %v", h, st.Detail)
		}
		margin := 0
		if st.Detail {
			margin = 8
		}
		dims := g.Dims()
		for n := range g.Data {
			i, j, k := g.IJK(n)
			if min(i, j, k) < margin || max(i-dims[0], j-dims[1], k-dims[2]) >= -margin {
				continue
			}
			if diff := math.Abs(float64(out.Data[n] - g.Data[n])); diff > 2e-4 {
				t.Fatalf("%g mm: voxel (%d, %d, %d) changed by %g Gy", h, i, j, k, diff)
			}
		}
		if st.MeanWidth[0] < 9 {
			t.Errorf("%g mm: mean window %v samples on a noise-free quadratic: the windows should grow", h, st.MeanWidth)
		}
	}
}

// Pure noise on a uniform dose is left unbiased and reduced about as the
// largest windows allow. The variance of a Savitzky–Golay fit's centre
// estimate over 2m+1 samples is its central weight c₀ (the sum of the
// squared weights of a projection); a quadratic's is
// 3(3m²+3m−1)/((2m−1)(2m+1)(2m+3)), a quartic's
// 15(15m⁴+30m³−35m²−50m+12)/(4(2m−3)(2m−1)(2m+1)(2m+3)(2m+5))
// (Savitzky and Golay, Anal Chem 36 (1964) 1627: 131/231 for the quartic
// of 7 samples, m = 3; both agree with scipy.signal.savgol_coeffs, see
// TestFitsMatchScipy). On a 2 mm grid the filter works on the dose itself
// and its widest window is a quartic of 17 samples: c₀ = 0.2103 at m = 8;
// three passes keep c₀³, a standard deviation of 0.096σ. The window rule
// stops early at the few voxels where the noise itself looks like
// structure (tests at 3.5σ, at five window sizes along three axes), which
// the rms feels: the test allows 0.17σ.
// On a 1 mm grid the filter works on the detail with quadratics of up to
// 13 samples (c₀ = 0.1748 at m = 6) and leaves the binomial smoothing's
// own noise, (70/256)^{3/2} = 0.143σ (the sum of the squared weights of
// (1, 4, 6, 4, 1)/16 is 70/256, per axis): the test allows 0.2σ. The mean
// error is bounded by 0.1 Gy: the residual noise is correlated over about
// a window, so the 27³ voxels average over a few tens of independent
// values only (standard error about 0.05 Gy).
func TestDenoiseUniformNoise(t *testing.T) {
	for _, c := range []struct{ h, limit float64 }{{2, 0.17}, {1, 0.2}} {
		g := newGrid(t, 44*c.h, c.h, 0)
		for n := range g.Data {
			g.Data[n] = 60
		}
		noisy, sig := addNoise(g, 3, 60, 5)
		d := mustDose(t, noisy)
		out, _, err := d.Denoise(sig, FilterOptions{})
		if err != nil {
			t.Fatal(err)
		}
		// Interior voxels only (windows of full size, 17 samples).
		dims := g.Dims()
		sum, ss, n := 0.0, 0.0, 0
		for k := 9; k < dims[2]-9; k++ {
			for j := 9; j < dims[1]-9; j++ {
				for i := 9; i < dims[0]-9; i++ {
					e := float64(out.At(i, j, k)) - 60
					sum += e
					ss += e * e
					n++
				}
			}
		}
		mean, rms := sum/float64(n), math.Sqrt(ss/float64(n))
		if math.Abs(mean) > 0.1 {
			t.Errorf("%g mm: mean error %g Gy after filtering", c.h, mean)
		}
		if rms > c.limit*1.8 {
			t.Errorf("%g mm: residual noise %.3g Gy = %.3gσ, want at most %gσ", c.h, rms, rms/1.8, c.limit)
		}
	}
}

// A noise-free dose with its own estimate of σ (≈ 0) is left as it is.
func TestDenoiseNoiseFreeUnchanged(t *testing.T) {
	f := field1D{n: [3]float64{1 / 3.0, 2 / 3.0, 2 / 3.0}, eval: func(u float64) float64 { return erfEdge(testDmax, 15, 3, math.Abs(u)) }}
	g := newGrid(t, 48, 2, 0.3)
	fillField(g, f, f.eval)
	d := mustDose(t, g)
	e, err := d.Estimate()
	if err != nil {
		t.Fatal(err)
	}
	out, _, err := d.Denoise(d.ModelSigma(e.SigmaPercent, e.MaxDose), FilterOptions{})
	if err != nil {
		t.Fatal(err)
	}
	worst := 0.0
	for n := range g.Data {
		worst = math.Max(worst, math.Abs(float64(out.Data[n]-g.Data[n])))
	}
	if worst > 1e-3 {
		t.Errorf("noise-free dose changed by up to %g Gy", worst)
	}
}

// Results do not depend on the number of workers.
func TestDenoiseDeterministic(t *testing.T) {
	g := newGrid(t, 30, 1, 0)
	f := field1D{spherical: true, eval: func(u float64) float64 { return erfEdge(testDmax, 10, 3, u) }}
	fillField(g, f, f.eval)
	noisy, sig := addNoise(g, 2, 60, 9)
	var first *volume.Grid
	for _, w := range []int{1, 2, 5} {
		d, err := NewDose(noisy, w)
		if err != nil {
			t.Fatal(err)
		}
		out, _, err := d.Denoise(sig, FilterOptions{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		if first == nil {
			first = out
			continue
		}
		for n := range out.Data {
			if out.Data[n] != first.Data[n] {
				t.Fatalf("workers %d: voxel %d differs", w, n)
			}
		}
	}
}

// noisyEdge returns a spherical 3 mm error-function edge on a 30 mm grid of
// spacing h with 2 % noise (seeded), and its Dose.
func noisyEdge(t *testing.T, h float64, seed uint64) (*volume.Grid, *Dose) {
	t.Helper()
	g := newGrid(t, 30, h, 0)
	f := field1D{spherical: true, eval: func(u float64) float64 { return erfEdge(testDmax, 10, 3, u) }}
	fillField(g, f, f.eval)
	noisy, _ := addNoise(g, 2, 60, seed)
	return noisy, mustDose(t, noisy)
}

// DenoiseModel, which computes the model's σ voxel by voxel, gives the
// same dose and statistics bit for bit as Denoise given the map of
// ModelSigma (an identity of this package, no outside source), on a fine
// grid (the dose's detail filtered) and a coarse one (quartic windows).
func TestDenoiseModelMatchesMap(t *testing.T) {
	for _, h := range []float64{1, 2.5} {
		_, d := noisyEdge(t, h, 11)
		dmax := d.SmoothedMax()
		opt := FilterOptions{Floor: 0.05 * dmax}
		want, wst, err := d.Denoise(d.ModelSigma(2, dmax), opt)
		if err != nil {
			t.Fatal(err)
		}
		got, gst, err := d.DenoiseModel(2, dmax, opt)
		if err != nil {
			t.Fatal(err)
		}
		if gst != wst {
			t.Errorf("%g mm: statistics %+v, want %+v", h, gst, wst)
		}
		for n := range want.Data {
			if math.Float32bits(got.Data[n]) != math.Float32bits(want.Data[n]) {
				t.Fatalf("%g mm: voxel %d: %g, want %g", h, n, got.Data[n], want.Data[n])
			}
		}
	}
}

// Voxels the filter leaves alone keep their values bit for bit: every voxel
// when σ is 0, and the voxels whose smoothed dose is below the floor,
// on a fine grid (where the dose's detail is filtered, and the detail's
// round trip through float32 once moved them by a rounding) and a coarse
// one. The package's own contract (FilterOptions.Floor), no outside source.
func TestDenoiseLeavesUnfilteredVoxels(t *testing.T) {
	for _, h := range []float64{1, 2.5} {
		noisy, d := noisyEdge(t, h, 13)
		dmax := d.SmoothedMax()
		same, st, err := d.DenoiseModel(0, dmax, FilterOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if st.Detail != (h == 1) {
			t.Fatalf("%g mm: detail %v", h, st.Detail)
		}
		for n := range same.Data {
			if math.Float32bits(same.Data[n]) != math.Float32bits(noisy.Data[n]) {
				t.Fatalf("%g mm, σ 0: voxel %d %g, want %g", h, n, same.Data[n], noisy.Data[n])
			}
		}
		floor := 0.3 * dmax
		out, _, err := d.DenoiseModel(2, dmax, FilterOptions{Floor: floor})
		if err != nil {
			t.Fatal(err)
		}
		below, changed := 0, 0
		for n := range out.Data {
			if float64(d.smooth[n]) < floor {
				below++
				if math.Float32bits(out.Data[n]) != math.Float32bits(noisy.Data[n]) {
					t.Fatalf("%g mm: voxel %d below the floor %g, want %g", h, n, out.Data[n], noisy.Data[n])
				}
			} else if out.Data[n] != noisy.Data[n] {
				changed++
			}
		}
		if below == 0 || changed == 0 {
			t.Fatalf("%g mm: %d voxels below the floor, %d filtered: the case tests nothing", h, below, changed)
		}
	}
}

// Bad σ values are refused.
func TestDenoiseRefusesBadSigma(t *testing.T) {
	g := newGrid(t, 10, 1, 0)
	d := mustDose(t, g)
	for _, bad := range []float32{-1, float32(math.NaN()), float32(math.Inf(1))} {
		s := make([]float32, len(g.Data))
		s[3] = bad
		if _, _, err := d.Denoise(s, FilterOptions{}); err == nil {
			t.Errorf("σ %g accepted", bad)
		}
	}
	if _, _, err := d.Denoise(make([]float32, 3), FilterOptions{}); err == nil {
		t.Error("σ of the wrong length accepted")
	}
}
