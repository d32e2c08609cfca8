package noise

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"voxgamma/gamma"
	"voxgamma/volume"
)

// A field whose dose varies along one coordinate only: u = n·(p − c) for
// a planar field, u = |p − c| for a spherical one. Γ of such a pair needs
// a search along that coordinate alone: for the planar field the nearest
// point of dose level D_e(u') lies on the plane u = u' at distance |u −
// u'|, and for two concentric spherical fields on the sphere r = u' along
// the same ray, at the same distance. So the exact Γ is a 1D minimum
// (Low et al., Med Phys 25 (1998) 656, restricted to that line).
type field1D struct {
	spherical bool
	centre    [3]float64
	n         [3]float64 // unit direction (planar)
	ref, eval func(u float64) float64
}

func (f field1D) coord(p [3]float64) float64 {
	d := [3]float64{p[0] - f.centre[0], p[1] - f.centre[1], p[2] - f.centre[2]}
	if f.spherical {
		return math.Sqrt(d[0]*d[0] + d[1]*d[1] + d[2]*d[2])
	}
	return f.n[0]*d[0] + f.n[1]*d[1] + f.n[2]*d[2]
}

// erfEdge is a dose edge of height a falling from inside (u < edge) to
// outside, an error function whose 80 %–20 % width is penumbra (mm): the
// Gaussian σ is penumbra / (2·0.8416).
func erfEdge(a, edge, penumbra, u float64) float64 {
	s := penumbra / (2 * 0.8416212335729143)
	return a * 0.5 * math.Erfc((u-edge)/(math.Sqrt2*s))
}

// exactGamma returns Γ at coordinate u for reference dose dr: the minimum
// over u' within search of √((u'−u)²/Δd² + (D_e(u')−dr)²/ΔD²), by a
// scan at Δd/200 then golden-section refinement around the best sample.
// For the spherical field u' stays ≥ 0.
func (f field1D) exactGamma(u, dr, dta, dd, search float64) float64 {
	g2 := func(v float64) float64 {
		x := (v - u) / dta
		y := (f.eval(v) - dr) / dd
		return x*x + y*y
	}
	lo, hi := u-search, u+search
	if f.spherical && lo < 0 {
		lo = 0
	}
	step := dta / 200
	best, at := math.Inf(1), lo
	for v := lo; v <= hi; v += step {
		if x := g2(v); x < best {
			best, at = x, v
		}
	}
	a, b := math.Max(lo, at-step), math.Min(hi, at+step)
	const phi = 0.6180339887498949
	for it := 0; it < 60; it++ {
		c := b - phi*(b-a)
		d := a + phi*(b-a)
		if g2(c) < g2(d) {
			b = d
		} else {
			a = c
		}
	}
	best = math.Min(best, g2((a+b)/2))
	cap := search / dta
	return math.Min(math.Sqrt(best), cap)
}

// truthStats returns the exact pass rate and mean Γ over the reference
// voxels at or above the threshold, with Γ tabulated along the field's
// coordinate every 0.005 mm and interpolated linearly.
type truthCase struct {
	f          field1D
	ref, eval  *volume.Grid // eval noise-free
	c          gamma.Criteria
	pass, mean float64
}

func newGrid(t testing.TB, size, h float64, shift float64) *volume.Grid {
	t.Helper()
	n := int(math.Round(size/h)) + 1
	o := -size/2 + shift
	g, err := volume.NewUniform([3]int{n, n, n}, [3]float64{o, o, o}, [3]float64{h, h, h}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func fillField(g *volume.Grid, f field1D, dose func(float64) float64) {
	d := g.Dims()
	n := 0
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				g.Data[n] = float32(dose(f.coord(g.WorldOf(i, j, k))))
				n++
			}
		}
	}
}

