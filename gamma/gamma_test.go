package gamma

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"voxgamma/internal/fault"
	"voxgamma/volume"
)

// fill sets every voxel of g to fn(patient position).
func fill(g *volume.Grid, fn func(p [3]float64) float64) {
	d := g.Dims()
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				g.Set(i, j, k, float32(fn(g.WorldOf(i, j, k))))
			}
		}
	}
}

func mustGrid(t testing.TB, dims [3]int, origin, spacing [3]float64, dir [3][3]float64) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform(dims, origin, spacing, dir)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// interiorMask selects the reference voxels at least margin mm inside the
// evaluated grid's bounds, so the search never reaches the evaluated edge.
func interiorMask(ref, eval *volume.Grid, margin float64) *volume.Mask {
	lo, hi := eval.Bounds()
	m := volume.NewMask(ref)
	d := ref.Dims()
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				p := ref.WorldOf(i, j, k)
				in := true
				for a := 0; a < 3; a++ {
					if p[a] < lo[a]+margin || p[a] > hi[a]-margin {
						in = false
					}
				}
				m.Bits[ref.Index(i, j, k)] = in
			}
		}
	}
	return m
}

var (
	// Feet-first prone: every axis flipped.
	flippedAll = [3][3]float64{{-1, 0, 0}, {0, -1, 0}, {0, 0, -1}}
	// Feet-first supine: x and z flipped.
	feetFirst = [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}}
)

// TestLinearGradientShift checks the closed form for a dose that varies
// linearly along an oblique unit direction n, D_ref(x) = a + g·(n·x), and an
// evaluated dose equal to the reference shifted by s along n,
// D_eval(x) = D_ref(x − s·n) = D_ref(x) − g·s.
//
// Derivation from the definition of Low et al., Med Phys 25 (1998) 656:
// write r_e = r_r + t·n + p with p ⊥ n. Then D_eval(r_e) − D_ref(r_r) =
// g·(t − s) does not depend on p, and |r_e − r_r|² = t² + |p|², so p = 0 at
// the minimum and
//
//	Γ²(t) = t²/Δd² + g²(t − s)²/ΔD².
//
// Setting dΓ²/dt = 0 gives t = s·g²Δd²/(ΔD² + g²Δd²), and substituting,
//
//	Γ² = s²g²/(ΔD² + g²Δd²) = s²/(Δd² + (ΔD/g)²).
//
// The trilinear interpolant reproduces a linear field exactly, so the
// engine must match this to float32 rounding, on any grids.
func TestLinearGradientShift(t *testing.T) {
	n := normalise([3]float64{0.48, -0.36, 0.8})
	const a, g = 5.0, 0.25 // Gy, Gy/mm
	for _, tc := range []struct {
		name  string
		s     float64 // shift, mm
		local bool
		eval  *volume.Grid
	}{
		{"global aligned", 1.2, false, mustGrid(t, [3]int{40, 36, 30}, [3]float64{-20, -18, -15}, [3]float64{1, 1, 1}, volume.Identity)},
		{"global anisotropic flipped", 0.8, false, mustGrid(t, [3]int{28, 40, 24}, [3]float64{21, 23, 17}, [3]float64{1.5, 1.1, 1.4}, flippedAll)},
		{"local anisotropic feet-first", 1.5, true, mustGrid(t, [3]int{30, 26, 40}, [3]float64{22, -20, 19}, [3]float64{1.5, 1.6, 1.0}, feetFirst)},
		{"local irregular frames", 0.6, true, irregularFrames(t)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ref := mustGrid(t, [3]int{15, 13, 11}, [3]float64{-13.3, -11.1, -9.7}, [3]float64{2, 2.5, 3}, volume.Identity)
			field := func(p [3]float64) float64 { return a + g*dot(n, p) }
			fill(ref, field)
			fill(tc.eval, func(p [3]float64) float64 { return field(p) - g*tc.s })
			c := Criteria{DosePercent: 3, DTA: 2, NormDose: 10, ThresholdPercent: 0, Search: 6}
			if tc.local {
				c.Normalisation = Local
			}
			only := interiorMask(ref, tc.eval, 6.5)
			res, err := CompareGrids(context.Background(), ref, tc.eval, c, Options{Only: only})
			if err != nil {
				t.Fatal(err)
			}
			checked := 0
			for i, st := range res.Status {
				if !only.Bits[i] {
					continue
				}
				if st != Evaluated {
					t.Fatalf("voxel %d: status %v, want evaluated", i, st)
				}
				dd := 0.03 * 10.0
				if tc.local {
					dd = 0.03 * float64(ref.Data[i])
				}
				want := tc.s / math.Sqrt(c.DTA*c.DTA+(dd/g)*(dd/g))
				if got := float64(res.Gamma[i]); math.Abs(got-want) > 2e-5 {
					t.Fatalf("voxel %d: Γ = %.7f, closed form %.7f", i, got, want)
				}
				checked++
			}
			if checked < 100 {
				t.Fatalf("only %d interior voxels checked", checked)
			}
		})
	}
}

