package gamma

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/internal/reftool"
	"voxgamma/volume"
)

// splineSearcher returns a searcher over grid g with the given
// interpolation, with both evaluation paths ready (the fast search's
// patches and the exhaustive method's direct evaluation).
func splineSearcher(t testing.TB, g *volume.Grid, dta float64, interp Interpolation) *searcher {
	t.Helper()
	f, err := newField(g, dta, interp, 2)
	if err != nil {
		t.Fatal(err)
	}
	return &searcher{f: f, sp: f.sp, dta: dta, grid: f.canonicalGrid(), rn: 3}
}

// patchValue evaluates the fast search's interpolant at canonical position
// p (DTA units): the cell's value weights from its Bernstein conversion.
func (s *searcher) patchValue(p [3]float64) float64 {
	c, t := s.locate(p)
	return s.sp.value(c, t)
}

// scipyScript evaluates the tensor-product cubic spline with natural end
// conditions through samples on a rectilinear grid, with scipy's
// make_interp_spline (knots at the interior samples, bc_type='natural')
// applied along x, then y, then z, and its B-spline design matrices at the
// query points: an implementation independent of voxgamma's. For uniform
// axes it also evaluates scipy.ndimage.map_coordinates (order 3,
// prefiltered) on the samples extended beyond each end by point reflection
// (f(x_0 − k) = 2f(x_0) − f(x_k), 40 samples, whose cubic spline is the
// natural spline inside the grid to within 0.268^40), mode 'mirror'.
const scipyScript = `
import json, sys
import numpy as np
from scipy.interpolate import make_interp_spline, BSpline
from scipy import ndimage
d = json.load(open(sys.argv[1]))
axes = [np.array(a) for a in d["axes"]]
f = np.array(d["data"]).reshape(d["dims"][::-1]).transpose(2, 1, 0)  # f[i, j, k]
pts = np.array(d["points"])
c, knots = f, []  # after the three passes c is indexed [k, j, i]
for a in range(3):
    s = make_interp_spline(axes[a], c, k=3, bc_type="natural", axis=a)
    c, knots = s.c, knots + [s.t]
out = []
for p in pts:
    b = [BSpline.design_matrix(np.array([p[a]]), knots[a], 3).toarray()[0] for a in range(3)]
    out.append(float(np.einsum("i,j,k,kji->", b[0], b[1], b[2], c)))  # make_interp_spline puts its axis first
uni = all(np.allclose(np.diff(x), x[1] - x[0]) for x in axes)
mc = []
if uni:
    K = 40
    g = f
    for a in range(3):
        g = np.moveaxis(g, a, 0)
        n0 = g.shape[0]
        while g.shape[0] < n0 + 2 * K:
            # Reflect everything so far about both ends: the ends stay
            # centres of the extension's point symmetry.
            g = np.concatenate([2 * g[0] - g[:0:-1], g, 2 * g[-1] - g[-2::-1]])
        lo = (g.shape[0] - n0) // 2
        g = np.moveaxis(g[lo - K:lo + n0 + K], 0, a)
    idx = np.array([[(p[a] - axes[a][0]) / (axes[a][1] - axes[a][0]) + K for a in range(3)] for p in pts]).T
    mc = ndimage.map_coordinates(g, idx, order=3, mode="mirror").tolist()
print(json.dumps({"spline": out, "map_coordinates": mc}))
`

