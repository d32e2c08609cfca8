package gamma

import (
	"math"

	"voxgamma/internal/parallel"
)

// The tensor-product interpolants (cubic B-spline and trilinear) are held as
// coefficients on a padded grid and, per cell, converted to the cell's
// Bernstein (Bézier) form: E(t) = Σ b_ijk B_i(t_x) B_j(t_y) B_k(t_z) with
// t ∈ [0, 1]³ the position in the cell and B the cubic Bernstein
// polynomials. Two properties of that form carry the search's guarantees
// (Farin, "Curves and Surfaces for CAGD", 5th ed. (2002), chapters 5 and
// 15): the patch lies in the convex hull of its control values, so the
// cell's dose lies between the smallest and largest b_ijk; and de
// Casteljau's algorithm splits a patch into two halves whose control
// values are again such bounds, converging to the patch as the halves
// shrink.
//
// # Cubic B-spline
//
// Along an axis with samples x_0 < … < x_{n-1} the interpolant is the cubic
// spline with a knot at every sample, S(x) = Σ c_i N_i(x), N_i the cubic
// B-spline on the knots τ_{i-2} … τ_{i+2} (τ_i = x_i, extended beyond the
// ends by reflection: τ_{-k} = 2x_0 − x_k). The coefficients c are found
// from the samples by solving S(x_j) = f_j, a tridiagonal system (the
// prefilter; for uniform samples it is the recursive filter of Unser, IEEE
// Signal Processing Magazine 16(6) (1999) 22-38, solved exactly here). At
// the ends the spline is natural (S'' = 0 at x_0 and x_{n-1}; c_{-1} =
// 2c_0 − c_1, which makes c_0 = f_0): a dose that is linear in position is
// reproduced up to the grid's edge. The mirror extension (f_{-k} = f_k)
// common in image processing would force S' = 0 at the edge instead, a
// flattened dose in the outer cells. With n = 2 samples the natural spline
// is the straight line through them; with n = 1 the axis is constant. In
// three dimensions the spline is the tensor product, found by the 1-D
// prefilter along x, then y, then z. The system is solved without pivoting,
// which is stable for the totally positive collocation matrix of B-splines
// at their knots (de Boor and Pinkus, Linear Algebra Appl 17 (1977) 3).
// Irregular frame offsets need no resampling: the knots are the samples,
// the spline is C² in patient coordinates, and the same code serves
// uniform and irregular axes.
//
// # Trilinear
//
// The coefficients are the samples; each cell's linear pieces are written
// as cubic Bernstein polynomials by degree elevation, so the search treats
// both interpolants alike.

const (
	axisConst  = 0 // one sample
	axisLinear = 1 // linear between samples (trilinear)
	axisCubic  = 3 // cubic spline
)

// axisSpline is one canonical axis of the tensor-product interpolant.
// Coefficient i (i = -1 … n) is stored at padded index P = i + 1; cell c
// (between samples c and c+1) uses the padded coefficients c … c+3.
type axisSpline struct {
	kind uint8
	n    int // samples
	np   int // padded coefficients
	nc   int // cells (1 for a single sample)
	// h is the size of each cell (DTA units, 0 for a single sample).
	h []float64
	// mat[c][k][r] is Bernstein coefficient k of padded coefficient c+r's
	// basis function on cell c.
	mat [][4][4]float64
	// tau holds the knots τ_{-2} … τ_{n+1} at index i+2 (cubic axes).
	tau []float64
	// win is the window of padded coefficients, relative to the cell
	// index, whose range bounds the cell's dose.
	winLo, winHi int
}

// spline is a tensor-product interpolant on the canonical grid.
type spline struct {
	ax   [3]axisSpline
	cs   [3]int    // strides of coef
	coef []float32 // padded coefficients
	// q bounds the interpolant on each cell (index ci + nc0·(cj + nc1·ck)):
	// how far below and above the cell's anchor coefficient its dose can
	// go, as codes of the table dev (cellRange).
	q   [][2]uint8
	dev [256]float64
	// c2 is set when the interpolant is C² across cells (a cubic
	// B-spline): then dose Hessian bounds hold across cell faces.
	c2 bool
}

// bernInv converts the values of a cubic at t = 0, 1/3, 2/3, 1 into its
// Bernstein coefficients (the inverse of the Bernstein collocation matrix
// at those points).
var bernInv = [4][4]float64{
	{1, 0, 0, 0},
	{-5.0 / 6, 3, -1.5, 1.0 / 3},
	{1.0 / 3, -1.5, 3, -5.0 / 6},
	{0, 0, 0, 1},
}