func irregularFrames(t testing.TB) *volume.Grid {
	off := [3][]float64{{}, {}, {0, 1, 2.5, 3, 4.2, 5, 6.5, 8, 9, 10.1}}
	for i := 0; i < 30; i++ {
		off[0] = append(off[0], float64(i)*1.5)
		off[1] = append(off[1], float64(i)*1.4)
	}
	for z := 11.0; z < 45; z += 1.3 {
		off[2] = append(off[2], z)
	}
	g, err := volume.New([3]int{len(off[0]), len(off[1]), len(off[2])}, [3]float64{-22, -20, -21}, volume.Identity, off)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func normalise(v [3]float64) [3]float64 {
	l := math.Sqrt(dot(v, v))
	return [3]float64{v[0] / l, v[1] / l, v[2] / l}
}

func dot(a, b [3]float64) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }

// TestUniformScale checks Γ = |k−1|·D/ΔD for an evaluated dose k times a
// flat reference D: with no dose gradient the spatial term can only add, so
// the minimum is at r_e = r_r (follows from the definition, Low et al.
// 1998). Global ΔD = δ·D_norm; local ΔD = δ·D.
func TestUniformScale(t *testing.T) {
	const d0 = 2.0
	for _, tc := range []struct {
		k     float64
		local bool
		norm  float64
	}{{1.02, false, 2.5}, {0.97, false, 2}, {1.045, true, 2}, {0.99, true, 2.5}} {
		ref := mustGrid(t, [3]int{12, 12, 12}, [3]float64{0, 0, 0}, [3]float64{2, 2, 2}, volume.Identity)
		eval := mustGrid(t, [3]int{30, 30, 30}, [3]float64{-3, -3, -3}, [3]float64{1, 1, 1}, volume.Identity)
		fill(ref, func([3]float64) float64 { return d0 })
		fill(eval, func([3]float64) float64 { return tc.k * d0 })
		c := Criteria{DosePercent: 3, DTA: 2, NormDose: tc.norm, ThresholdPercent: 10}
		dd := 0.03 * tc.norm
		if tc.local {
			c.Normalisation = Local
			dd = 0.03 * d0
		}
		res, err := CompareGrids(context.Background(), ref, eval, c, Options{})
		if err != nil {
			t.Fatal(err)
		}
		want := math.Abs(tc.k-1) * d0 / dd
		if res.Stats.Evaluated != ref.Len() {
			t.Fatalf("k=%g: evaluated %d of %d", tc.k, res.Stats.Evaluated, ref.Len())
		}
		for i, v := range res.Gamma {
			if math.Abs(float64(v)-want) > 1e-5 {
				t.Fatalf("k=%g local=%v voxel %d: Γ = %g, want %g", tc.k, tc.local, i, v, want)
			}
		}
	}
}