// TestCubicSplineAgainstScipy checks the cubic B-spline interpolant, by
// both of voxgamma's evaluation paths, against scipy (see scipyScript) on
// random samples: a uniform grid, an irregular frame axis, and axes of two
// and three samples.
func TestCubicSplineAgainstScipy(t *testing.T) {
	py := reftool.Python(t, "apt-get install python3-scipy python3-numpy", "numpy", "scipy")
	r := rand.New(rand.NewPCG(5, 6))
	uniform := func(n int, h float64) []float64 {
		o := make([]float64, n)
		for i := range o {
			o[i] = float64(i) * h
		}
		return o
	}
	irregular := []float64{0, 2, 5, 6.5, 8, 11, 12, 12.5, 15}
	for _, tc := range []struct {
		name string
		off  [3][]float64
	}{
		{"uniform 3×3×2.5 mm", [3][]float64{uniform(9, 3), uniform(7, 3), uniform(8, 2.5)}},
		{"irregular frames", [3][]float64{uniform(8, 2), uniform(6, 2.5), irregular}},
		{"two and three samples", [3][]float64{uniform(2, 3), uniform(3, 2), uniform(6, 2.5)}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dims := [3]int{len(tc.off[0]), len(tc.off[1]), len(tc.off[2])}
			g, err := volume.New(dims, [3]float64{-7, 3, 11}, volume.Identity, tc.off)
			if err != nil {
				t.Fatal(err)
			}
			for i := range g.Data {
				g.Data[i] = float32(10 + 5*r.Float64())
			}
			const dta = 2.0
			s := splineSearcher(t, g, dta, CubicBSpline)
			var pts [][3]float64 // canonical mm
			for i := 0; i < 300; i++ {
				var p [3]float64
				for a := 0; a < 3; a++ {
					last := tc.off[a][dims[a]-1]
					switch i % 10 {
					case 0: // on a sample
						p[a] = tc.off[a][r.IntN(dims[a])]
					case 1: // on the grid's faces
						p[a] = last * float64(r.IntN(2))
					default:
						p[a] = last * r.Float64()
					}
				}
				pts = append(pts, p)
			}
			in := map[string]any{"axes": tc.off, "dims": dims, "data": g.Data, "points": pts}
			dir := t.TempDir()
			data, _ := json.Marshal(in)
			if err := os.WriteFile(filepath.Join(dir, "in.json"), data, 0o644); err != nil {
				t.Fatal(err)
			}
			script := filepath.Join(dir, "ref.py")
			if err := os.WriteFile(script, []byte(scipyScript), 0o644); err != nil {
				t.Fatal(err)
			}
			out, err := exec.Command(py, script, filepath.Join(dir, "in.json")).CombinedOutput()
			if err != nil {
				t.Fatalf("scipy: %v\n%s", err, out)
			}
			var ref struct {
				Spline         []float64 `json:"spline"`
				MapCoordinates []float64 `json:"map_coordinates"`
			}
			if err := json.Unmarshal(out, &ref); err != nil {
				t.Fatalf("scipy output %q: %v", out, err)
			}
			// The coefficients are stored as float32 (relative error about
			// 6·10⁻⁸ per pass, three passes) on samples of 10-15 Gy.
			const tol = 2e-5
			for i, p := range pts {
				q := [3]float64{p[0] / dta, p[1] / dta, p[2] / dta}
				fast := s.patchValue(q)
				direct, ok := s.sampleDirect(q)
				if !ok {
					t.Fatalf("point %v: outside", p)
				}
				if d := math.Abs(fast - ref.Spline[i]); d > tol {
					t.Errorf("point %v: patch value %.9g, scipy make_interp_spline %.9g", p, fast, ref.Spline[i])
				}
				if d := math.Abs(direct - ref.Spline[i]); d > tol {
					t.Errorf("point %v: direct value %.9g, scipy make_interp_spline %.9g", p, direct, ref.Spline[i])
				}
				if len(ref.MapCoordinates) > 0 {
					if d := math.Abs(fast - ref.MapCoordinates[i]); d > tol {
						t.Errorf("point %v: patch value %.9g, scipy map_coordinates %.9g", p, fast, ref.MapCoordinates[i])
					}
				}
			}
			if tc.name == "uniform 3×3×2.5 mm" && len(ref.MapCoordinates) != len(pts) {
				t.Fatalf("map_coordinates check did not run: %d values", len(ref.MapCoordinates))
			}
		})
	}
}