// newAxis builds axis a of the interpolant over sample positions x (DTA
// units).
func newAxis(x []float64, cubic bool) axisSpline {
	n := len(x)
	ax := axisSpline{n: n}
	switch {
	case n == 1:
		ax.kind, ax.np, ax.nc = axisConst, 4, 1
		ax.h = []float64{0}
		ax.mat = [][4][4]float64{{{0, 1, 0, 0}, {0, 1, 0, 0}, {0, 1, 0, 0}, {0, 1, 0, 0}}}
		ax.winLo, ax.winHi = 1, 1
		return ax
	case !cubic:
		ax.kind = axisLinear
		ax.winLo, ax.winHi = 1, 2
	default:
		ax.kind = axisCubic
		ax.winLo, ax.winHi = 0, 3
	}
	ax.np, ax.nc = n+2, n-1
	ax.h = make([]float64, n-1)
	for c := range ax.h {
		ax.h[c] = x[c+1] - x[c]
	}
	ax.mat = make([][4][4]float64, n-1)
	if ax.kind == axisLinear {
		for c := range ax.mat {
			ax.mat[c] = [4][4]float64{{0, 1, 0, 0}, {0, 2.0 / 3, 1.0 / 3, 0}, {0, 1.0 / 3, 2.0 / 3, 0}, {0, 0, 1, 0}}
		}
		return ax
	}
	// Knots τ_{-2} … τ_{n+1}, reflected about the end samples.
	ax.tau = make([]float64, n+4)
	for i := 0; i < n; i++ {
		ax.tau[i+2] = x[i]
	}
	at := func(i int) float64 { // sample i, reflected when beyond either end
		switch {
		case i < 0:
			return 2*x[0] - x[-i]
		case i > n-1:
			return 2*x[n-1] - x[2*(n-1)-i]
		}
		return x[i]
	}
	for k := 1; k <= 2; k++ {
		ax.tau[2-k] = 2*x[0] - at(k)
		ax.tau[n+1+k] = 2*x[n-1] - at(n-1-k)
	}
	for c := 0; c < n-1; c++ {
		var v [4][4]float64 // v[s][r]: basis r at t = s/3
		for s := 0; s < 4; s++ {
			xs := x[c] + float64(s)/3*ax.h[c]
			if s == 3 {
				xs = x[c+1]
			}
			v[s] = ax.basis(c, xs)
		}
		for k := 0; k < 4; k++ {
			for r := 0; r < 4; r++ {
				m := 0.0
				for s := 0; s < 4; s++ {
					m += bernInv[k][s] * v[s][r]
				}
				ax.mat[c][k][r] = m
			}
		}
	}
	return ax
}

// basis returns the four cubic B-splines N_{c-1} … N_{c+2} that are not
// zero on cell c, at x in that cell: the triangular Cox-de Boor recurrence
// (de Boor, J Approx Theory 6 (1972) 50; Cox, IMA J Appl Math 10 (1972)
// 134), which uses the knots τ_{c-2} … τ_{c+3} only.
func (ax *axisSpline) basis(c int, x float64) [4]float64 {
	t := func(i int) float64 { return ax.tau[i+2] }
	var nb [4]float64
	var left, right [4]float64
	nb[0] = 1
	for j := 1; j <= 3; j++ {
		left[j] = x - t(c+1-j)
		right[j] = t(c+j) - x
		saved := 0.0
		for r := 0; r < j; r++ {
			tmp := nb[r] / (right[r+1] + left[j-r])
			nb[r] = saved + right[r+1]*tmp
			saved = left[j-r] * tmp
		}
		nb[j] = saved
	}
	return nb
}

// prefilter is the factorised tridiagonal system of a cubic axis: row j
// reads sub[j]·c_{j-1} + diag[j]·c_j + sup[j]·c_{j+1} = f_j, rows 0 and
// n-1 being the natural end conditions c_0 = f_0, c_{n-1} = f_{n-1}.
type prefilter struct {
	sub, cp, den []float64 // Thomas algorithm: sub-diagonal, c', 1/denominator
}

func (ax *axisSpline) prefilter() prefilter {
	n := ax.n
	sub := make([]float64, n)
	diag := make([]float64, n)
	sup := make([]float64, n)
	diag[0], diag[n-1] = 1, 1
	for j := 1; j < n-1; j++ {
		nb := ax.basis(j, ax.tau[j+2]) // at x_j: N_{j-1}, N_j, N_{j+1}, N_{j+2} = 0
		sub[j], diag[j], sup[j] = nb[0], nb[1], nb[2]
	}
	pf := prefilter{sub: sub, cp: make([]float64, n), den: make([]float64, n)}
	for j := 0; j < n; j++ {
		d := diag[j]
		if j > 0 {
			d -= sub[j] * pf.cp[j-1]
		}
		pf.den[j] = 1 / d
		pf.cp[j] = sup[j] * pf.den[j]
	}
	return pf
}