// TestSteepEdge checks a dose edge 0.2 mm wide (from 10 % to 100 %) shifted
// by s less than the search distance: at the edge Γ ≈ s/Δd, because the
// dose term of the minimum vanishes as the gradient grows (the limit of the
// closed form above, Γ² = s²/(Δd² + (ΔD/g)²) → s²/Δd²). The grid is fine
// along x and coarse across, which also exercises anisotropy.
func TestSteepEdge(t *testing.T) {
	const lo, hi, width, s = 1.0, 10.0, 0.2, 1.5
	edge := func(x float64) float64 {
		switch {
		case x <= 0:
			return lo
		case x >= width:
			return hi
		}
		return lo + (hi-lo)*x/width
	}
	ref := mustGrid(t, [3]int{81, 3, 3}, [3]float64{-4, -2, -2}, [3]float64{0.1, 2, 2}, volume.Identity)
	eval := mustGrid(t, [3]int{241, 9, 9}, [3]float64{-12, -8, -8}, [3]float64{0.1, 2, 2}, volume.Identity)
	fill(ref, func(p [3]float64) float64 { return edge(p[0]) })
	fill(eval, func(p [3]float64) float64 { return edge(p[0] - s) })
	c := Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 0}
	res, err := CompareGrids(context.Background(), ref, eval, c, Options{})
	if err != nil {
		t.Fatal(err)
	}
	// The reference voxel at x = 0.1 mm sits on the edge (dose 5.5 Gy).
	i := ref.Index(41, 1, 1)
	g := hi / width                                 // Gy/mm
	want := s / math.Sqrt(4+math.Pow(0.03*hi/g, 2)) // closed form, ≈ s/Δd
	if got := float64(res.Gamma[i]); math.Abs(got-want) > 1e-4 || math.Abs(got-s/2) > 1e-3 {
		t.Fatalf("Γ at the edge = %.6f, want %.6f ≈ s/Δd = %.3f", got, want, s/2)
	}
}