// TestSplineClosedForms checks properties that follow from the definitions:
// the cubic spline interpolates the samples; a natural spline reproduces a
// linear dose everywhere, up to the grid's edges and on irregular frames
// (it is the unique natural spline through linear samples); trilinear
// reproduces it as well; the Bernstein conversion of a uniform cubic
// B-spline cell is the matrix [1 4 1 0; 0 4 2 0; 0 2 4 0; 0 1 4 1]/6
// (B-spline to Bézier conversion; Farin, "Curves and Surfaces for CAGD",
// 5th ed. (2002), section 7.6); eval's derivatives match central
// differences of the value.
func TestSplineClosedForms(t *testing.T) {
	r := rand.New(rand.NewPCG(9, 1))
	g := irregularFrames(t)
	for i := range g.Data {
		g.Data[i] = float32(5 + 3*r.Float64())
	}
	for _, interp := range []Interpolation{CubicBSpline, Trilinear} {
		s := splineSearcher(t, g, 2, interp)
		f := s.f
		for k := 0; k < f.n[2]; k += 3 {
			for j := 0; j < f.n[1]; j += 5 {
				for i := 0; i < f.n[0]; i += 4 {
					p := [3]float64{f.off[0][i], f.off[1][j], f.off[2][k]}
					want := float64(f.data[i+f.n[0]*(j+f.n[1]*k)])
					if got := s.patchValue(p); math.Abs(got-want) > 1e-5 {
						t.Fatalf("%v: at sample (%d,%d,%d) %.7g, sample %.7g", interp, i, j, k, got, want)
					}
				}
			}
		}
	}
	// Linear dose.
	lin := func(p [3]float64) float64 { return 3 + 0.2*p[0] - 0.15*p[1] + 0.1*p[2] }
	fill(g, lin)
	for _, interp := range []Interpolation{CubicBSpline, Trilinear} {
		s := splineSearcher(t, g, 2, interp)
		for i := 0; i < 2000; i++ {
			var q [3]float64
			for a := 0; a < 3; a++ {
				q[a] = s.f.off[a][s.f.n[a]-1] * r.Float64()
			}
			world := [3]float64{q[0]*2 + s.f.origin[0], q[1]*2 + s.f.origin[1], q[2]*2 + s.f.origin[2]}
			if d := math.Abs(s.patchValue(q) - lin(world)); d > 2e-5 {
				t.Fatalf("%v: linear dose at %v: %.7g, want %.7g", interp, world, s.patchValue(q), lin(world))
			}
		}
	}
	// The uniform conversion matrix.
	ax := newAxis([]float64{0, 1.5, 3, 4.5, 6, 7.5}, true)
	want := [4][4]float64{{1, 4, 1, 0}, {0, 4, 2, 0}, {0, 2, 4, 0}, {0, 1, 4, 1}}
	for c := range ax.mat {
		for k := 0; k < 4; k++ {
			for rr := 0; rr < 4; rr++ {
				if d := math.Abs(ax.mat[c][k][rr] - want[k][rr]/6); d > 1e-12 {
					t.Fatalf("cell %d: conversion %v, want %v/6", c, ax.mat[c], want)
				}
			}
		}
	}
	// Derivatives against central differences.
	for i := range g.Data {
		g.Data[i] = float32(5 + 3*r.Float64())
	}
	s := splineSearcher(t, g, 2, CubicBSpline)
	for i := 0; i < 200; i++ {
		var q [3]float64
		for a := 0; a < 3; a++ {
			q[a] = 0.1 + (s.f.off[a][s.f.n[a]-1]-0.2)*r.Float64()
		}
		c, tt := s.locate(q)
		var ev evalOut
		s.sp.eval(c, tt, &ev)
		const h = 1e-4
		for a := 0; a < 3; a++ {
			qp, qm := q, q
			qp[a] += h
			qm[a] -= h
			// The same cell's polynomial on both sides.
			fd := (s.sp.value(c, s.cellPos(c, qp)) - s.sp.value(c, s.cellPos(c, qm))) / (2 * h)
			if math.Abs(fd-ev.g[a]) > 2e-3*(1+math.Abs(fd)) && inCell(s, c, qp) && inCell(s, c, qm) {
				t.Fatalf("∂E/∂%c at %v: %.6g, central difference %.6g", "xyz"[a], q, ev.g[a], fd)
			}
		}
		if math.Abs(ev.v-s.sp.value(c, tt)) > 1e-9 {
			t.Fatalf("eval and value differ: %g %g", ev.v, s.sp.value(c, tt))
		}
	}
}