func buildTruth(t testing.TB, f field1D, ref, eval *volume.Grid, c gamma.Criteria) *truthCase {
	t.Helper()
	fillField(ref, f, f.ref)
	fillField(eval, f, f.eval)
	tc := &truthCase{f: f, ref: ref, eval: eval, c: c}
	dd := c.DosePercent / 100 * c.NormDose
	search := c.SearchRadius()
	thr := c.ThresholdPercent / 100 * c.NormDose
	// Table of Γ along u.
	umin, umax := math.Inf(1), math.Inf(-1)
	for n := range ref.Data {
		i, j, k := ref.IJK(n)
		u := f.coord(ref.WorldOf(i, j, k))
		umin, umax = math.Min(umin, u), math.Max(umax, u)
	}
	const du = 0.005
	m := int((umax-umin)/du) + 2
	tab := make([]float64, m)
	for q := range tab {
		u := umin + float64(q)*du
		tab[q] = f.exactGamma(u, f.ref(u), c.DTA, dd, search)
	}
	sum, pass, cnt := 0.0, 0, 0
	for n, dr := range ref.Data {
		if float64(dr) < thr {
			continue
		}
		i, j, k := ref.IJK(n)
		u := f.coord(ref.WorldOf(i, j, k))
		x := (u - umin) / du
		q := int(x)
		if q >= m-1 {
			q = m - 2
		}
		gv := tab[q] + (x-float64(q))*(tab[q+1]-tab[q])
		sum += gv
		if gv <= 1 {
			pass++
		}
		cnt++
	}
	tc.pass = 100 * float64(pass) / float64(cnt)
	tc.mean = sum / float64(cnt)
	return tc
}

// addNoise returns eval with Gaussian noise of σ = sigmaPct % of dmax at
// dmax, growing as √D (Monte Carlo-like), and the true σ per voxel.
func addNoise(eval *volume.Grid, sigmaPct, dmax float64, seed uint64) (*volume.Grid, []float32) {
	rng := rand.New(rand.NewPCG(seed, 7))
	out := eval.Clone()
	sig := make([]float32, len(out.Data))
	for n, d := range eval.Data {
		s := sigmaPct / 100 * dmax * math.Sqrt(math.Max(float64(d), 0)/dmax)
		sig[n] = float32(s)
		out.Data[n] = d + float32(s*rng.NormFloat64())
	}
	return out, sig
}

// runGamma compares with the engine's default interpolation of the
// evaluated dose.
func runGamma(t testing.TB, ref, eval *volume.Grid, c gamma.Criteria) gamma.Stats {
	t.Helper()
	return runGammaWith(t, ref, eval, c, gamma.Options{})
}

// runGammaFast compares with the piecewise-linear (simplex) interpolation,
// whose search is fastest on a noisy dose: for the raw comparisons that
// show how far noise moves the result (the bias is the noise's, whatever
// the interpolant).
func runGammaFast(t testing.TB, ref, eval *volume.Grid, c gamma.Criteria) gamma.Stats {
	t.Helper()
	return runGammaWith(t, ref, eval, c, gamma.Options{Interpolation: gamma.LinearSimplex})
}

func runGammaWith(t testing.TB, ref, eval *volume.Grid, c gamma.Criteria, opt gamma.Options) gamma.Stats {
	t.Helper()
	r, err := gamma.CompareGrids(context.Background(), ref, eval, c, opt)
	if err != nil {
		t.Fatal(err)
	}
	return r.Stats
}

// Test shorthands over Dose.
func mustDose(t testing.TB, g *volume.Grid) *Dose {
	t.Helper()
	d, err := NewDose(g, 0)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func estimateOf(g *volume.Grid) (Estimate, error) {
	d, err := NewDose(g, 0)
	if err != nil {
		return Estimate{}, err
	}
	return d.Estimate()
}

// modelSigmaOf and denoiseOf as separate steps.
func modelSigmaOf(g *volume.Grid, sigmaPercent, dmax float64) []float32 {
	d, _ := NewDose(g, 0)
	return d.ModelSigma(sigmaPercent, dmax)
}

func denoiseOf(g *volume.Grid, sigma []float32, opt FilterOptions) (*volume.Grid, FilterStats, error) {
	d, err := NewDose(g, opt.Workers)
	if err != nil {
		return nil, FilterStats{}, err
	}
	return d.Denoise(sigma, opt)
}