// TestDetectorPassRate checks the pass-rate arithmetic of a detector-array
// comparison: 1086 of 1087 detectors passing is 99.908 %, reported as
// 99.9 % (common practice, no source).
func TestDetectorPassRate(t *testing.T) {
	eval := mustGrid(t, [3]int{41, 41, 5}, [3]float64{-100, -100, -4}, [3]float64{5, 5, 2}, volume.Identity)
	fill(eval, func([3]float64) float64 { return 2 })
	pts := make([]Point, 0, 1087)
	for i := 0; len(pts) < 1087; i++ {
		x, y := float64(i%33)*6-96, float64(i/33)*6-96
		pts = append(pts, Point{Pos: [3]float64{x, y, 0}, Dose: 2})
	}
	pts[500].Dose = 2.1 // 5 % high: Γ = 0.1/(0.03·2.1) ≈ 1.59 in a flat field
	res, err := ComparePoints(context.Background(), pts, eval, TG218(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	st := res.Stats
	if st.Evaluated != 1087 || st.Passed != 1086 {
		t.Fatalf("evaluated %d passed %d, want 1087 and 1086", st.Evaluated, st.Passed)
	}
	if math.Abs(st.PassRate-100*1086.0/1087) > 1e-12 {
		t.Fatalf("pass rate %v", st.PassRate)
	}
}

// TestTG218Defaults checks the defaults against AAPM TG-218 (Miften et al.,
// Med Phys 45 (2018) e53): 3 %/2 mm, global normalisation, 10 % low-dose
// threshold. The 3×DTA search distance is common practice, no source.
func TestTG218Defaults(t *testing.T) {
	c := TG218()
	if c.DosePercent != 3 || c.DTA != 2 || c.Normalisation != Global || c.ThresholdPercent != 10 || c.NormDose != 0 {
		t.Fatalf("TG218() = %+v", c)
	}
	if c.SearchRadius() != 6 {
		t.Fatalf("search radius %g, want 6 mm", c.SearchRadius())
	}
	if c.Label() != "3%/2mm global" {
		t.Fatalf("label %q", c.Label())
	}
}

// smoothField returns a random smooth dose: a sum of Gaussian blobs of
// 8–20 mm width on a 0.5 Gy floor, peaking at a few Gy.
func smoothField(seed uint64) func(p [3]float64) float64 {
	r := rand.New(rand.NewPCG(seed, 7))
	type blob struct {
		c    [3]float64
		a, s float64
	}
	var bs []blob
	for i := 0; i < 6; i++ {
		bs = append(bs, blob{
			c: [3]float64{r.Float64()*30 - 15, r.Float64()*30 - 15, r.Float64()*30 - 15},
			a: 0.5 + 2*r.Float64(),
			s: 8 + 12*r.Float64(),
		})
	}
	return func(p [3]float64) float64 {
		v := 0.5
		for _, b := range bs {
			d2 := 0.0
			for a := 0; a < 3; a++ {
				d2 += (p[a] - b.c[a]) * (p[a] - b.c[a])
			}
			v += b.a * math.Exp(-d2/(2*b.s*b.s))
		}
		return v
	}
}

// TestFastAgreesWithExhaustive compares the fast search with the exhaustive
// oracle on random smooth volumes, for every interpolant: anisotropic
// spacing, misaligned and flipped grids, global and local normalisation.
// The evaluated dose is the reference field shifted, scaled and perturbed,
// so Γ spans passing and failing values. The oracle samples the same
// interpolant through its own code path and is an upper bound of its
// minimum, so the fast method, certified to within 10⁻⁶ of the minimum,
// is never above it by more than that (and float32 storage); on these
// smooth doses the two agree to |ΔΓ| ≤ 0.005.
func TestFastAgreesWithExhaustive(t *testing.T) {
	if testing.Short() {
		t.Skip("exhaustive oracle is slow")
	}
	for _, interp := range []Interpolation{CubicBSpline, Trilinear, LinearSimplex} {
		for seed := uint64(1); seed <= 2; seed++ {
			fastAgreesWithExhaustive(t, seed, interp)
		}
	}
}

func fastAgreesWithExhaustive(t *testing.T, seed uint64, interp Interpolation) {
	r := rand.New(rand.NewPCG(seed, 99))
	base := smoothField(seed)
	bump := smoothField(seed + 100)
	shift := [3]float64{r.Float64()*2 - 1, r.Float64()*2 - 1, r.Float64()*2 - 1}
	scale := 0.97 + 0.06*r.Float64()
	ref := mustGrid(t, [3]int{14, 12, 10}, [3]float64{-13.1, -11.7, -12.3}, [3]float64{2, 2.5, 3}, volume.Identity)
	eval := mustGrid(t, [3]int{34, 30, 26}, [3]float64{-20.3, -19.1, -18.7}, [3]float64{1.3, 1.5, 1.7}, volume.Identity)
	if seed%2 == 0 {
		eval = mustGrid(t, [3]int{34, 30, 26}, [3]float64{22.6, -19.1, 25.5}, [3]float64{1.3, 1.5, 1.7}, feetFirst)
	}
	fill(ref, base)
	fill(eval, func(p [3]float64) float64 {
		q := [3]float64{p[0] - shift[0], p[1] - shift[1], p[2] - shift[2]}
		return scale*base(q) + 0.1*(bump(p)-0.5)
	})
	for _, norm := range []Normalisation{Global, Local} {
		c := Criteria{DosePercent: 3, DTA: 2, Normalisation: norm, ThresholdPercent: 10, Search: 4}
		// A random subset of reference voxels keeps the oracle affordable.
		only := volume.NewMask(ref)
		for i := range only.Bits {
			only.Bits[i] = r.IntN(24) == 0
		}
		fast, err := CompareGrids(context.Background(), ref, eval, c, Options{Only: only, Interpolation: interp})
		if err != nil {
			t.Fatal(err)
		}
		if fast.Uncertified != 0 {
			t.Errorf("%v seed %d %v: %d points uncertified (worst %g)", interp, seed, norm, fast.Uncertified, fast.WorstTolerance)
		}
		slow, err := CompareGrids(context.Background(), ref, eval, c, Options{Only: only, Method: Exhaustive, Interpolation: interp})
		if err != nil {
			t.Fatal(err)
		}
		worst, above, compared, failing := 0.0, 0.0, 0, 0
		for i := range fast.Gamma {
			if fast.Status[i] != slow.Status[i] {
				t.Fatalf("%v seed %d %v voxel %d: status fast %v, exhaustive %v (Γ %g, %g)", interp, seed, norm, i, fast.Status[i], slow.Status[i], fast.Gamma[i], slow.Gamma[i])
			}
			if fast.Status[i] != Evaluated && fast.Status[i] != Capped {
				continue
			}
			f, e := float64(fast.Gamma[i]), float64(slow.Gamma[i])
			above = math.Max(above, f-e)
			if f > e+1e-6+2e-7*e {
				t.Errorf("%v seed %d %v voxel %d: fast %.8f above exhaustive %.8f", interp, seed, norm, i, f, e)
			}
			d := math.Abs(f - e)
			worst = math.Max(worst, d)
			compared++
			if f > 1 {
				failing++
			}
			if d > 0.005 {
				t.Errorf("%v seed %d %v voxel %d: fast Γ %.5f, exhaustive %.5f", interp, seed, norm, i, f, e)
			}
		}
		if compared < 30 {
			t.Fatalf("%v seed %d: only %d points compared", interp, seed, compared)
		}
		t.Logf("%v seed %d %v: %d points (%d failing), max |ΔΓ| = %.2g, max(fast − exhaustive) = %.2g", interp, seed, norm, compared, failing, worst, above)
	}
}

// TestPointsEqualGrid checks that scattered reference points give the same Γ
// as the same points taken from a reference grid.
func TestPointsEqualGrid(t *testing.T) {
	base := smoothField(3)
	ref := mustGrid(t, [3]int{10, 9, 8}, [3]float64{-9, -8, -7}, [3]float64{2, 2, 2}, volume.Identity)
	eval := mustGrid(t, [3]int{30, 30, 30}, [3]float64{22, 23, 21}, [3]float64{1.5, 1.5, 1.5}, flippedAll)
	fill(ref, base)
	fill(eval, func(p [3]float64) float64 { return 1.02 * base([3]float64{p[0] - 0.7, p[1], p[2] + 0.4}) })
	c := TG218()
	gr, err := CompareGrids(context.Background(), ref, eval, c, Options{})
	if err != nil {
		t.Fatal(err)
	}
	pts := make([]Point, ref.Len())
	for n := range pts {
		i, j, k := ref.IJK(n)
		pts[n] = Point{Pos: ref.WorldOf(i, j, k), Dose: float64(ref.Data[n])}
	}
	c.NormDose = gr.Criteria.NormDose
	pr, err := ComparePoints(context.Background(), pts, eval, c, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for n := range pts {
		if gr.Status[n] != pr.Status[n] {
			t.Fatalf("point %d: status grid %v, points %v", n, gr.Status[n], pr.Status[n])
		}
		if d := math.Abs(float64(gr.Gamma[n] - pr.Gamma[n])); d > 1e-6 {
			t.Fatalf("point %d: Γ grid %g, points %g", n, gr.Gamma[n], pr.Gamma[n])
		}
	}
	if gr.Stats.Evaluated < 100 {
		t.Fatalf("only %d evaluated", gr.Stats.Evaluated)
	}
}

// TestDeterministicAcrossWorkers checks bit-identical results for 1, 2 and
// 7 workers.
func TestDeterministicAcrossWorkers(t *testing.T) {
	base := smoothField(5)
	ref := mustGrid(t, [3]int{40, 40, 30}, [3]float64{-20, -20, -15}, [3]float64{1, 1, 1}, volume.Identity)
	eval := mustGrid(t, [3]int{30, 30, 22}, [3]float64{-21, -21, -16}, [3]float64{1.4, 1.4, 1.4}, volume.Identity)
	fill(ref, base)
	fill(eval, func(p [3]float64) float64 { return 1.03 * base([3]float64{p[0] - 1.1, p[1], p[2]}) })
	var first *Result
	for _, w := range []int{1, 2, 7} {
		res, err := CompareGrids(context.Background(), ref, eval, TG218(), Options{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		if first == nil {
			first = res
			continue
		}
		for i := range res.Gamma {
			if math.Float32bits(res.Gamma[i]) != math.Float32bits(first.Gamma[i]) || res.Status[i] != first.Status[i] {
				t.Fatalf("workers %d: voxel %d differs", w, i)
			}
		}
	}
}

// TestCountsOutsideBelowCapped checks the bookkeeping: points below the
// threshold are counted nowhere in the pass rate, points outside the
// evaluated grid are counted apart and never passed, and a point with no
// agreement within the search distance is capped at R/Δd and fails.
func TestCountsOutsideBelowCapped(t *testing.T) {
	ref := mustGrid(t, [3]int{20, 1, 1}, [3]float64{0, 0, 0}, [3]float64{1, 1, 1}, volume.Identity)
	eval := mustGrid(t, [3]int{10, 1, 1}, [3]float64{0, 0, 0}, [3]float64{1, 1, 1}, volume.Identity)
	for i := 0; i < 20; i++ {
		ref.Data[i] = 10
	}
	ref.Data[0] = 0.5 // below 10 % of 10 Gy
	for i := 0; i < 10; i++ {
		eval.Data[i] = 10
	}
	eval.Data[3] = 5 // a hole of 50 %: at 3 %/2 mm, the neighbours at 1 mm agree
	ref.Data[5] = 20 // the reference maximum: 100 % above anything evaluated
	c := Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10, Search: 4}
	// Along one axis the simplex and trilinear interpolants are the same
	// linear interpolant, which the closed form below assumes.
	for _, interp := range []Interpolation{LinearSimplex, Trilinear} {
		countsOutsideBelowCapped(t, ref, eval, c, interp)
	}
}

func countsOutsideBelowCapped(t *testing.T, ref, eval *volume.Grid, c Criteria, interp Interpolation) {
	res, err := CompareGrids(context.Background(), ref, eval, c, Options{Interpolation: interp})
	if err != nil {
		t.Fatal(err)
	}
	st := res.Stats
	if st.BelowThreshold != 1 || st.Outside != 10 || st.Capped != 1 || st.Evaluated != 9 || st.Passed != 8 {
		t.Fatalf("stats %+v", st)
	}
	if res.Status[5] != Capped || res.Gamma[5] != 2 || res.Passed(5) {
		t.Fatalf("voxel 5: %v Γ %g", res.Status[5], res.Gamma[5])
	}
	// Voxel 3: the evaluated dose rises linearly from 5 Gy here to 10 Gy at
	// 1 mm, so along that ramp (g = 5 Gy/mm) the reference dose is met at
	// s = 1 mm and the linear closed form (TestLinearGradientShift) gives
	// Γ² = s²/(Δd² + (ΔD/g)²) with ΔD = 3 % of 20 Gy: Γ ≈ 0.49910, a little
	// under the node value 1/2.
	want := 1 / math.Sqrt(4+math.Pow(0.6/5, 2))
	if got := res.Gamma[3]; math.Abs(float64(got)-want) > 1e-6 {
		t.Fatalf("voxel 3: Γ %g, want %g", got, want)
	}
	if !math.IsNaN(float64(res.Gamma[0])) || !math.IsNaN(float64(res.Gamma[15])) {
		t.Fatal("points not evaluated must have NaN Γ")
	}
}

func TestNothingAboveThreshold(t *testing.T) {
	ref := mustGrid(t, [3]int{4, 4, 4}, [3]float64{0, 0, 0}, [3]float64{1, 1, 1}, volume.Identity)
	eval := ref.Clone()
	fill(ref, func([3]float64) float64 { return 1 })
	res, err := CompareGrids(context.Background(), ref, eval, Criteria{DosePercent: 3, DTA: 2, NormDose: 100, ThresholdPercent: 10}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if res.Stats.Evaluated != 0 || !math.IsNaN(res.Stats.PassRate) || res.Stats.BelowThreshold != 64 {
		t.Fatalf("stats %+v", res.Stats)
	}
}

func TestCancel(t *testing.T) {
	ref := mustGrid(t, [3]int{30, 30, 30}, [3]float64{0, 0, 0}, [3]float64{1, 1, 1}, volume.Identity)
	fill(ref, smoothField(1))
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := CompareGrids(ctx, ref, ref.Clone(), TG218(), Options{}); err == nil {
		t.Fatal("cancelled comparison returned no error")
	}
}

func TestParseCriteria(t *testing.T) {
	for _, tc := range []struct {
		in       string
		dose, mm float64
	}{
		{"3%/2mm", 3, 2}, {"3%/2 mm", 3, 2}, {"2%/1mm", 2, 1}, {" 2 % / 1 mm ", 2, 1},
		{"2.5%/1.5mm", 2.5, 1.5}, {"3%/2MM", 3, 2}, {".5%/.5mm", 0.5, 0.5},
	} {
		d, m, err := ParseCriteria(tc.in)
		if err != nil || d != tc.dose || m != tc.mm {
			t.Errorf("ParseCriteria(%q) = %g, %g, %v", tc.in, d, m, err)
		}
	}
	for _, bad := range []string{"3/2", "3%", "-1%/2mm", "0%/2mm", "3%/0mm", "3%/2", "3%/2cm", "", "abc", "3%%/2mm", "3%/2mm/1"} {
		if _, _, err := ParseCriteria(bad); err == nil {
			t.Errorf("ParseCriteria(%q) accepted", bad)
		}
	}
}

func TestValidate(t *testing.T) {
	for _, c := range []Criteria{
		{DosePercent: 0, DTA: 2}, {DosePercent: 3, DTA: -1}, {DosePercent: 3, DTA: 2, ThresholdPercent: 100},
		{DosePercent: 3, DTA: 2, ThresholdPercent: -1}, {DosePercent: 3, DTA: 2, NormDose: math.NaN()},
		{DosePercent: 3, DTA: 2, Search: -1}, {DosePercent: math.Inf(1), DTA: 2},
	} {
		if err := c.Validate(); err == nil {
			t.Errorf("%+v accepted", c)
		}
	}
}

func TestPercentile(t *testing.T) {
	// numpy.percentile([1, 2, 3, 4], [0, 25, 50, 95, 100]) with the default
	// linear method gives 1, 1.75, 2.5, 3.85, 4 (Hyndman and Fan definition 7).
	v := []float64{1, 2, 3, 4}
	for _, tc := range [][2]float64{{0, 1}, {25, 1.75}, {50, 2.5}, {95, 3.85}, {100, 4}} {
		if got := Percentile(v, tc[0]); math.Abs(got-tc[1]) > 1e-12 {
			t.Errorf("P%g = %g, want %g", tc[0], got, tc[1])
		}
	}
}

// TestPercentileSelect checks the selection-based percentiles against the
// sort-based definition (Hyndman and Fan definition 7) on random data with
// ties.
func TestPercentileSelect(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 200; trial++ {
		n := 1 + r.IntN(300)
		// Γ is stored as float32; the sort-based definition works on the
		// same values in float64.
		v := make([]float32, n)
		sorted := make([]float64, n)
		for i := range v {
			v[i] = float32(r.IntN(20)) / 7 // many ties
			sorted[i] = float64(v[i])
		}
		slices.Sort(sorted)
		for _, p := range []float64{0, 1, 50, 95, 99, 100} {
			w := append([]float32(nil), v...)
			if got, want := percentileSelect(w, p), Percentile(sorted, p); got != want {
				t.Fatalf("n=%d p=%g: select %g, sort %g", n, p, got, want)
			}
		}
	}
}

// TestExtremeCriteria: criteria at the ends of what Validate accepts must
// give a number or an error, never a panic or a NaN Γ (issue 11, item 9:
// --search 1e300 sized a slice from an int conversion of 1e300;
// --norm-dose 1e-300 made w² overflow, Inf·0 = NaN, and an index of NaN).
// Truth: the uniform-scale closed form of TestUniformScale, Γ = |k−1|·D/ΔD
// at every point (minimum at r_e = r_r), which no search distance changes
// once it reaches past the grid.
func TestExtremeCriteria(t *testing.T) {
	const d0, k = 2.0, 1.05 // Γ = 1.33: fails at its home cell, so the k-d tree is built
	ref := mustGrid(t, [3]int{6, 6, 6}, [3]float64{0, 0, 0}, [3]float64{2, 2, 2}, volume.Identity)
	eval := mustGrid(t, [3]int{16, 16, 16}, [3]float64{-3, -3, -3}, [3]float64{1, 1, 1}, volume.Identity)
	fill(ref, func([3]float64) float64 { return d0 })
	fill(eval, func([3]float64) float64 { return k * d0 })
	for _, tc := range []struct {
		name   string
		c      Criteria
		method Method
	}{
		{"search_1e300", Criteria{DosePercent: 3, DTA: 2, NormDose: 2.5, Search: 1e300}, Fast},
		{"search_1e300_exhaustive", Criteria{DosePercent: 3, DTA: 2, NormDose: 2.5, Search: 1e300}, Exhaustive},
		{"search_max_float", Criteria{DosePercent: 3, DTA: 2, NormDose: 2.5, Search: math.MaxFloat64}, Fast},
	} {
		t.Run(tc.name, func(t *testing.T) {
			opt := Options{Method: tc.method}
			if tc.method == Exhaustive {
				// One reference point: the lattice spans the whole grid.
				opt.Only = volume.NewMask(ref)
				opt.Only.Bits[ref.Index(2, 2, 2)] = true
				opt.ExhaustiveStep = 2
			}
			res, err := CompareGrids(context.Background(), ref, eval, tc.c, opt)
			if err != nil {
				t.Fatal(err)
			}
			want := (k - 1) * d0 / (0.03 * 2.5)
			for i, v := range res.Gamma {
				if res.Status[i] == NotSelected {
					continue
				}
				if res.Status[i] != Evaluated || math.Abs(float64(v)-want) > 1e-5 {
					t.Fatalf("voxel %d: status %v Γ = %g, want evaluated, %g", i, res.Status[i], v, want)
				}
			}
		})
	}
	// ΔD = 3 % of 1e-300 Gy: the dose term overflows; refused, not NaN.
	for _, norm := range []float64{1e-300, 5e-324} {
		res, err := CompareGrids(context.Background(), ref, eval, Criteria{DosePercent: 3, DTA: 2, NormDose: norm}, Options{})
		if err == nil {
			for i, v := range res.Gamma {
				if v != v && res.Status[i] == Evaluated {
					t.Fatalf("norm %g: voxel %d evaluated with Γ NaN", norm, i)
				}
			}
			t.Fatalf("norm %g: accepted, want an error (ΔD too small for the doses)", norm)
		}
		t.Logf("norm %g: %v", norm, err)
	}
}

// TestWorkerPanicIsError: a panic in a search worker goroutine (injected
// with internal/fault) is this comparison's error, not the end of the
// process (issue 11, item 9).
func TestWorkerPanicIsError(t *testing.T) {
	ref := mustGrid(t, [3]int{6, 6, 6}, [3]float64{0, 0, 0}, [3]float64{2, 2, 2}, volume.Identity)
	eval := mustGrid(t, [3]int{16, 16, 16}, [3]float64{-3, -3, -3}, [3]float64{1, 1, 1}, volume.Identity)
	fill(ref, func([3]float64) float64 { return 2 })
	fill(eval, func([3]float64) float64 { return 2 })
	t.Cleanup(fault.SetForTest(func(site string) {
		if site == fault.GammaWorker {
			panic("injected")
		}
	}))
	_, err := CompareGrids(context.Background(), ref, eval, Criteria{DosePercent: 3, DTA: 2}, Options{Workers: 2})
	if err == nil || !strings.Contains(err.Error(), "internal error") || !strings.Contains(err.Error(), "injected") {
		t.Fatalf("error %v, want the worker's panic as an internal error", err)
	}
}