func inCell(s *searcher, c [3]int, p [3]float64) bool {
	lo, h := s.cellBox(c)
	return inBox(p, lo, h)
}

// TestBernsteinBounds checks, on random cells of a random spline, what the
// search's bounds rest on (Farin 2002, chapter 15): the patch lies within
// its control values and within the slab of the linear fit; each Hessian
// entry lies within hessianRange; the
// two halves of splitAt take the patch's values; the stored per-cell range
// holds the cell's patch; and slabMin is the minimum of its convex function
// over the box (against a dense sampling of the box).
func TestBernsteinBounds(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	g := mustGrid(t, [3]int{9, 8, 7}, [3]float64{0, 0, 0}, [3]float64{3, 2.5, 2}, volume.Identity)
	for i := range g.Data {
		g.Data[i] = float32(20 * r.Float64())
	}
	s := splineSearcher(t, g, 2, CubicBSpline)
	for trial := 0; trial < 60; trial++ {
		c := [3]int{r.IntN(s.sp.ax[0].nc), r.IntN(s.sp.ax[1].nc), r.IntN(s.sp.ax[2].nc)}
		var b bnet
		s.sp.cellNet(c, &b)
		lo, h := s.cellBox(c)
		mn, mx := b.bounds()
		ci := c[0] + s.sp.ax[0].nc*(c[1]+s.sp.ax[1].nc*c[2])
		if slo, shi := s.sp.cellRange(ci, c[0], c[1], c[2]); slo > mn || shi < mx {
			t.Fatalf("cell %v: stored range %g…%g misses the control values %g…%g", c, slo, shi, mn, mx)
		}
		alpha, beta, delta := b.linearFit()
		h6lo, h6hi := b.hessianRange(h)
		// A sub-box of the cell, cut out by splitAt.
		t0, t1 := r.Float64()*0.5, 0.5+r.Float64()*0.5
		var sub, tmp bnet
		b.splitAt(0, t1, &sub, &tmp)
		sub.splitAt(0, t0/t1, &tmp, &sub)
		for i := 0; i < 300; i++ {
			tt := [3]float64{r.Float64(), r.Float64(), r.Float64()}
			var ev evalOut
			s.sp.eval(c, tt, &ev)
			if ev.v < mn-1e-9 || ev.v > mx+1e-9 {
				t.Fatalf("cell %v: value %g outside the control range %g…%g", c, ev.v, mn, mx)
			}
			lin := alpha + beta[0]*(tt[0]-0.5) + beta[1]*(tt[1]-0.5) + beta[2]*(tt[2]-0.5)
			if math.Abs(ev.v-lin) > delta+1e-9 {
				t.Fatalf("cell %v: |E − ℓ| = %g above δ = %g", c, math.Abs(ev.v-lin), delta)
			}
			for e := 0; e < 6; e++ {
				if ev.h[e] < h6lo[e]-1e-9 || ev.h[e] > h6hi[e]+1e-9 {
					t.Fatalf("cell %v: Hessian entry %d = %g outside %g…%g", c, e, ev.h[e], h6lo[e], h6hi[e])
				}
			}
			// The sub-box's net at the same point.
			if tt[0] >= t0 && tt[0] <= t1 {
				u := [3]float64{(tt[0] - t0) / (t1 - t0), tt[1], tt[2]}
				if v := netValue(&sub, u); math.Abs(v-ev.v) > 1e-9 {
					t.Fatalf("cell %v: sub-box net %g, patch %g", c, v, ev.v)
				}
			}
		}
		// slabMin against a dense sampling of the box.
		q := [3]float64{lo[0] + (r.Float64()*3-1)*h[0], lo[1] + (r.Float64()*3-1)*h[1], lo[2] + (r.Float64()*3-1)*h[2]}
		pt := &tpoint{q: q, dr: mn + (mx-mn)*r.Float64()*1.4 - 0.2*(mx-mn), w: 0.5}
		lb, arg := pt.slabLB(&b, lo, h)
		if !inBox(arg, lo, h) {
			t.Fatalf("slab minimiser %v outside the box", arg)
		}
		best := math.Inf(1)
		const m = 24
		e0 := alpha - pt.dr
		for i := 0; i <= m; i++ {
			for j := 0; j <= m; j++ {
				for k := 0; k <= m; k++ {
					tt := [3]float64{float64(i) / m, float64(j) / m, float64(k) / m}
					p := [3]float64{lo[0] + tt[0]*h[0], lo[1] + tt[1]*h[1], lo[2] + tt[2]*h[2]}
					lin := e0 + beta[0]*(tt[0]-0.5) + beta[1]*(tt[1]-0.5) + beta[2]*(tt[2]-0.5)
					dd := math.Max(0, math.Abs(lin)-delta) * pt.w
					v := (p[0]-q[0])*(p[0]-q[0]) + (p[1]-q[1])*(p[1]-q[1]) + (p[2]-q[2])*(p[2]-q[2]) + dd*dd
					best = math.Min(best, v)
					// And the bound holds for g itself.
					var ev evalOut
					s.sp.eval(c, tt, &ev)
					if g := pt.gOf(p, ev.v); g < lb-1e-9 {
						t.Fatalf("slab bound %g above g = %g at %v", lb, g, p)
					}
				}
			}
		}
		if lb > best+1e-9 || best-lb > 0.05*(1+best) {
			t.Fatalf("slabMin %g, dense sampling of its function %g", lb, best)
		}
	}
}