// solve overwrites line (the samples f_0 … f_{n-1}) with the
// coefficients c_0 … c_{n-1}.
func (pf *prefilter) solve(line []float64) {
	n := len(line)
	line[0] *= pf.den[0]
	for j := 1; j < n; j++ {
		line[j] = (line[j] - pf.sub[j]*line[j-1]) * pf.den[j]
	}
	for j := n - 2; j >= 0; j-- {
		line[j] -= pf.cp[j] * line[j+1]
	}
}

// newSpline builds the interpolant of the field's samples: coefficients,
// per-cell Bernstein conversions and per-cell dose bounds.
func newSpline(f *field, interp Interpolation, workers int) *spline {
	s := &spline{c2: interp == CubicBSpline}
	for a := 0; a < 3; a++ {
		s.ax[a] = newAxis(f.off[a], interp == CubicBSpline)
	}
	np := [3]int{s.ax[0].np, s.ax[1].np, s.ax[2].np}
	s.cs = [3]int{1, np[0], np[0] * np[1]}
	s.coef = make([]float32, np[0]*np[1]*np[2])
	// The samples into the interior.
	for k := 0; k < f.n[2]; k++ {
		for j := 0; j < f.n[1]; j++ {
			src := f.data[f.n[0]*(j+f.n[1]*k) : f.n[0]*(j+f.n[1]*k+1)]
			dst := s.coef[1+s.cs[1]*(j+1)+s.cs[2]*(k+1):]
			copy(dst[:f.n[0]], src)
		}
	}
	// Along each axis in turn: the prefilter (cubic axes) and the padding,
	// on every line of the padded grid whose position along the axes
	// already done may be a pad.
	for a := 0; a < 3; a++ {
		ax := &s.ax[a]
		var pf prefilter
		if ax.kind == axisCubic {
			pf = ax.prefilter()
		}
		b, c := (a+1)%3, (a+2)%3
		// Lines: every index along b and c; along an axis not yet done only
		// its interior (its pads are filled when its turn comes).
		rng := func(x int) (int, int) {
			if x < a {
				return 0, np[x]
			}
			return 1, 1 + f.n[x]
		}
		b0, b1 := rng(b)
		c0, c1 := rng(c)
		lines := (b1 - b0) * (c1 - c0)
		inChunks(lines, workers, func(lo, hi int) {
			buf := make([]float64, np[a])
			for l := lo; l < hi; l++ {
				ib := b0 + l%(b1-b0)
				ic := c0 + l/(b1-b0)
				base := ib*s.cs[b] + ic*s.cs[c]
				st := s.cs[a]
				for P := 1; P <= ax.n; P++ {
					buf[P] = float64(s.coef[base+P*st])
				}
				if ax.kind == axisCubic {
					pf.solve(buf[1 : 1+ax.n])
				}
				ax.pad(buf)
				for P := range buf {
					s.coef[base+P*st] = float32(buf[P])
				}
			}
		})
	}
	s.ranges(workers)
	return s
}

// pad fills the padded coefficients of one line (interior at 1 … n).
func (ax *axisSpline) pad(buf []float64) {
	n := ax.n
	switch {
	case n == 1:
		buf[0], buf[2], buf[3] = buf[1], buf[1], buf[1]
	case ax.kind == axisCubic:
		// Natural ends: c_{-1} = 2c_0 − c_1, c_n = 2c_{n-1} − c_{n-2}.
		buf[0] = 2*buf[1] - buf[2]
		buf[n+1] = 2*buf[n] - buf[n-1]
	default:
		buf[0], buf[n+1] = buf[1], buf[n]
	}
}