// netValue evaluates a Bernstein net at t by the Bernstein polynomials.
func netValue(b *bnet, t [3]float64) float64 {
	bx, _, _ := bern(t[0])
	by, _, _ := bern(t[1])
	bz, _, _ := bern(t[2])
	v := 0.0
	for k := 0; k < 4; k++ {
		for j := 0; j < 4; j++ {
			for i := 0; i < 4; i++ {
				v += bx[i] * by[j] * bz[k] * b[i+4*j+16*k]
			}
		}
	}
	return v
}

// TestNonFiniteEvaluatedRefused: an evaluated grid holding NaN or ±Inf is
// refused with an error naming the voxel, for every interpolation (the
// cubic prefilter would carry one such sample along whole lines).
func TestNonFiniteEvaluatedRefused(t *testing.T) {
	ref := mustGrid(t, [3]int{4, 4, 4}, [3]float64{0, 0, 0}, [3]float64{1, 1, 1}, volume.Identity)
	fill(ref, func([3]float64) float64 { return 1 })
	for _, bad := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
		for _, interp := range []Interpolation{CubicBSpline, Trilinear, LinearSimplex} {
			eval := ref.Clone()
			eval.Set(2, 1, 3, bad)
			_, err := CompareGrids(context.Background(), ref, eval, TG218(), Options{Interpolation: interp})
			if err == nil || !strings.Contains(err.Error(), "not a finite number") || !strings.Contains(err.Error(), "(2, 1, 3)") {
				t.Errorf("%v with a %v sample: error %v", interp, bad, err)
			}
		}
	}
}

// TestDevCode checks the one-byte code of a cell's distance from its
// anchor: the code decodes to at least the distance (the stored bounds
// stay bounds), and the code below it to less (the smallest such code).
func TestDevCode(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	var s spline
	for u := range s.dev {
		f := float64(u) / 255
		s.dev[u] = 66 * f * f
	}
	for trial := 0; trial < 100000; trial++ {
		d := 66 * r.Float64() * r.Float64() * r.Float64()
		if trial%10 == 0 {
			d = s.dev[r.IntN(256)] // exactly a table entry
		}
		u := s.devCode(d)
		if s.dev[u] < d {
			t.Fatalf("d = %g: code %d decodes to %g, below it", d, u, s.dev[u])
		}
		if u > 0 && s.dev[u-1] >= d {
			t.Fatalf("d = %g: code %d is not the smallest (code %d decodes to %g)", d, u, u-1, s.dev[u-1])
		}
	}
	if u := s.devCode(0); u != 0 {
		t.Fatalf("d = 0: code %d, want 0", u)
	}
}