// ranges sets the per-cell dose bounds: the smallest and largest
// coefficient of each cell's window along every axis (its patch is a
// convex combination of them), stored as their distances below and above
// the cell's anchor coefficient (one of the window's, so both are ≥ 0),
// each in one byte: code u stands for D·(u/255)², D the coefficients'
// overall range, rounded up and widened by a margin against rounding, so
// that the bounds stay bounds. The square law keeps a flat cell's bounds
// as tight as a steep one's in proportion (a step of 0.015 Gy at 0.05 Gy
// from the anchor on a 66 Gy range; 3 % of the distance at 5 Gy): two
// bytes a cell instead of the four of two 16-bit values. Layers of cells
// along z are done in parallel, each with buffers of its own.
func (s *spline) ranges(workers int) {
	nc := [3]int{s.ax[0].nc, s.ax[1].nc, s.ax[2].nc}
	np := [3]int{s.ax[0].np, s.ax[1].np, s.ax[2].np}
	cmin, cmax := math.Inf(1), math.Inf(-1)
	for _, v := range s.coef {
		cmin = math.Min(cmin, float64(v))
		cmax = math.Max(cmax, float64(v))
	}
	// The margin covers the rounding of a value summed from float32
	// coefficients (64 terms: a few parts in 10⁶ of their magnitude).
	margin := 1e-5 * math.Max(math.Abs(cmin), math.Abs(cmax))
	span := cmax - cmin + 2*margin
	if !(span > 0) {
		span = 1
	}
	for u := range s.dev {
		f := float64(u) / 255
		s.dev[u] = span * f * f
	}
	cells := nc[0] * nc[1]
	s.q = make([][2]uint8, cells*nc[2])
	ax, ay, az := &s.ax[0], &s.ax[1], &s.ax[2]
	inChunks(nc[2], workers, func(k0, k1 int) {
		zlo := make([]float32, np[0]*np[1])
		zhi := make([]float32, np[0]*np[1])
		xlo := make([]float32, nc[0]*np[1])
		xhi := make([]float32, nc[0]*np[1])
		for ck := k0; ck < k1; ck++ {
			// Along z: the window of layer ck.
			for i := range zlo {
				zlo[i], zhi[i] = float32(math.Inf(1)), float32(math.Inf(-1))
			}
			for P := ck + az.winLo; P <= ck+az.winHi; P++ {
				plane := s.coef[P*s.cs[2] : P*s.cs[2]+np[0]*np[1]]
				for i, v := range plane {
					zlo[i] = min(zlo[i], v)
					zhi[i] = max(zhi[i], v)
				}
			}
			// Along x.
			for j := 0; j < np[1]; j++ {
				row := j * np[0]
				for c := 0; c < nc[0]; c++ {
					mn, mx := float32(math.Inf(1)), float32(math.Inf(-1))
					for P := c + ax.winLo; P <= c+ax.winHi; P++ {
						mn = min(mn, zlo[row+P])
						mx = max(mx, zhi[row+P])
					}
					xlo[j*nc[0]+c], xhi[j*nc[0]+c] = mn, mx
				}
			}
			// Along y, and stored.
			for cj := 0; cj < nc[1]; cj++ {
				for c := 0; c < nc[0]; c++ {
					mn, mx := float32(math.Inf(1)), float32(math.Inf(-1))
					for P := cj + ay.winLo; P <= cj+ay.winHi; P++ {
						mn = min(mn, xlo[P*nc[0]+c])
						mx = max(mx, xhi[P*nc[0]+c])
					}
					a := float64(s.coef[s.anchor(c, cj, ck)])
					s.q[c+nc[0]*(cj+nc[1]*ck)] = [2]uint8{s.devCode(a - float64(mn) + margin), s.devCode(float64(mx) - a + margin)}
				}
			}
		}
	})
}

// anchor returns the index in coef of cell (ci, cj, ck)'s anchor: the
// first coefficient of its window along every axis.
func (s *spline) anchor(ci, cj, ck int) int {
	return ci + s.ax[0].winLo + s.cs[1]*(cj+s.ax[1].winLo) + s.cs[2]*(ck+s.ax[2].winLo)
}

// devCode returns the smallest code whose distance in dev is at least d
// (d ≥ 0 and at most the table's last entry).
func (s *spline) devCode(d float64) uint8 {
	u := int(math.Ceil(255 * math.Sqrt(math.Max(d, 0)/s.dev[255])))
	for u < 255 && s.dev[u] < d {
		u++
	}
	for u > 0 && s.dev[u-1] >= d {
		u--
	}
	return uint8(min(u, 255))
}

// cellRange returns the stored dose bounds of cell (ci, cj, ck), index i
// (ci + nc0·(cj + nc1·ck)).
func (s *spline) cellRange(i, ci, cj, ck int) (lo, hi float64) {
	a := float64(s.coef[s.anchor(ci, cj, ck)])
	q := s.q[i]
	return a - s.dev[q[0]], a + s.dev[q[1]]
}

// inChunks calls fn on consecutive chunks of [0, n) on up to workers
// goroutines (parallel.Ranges), or on the caller's for fewer than 64 items.
// fn must write only what its chunk owns.
func inChunks(n, workers int, fn func(lo, hi int)) {
	if workers < 1 {
		workers = 1
	}
	if workers == 1 || n < 64 {
		fn(0, n)
		return
	}
	parallel.Ranges(n, workers, func(_, lo, hi int) { fn(lo, hi) })
}
