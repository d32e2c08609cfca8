package gamma

import (
	"math"
	"sort"

	"voxgamma/volume"
)

// field is the evaluated grid in the engine's working units: positions in
// DTA units (mm / Δd) along the evaluated grid's local axes, doses in Gy.
// It is read-only during a comparison and shared by all workers.
type field struct {
	n      [3]int
	off    [3][]float64 // sample positions in DTA units, increasing, off[a][0] = 0
	step   [3]float64   // uniform step in DTA units, 0 when not uniform or single-sample
	stride [3]int       // index stride of each axis; 0 on a single-sample axis
	data   []float32
}

func newField(g *volume.Grid, dta float64) *field {
	f := &field{n: g.Dims(), data: g.Data}
	strides := [3]int{1, f.n[0], f.n[0] * f.n[1]}
	for a := 0; a < 3; a++ {
		src := g.Offsets(a)
		f.off[a] = make([]float64, len(src))
		for i, v := range src {
			f.off[a][i] = v / dta
		}
		if s, uniform := g.Spacing(a); uniform && s > 0 {
			f.step[a] = s / dta
		}
		if f.n[a] > 1 {
			f.stride[a] = strides[a]
		}
	}
	return f
}

// insideTol is the relative tolerance with which a point on the grid's
// outer faces counts as inside: it absorbs rounding in coordinate transforms.
const insideTol = 1e-9

// cell returns the lower sample index of the cell holding u along axis a,
// clamped to the grid; u must already be known to be inside or is clamped.
func (f *field) cell(a int, u float64) int {
	n := f.n[a]
	if n == 1 || u <= 0 {
		return 0
	}
	if s := f.step[a]; s > 0 {
		c := int(u / s)
		if c > n-2 {
			c = n - 2
		}
		return c
	}
	off := f.off[a]
	c := sort.SearchFloat64s(off, u) // first off >= u
	if c >= n || off[c] > u {
		c--
	}
	if c > n-2 {
		c = n - 2
	}
	if c < 0 {
		c = 0
	}
	return c
}

// minStep returns the smallest sample spacing of axis a in DTA units (+Inf
// for a single-sample axis, which has no spacing).
func (f *field) minStep(a int) float64 {
	m := math.Inf(1)
	for i := 1; i < f.n[a]; i++ {
		m = math.Min(m, f.off[a][i]-f.off[a][i-1])
	}
	return m
}

// inside reports whether local position q (DTA units) lies in the grid.
func (f *field) inside(q [3]float64) bool {
	for a := 0; a < 3; a++ {
		last := f.off[a][f.n[a]-1]
		tol := insideTol * (1 + last)
		if q[a] < -tol || q[a] > last+tol {
			return false
		}
	}
	return true
}

// corners loads the eight samples of cell (ci, cj, ck) in the order
// c000, c100, c010, c110, c001, c101, c011, c111 (bit 0 = +i, bit 1 = +j,
// bit 2 = +k). On single-sample axes the "upper" corner repeats the lower.
func (f *field) corners(ci, cj, ck int, c *[8]float64) {
	sx, sy, sz := f.stride[0], f.stride[1], f.stride[2]
	b := ci + f.n[0]*(cj+f.n[1]*ck)
	d := f.data
	c[0] = float64(d[b])
	c[1] = float64(d[b+sx])
	c[2] = float64(d[b+sy])
	c[3] = float64(d[b+sx+sy])
	c[4] = float64(d[b+sz])
	c[5] = float64(d[b+sx+sz])
	c[6] = float64(d[b+sy+sz])
	c[7] = float64(d[b+sx+sy+sz])
}

// sample interpolates trilinearly at q, which must be inside.
func (f *field) sample(q [3]float64) float64 {
	var cidx [3]int
	var t [3]float64
	for a := 0; a < 3; a++ {
		c := f.cell(a, q[a])
		cidx[a] = c
		if f.n[a] > 1 {
			lo, hi := f.off[a][c], f.off[a][c+1]
			t[a] = clamp01((q[a] - lo) / (hi - lo))
		}
	}
	var c [8]float64
	f.corners(cidx[0], cidx[1], cidx[2], &c)
	return trilinear(&c, t)
}

func clamp01(v float64) float64 {
	if v < 0 {
		return 0
	}
	if v > 1 {
		return 1
	}
	return v
}

func trilinear(c *[8]float64, t [3]float64) float64 {
	x, y, z := t[0], t[1], t[2]
	c00 := c[0] + (c[1]-c[0])*x
	c10 := c[2] + (c[3]-c[2])*x
	c01 := c[4] + (c[5]-c[4])*x
	c11 := c[6] + (c[7]-c[6])*x
	c0 := c00 + (c10-c00)*y
	c1 := c01 + (c11-c01)*y
	return c0 + (c1-c0)*z
}

// slabDist2 returns the squared distance from coordinate u to the extent of
// cell c along axis a.
func (f *field) slabDist2(a, c int, u float64) float64 {
	lo := f.off[a][c]
	if d := lo - u; d > 0 {
		return d * d
	}
	hi := lo
	if f.n[a] > 1 {
		hi = f.off[a][c+1]
	}
	if d := u - hi; d > 0 {
		return d * d
	}
	return 0
}

// doseGap2 returns w²·gap², gap being the distance from dr to the dose
// range of the corners c. With ds², the squared distance from q to the cell
// box, it makes a lower bound of g(p) = |p − q|² + w²·(E(p) − dr)² over the
// cell: a trilinear interpolant never leaves the range of its corners.
func doseGap2(c *[8]float64, dr, w float64) float64 {
	cmin, cmax := c[0], c[0]
	for _, v := range c[1:] {
		if v < cmin {
			cmin = v
		}
		if v > cmax {
			cmax = v
		}
	}
	gap := 0.0
	if dr < cmin {
		gap = cmin - dr
	} else if dr > cmax {
		gap = dr - cmax
	}
	return w * w * gap * gap
}

func abs(v float64) float64 {
	if v < 0 {
		return -v
	}
	return v
}

// cellMin returns the minimum over cell (ci, cj, ck), whose corners are c,
// of |p − q|² + w²·(E(p) − dr)², found by minimiseTrilinear.
func (f *field) cellMin(ci, cj, ck int, c *[8]float64, q [3]float64, dr, w float64) float64 {
	idx := [3]int{ci, cj, ck}
	var lo, h [3]float64
	for a := 0; a < 3; a++ {
		lo[a] = f.off[a][idx[a]]
		if f.n[a] > 1 {
			h[a] = f.off[a][idx[a]+1] - lo[a]
		}
	}
	return minimiseTrilinear(c, lo, h, q, dr, w)
}

// minimiseTrilinear minimises g(t) = Σ_a (lo_a + t_a·h_a − q_a)² +
// w²·(E(t) − dr)² over t ∈ [0,1]³ (axes with h_a = 0 are fixed at t_a = 0).
// Gauss-Newton: the residual is (lo + t∘h − q, w·(E − dr)), its Jacobian
// J = [diag(h); w·∇E], and JᵀJ = diag(h²) + (w∇E)(w∇E)ᵀ is inverted with
// the Sherman-Morrison formula on the free axes. Steps are projected onto
// the box and halved until g decreases. When E is linear in the cell the
// first step lands on the exact minimum.
func minimiseTrilinear(c *[8]float64, lo, h, q [3]float64, dr, w float64) float64 {
	// Multilinear coefficients: E = a0 + a1 x + a2 y + a3 z + a4 xy + a5 xz + a6 yz + a7 xyz.
	a0 := c[0]
	a1 := c[1] - c[0]
	a2 := c[2] - c[0]
	a3 := c[4] - c[0]
	a4 := c[3] - c[1] - c[2] + c[0]
	a5 := c[5] - c[1] - c[4] + c[0]
	a6 := c[6] - c[2] - c[4] + c[0]
	a7 := c[7] - c[3] - c[5] - c[6] + c[1] + c[2] + c[4] - c[0]
	// Residuals r = lo + t∘h − q and rd = w(E − dr); g = |r|² + rd².
	var t, r [3]float64
	for a := 0; a < 3; a++ {
		if h[a] > 0 {
			t[a] = clamp01((q[a] - lo[a]) / h[a])
		}
		r[a] = lo[a] + t[a]*h[a] - q[a]
	}
	e := a0 + a1*t[0] + a2*t[1] + a3*t[2] + a4*t[0]*t[1] + a5*t[0]*t[2] + a6*t[1]*t[2] + a7*t[0]*t[1]*t[2]
	rd := w * (e - dr)
	g := r[0]*r[0] + r[1]*r[1] + r[2]*r[2] + rd*rd
	for iter := 0; iter < maxIterations && g > 0; iter++ {
		// Half-gradient b of g and v = w·∇E at t; an axis on a face whose
		// gradient points out of the box is held there.
		x, y, z := t[0], t[1], t[2]
		grad := [3]float64{a1 + a4*y + a5*z + a7*y*z, a2 + a4*x + a6*z + a7*x*z, a3 + a5*x + a6*y + a7*x*y}
		var b, v [3]float64
		var held [3]bool
		for a := 0; a < 3; a++ {
			if h[a] == 0 {
				held[a] = true
				continue
			}
			v[a] = w * grad[a]
			b[a] = r[a]*h[a] + rd*v[a]
			held[a] = (t[a] <= 0 && b[a] > 0) || (t[a] >= 1 && b[a] < 0)
		}
		// Newton step on the free axes: the half-Hessian of g is
		// H = diag(h²) + v vᵀ + rd·w·∇²E (∇²E has only the cross terms of the
		// multilinear form). Far from a zero residual the last term matters;
		// where it makes H indefinite the Gauss-Newton matrix (without it),
		// always positive definite, is used. A free axis on a face whose step
		// would leave the box is held too and the step recomputed.
		rw := rd * w
		cross := [3]float64{rw * (a4 + a7*z), rw * (a5 + a7*y), rw * (a6 + a7*x)} // rd·w·(E_xy, E_xz, E_yz)
		var step [3]float64
		for pass := 0; pass < 3; pass++ {
			var ok bool
			if step, ok = newtonStep(&held, &h, &v, &b, &cross, true); !ok {
				if step, ok = newtonStep(&held, &h, &v, &b, &cross, false); !ok {
					step = [3]float64{}
					break
				}
			}
			changed := false
			for a := 0; a < 3; a++ {
				if !held[a] && ((t[a] <= 0 && step[a] < 0) || (t[a] >= 1 && step[a] > 0)) {
					held[a], changed = true, true
				}
			}
			if !changed {
				break
			}
		}
		if step == ([3]float64{}) {
			break
		}
		// The quadratic model predicts g to fall by −bᵀΔ (b is half the
		// gradient).
		predicted := -(b[0]*step[0] + b[1]*step[1] + b[2]*step[2])
		alpha := 1.0
		accepted := false
		for try := 0; try < 10; try++ {
			var tn, rn [3]float64
			change := 0.0
			clipped := false
			for a := 0; a < 3; a++ {
				tn[a] = t[a] + alpha*step[a]
				if tn[a] < 0 || tn[a] > 1 {
					tn[a] = clamp01(tn[a])
					clipped = true
				}
				rn[a] = lo[a] + tn[a]*h[a] - q[a]
				if d := abs(tn[a]-t[a]) * h[a]; d > change {
					change = d
				}
			}
			en := a0 + a1*tn[0] + a2*tn[1] + a3*tn[2] + a4*tn[0]*tn[1] + a5*tn[0]*tn[2] + a6*tn[1]*tn[2] + a7*tn[0]*tn[1]*tn[2]
			rdn := w * (en - dr)
			gn := rn[0]*rn[0] + rn[1]*rn[1] + rn[2]*rn[2] + rdn*rdn
			if gn < g {
				decrease := g - gn
				t, r, rd, g = tn, rn, rdn, gn
				accepted = true
				if change < stepTolerance || decrease < 1e-12 {
					return g
				}
				// A full, unclipped step that fell just as the quadratic
				// model said has reached the model's minimum, which is
				// then exact to rounding; done if no held face wants to
				// be released.
				if alpha == 1 && !clipped && abs(decrease-predicted) <= 1e-9*g+1e-12 && facesHold(&t, &r, &h, rd, w, a1, a2, a3, a4, a5, a6, a7) {
					return g
				}
				break
			}
			if change < stepTolerance {
				break
			}
			alpha *= 0.5
		}
		if !accepted {
			break
		}
	}
	return g
}

// facesHold reports whether, at t, no axis on a face of the box has a
// gradient pointing into the box: the optimality condition on the faces.
func facesHold(t, r, h *[3]float64, rd, w, a1, a2, a3, a4, a5, a6, a7 float64) bool {
	x, y, z := t[0], t[1], t[2]
	for a := 0; a < 3; a++ {
		if h[a] == 0 || (t[a] > 0 && t[a] < 1) {
			continue
		}
		var ga float64
		switch a {
		case 0:
			ga = a1 + a4*y + a5*z + a7*y*z
		case 1:
			ga = a2 + a4*x + a6*z + a7*x*z
		default:
			ga = a3 + a5*x + a6*y + a7*x*y
		}
		b := r[a]*h[a] + rd*w*ga
		if (t[a] <= 0 && b < 0) || (t[a] >= 1 && b > 0) {
			return false
		}
	}
	return true
}

// newtonStep returns −H⁻¹b on the free axes, with H = diag(h²) + v vᵀ plus,
// when full, the symmetric cross terms (xy, xz, yz); held axes get a zero
// step. It reports false when H is not positive definite.
func newtonStep(held *[3]bool, h, v, b, cross *[3]float64, full bool) ([3]float64, bool) {
	var m [3][3]float64
	var rhs [3]float64
	free := 0
	for a := 0; a < 3; a++ {
		if held[a] {
			m[a][a] = 1
			continue
		}
		free++
		m[a][a] = h[a]*h[a] + v[a]*v[a]
		rhs[a] = -b[a]
	}
	if free == 0 {
		return [3]float64{}, true
	}
	if free == 1 {
		var s [3]float64
		for a := 0; a < 3; a++ {
			if !held[a] {
				s[a] = rhs[a] / m[a][a]
			}
		}
		return s, true
	}
	var cx [3]float64
	if full {
		cx = *cross
	}
	if !held[0] && !held[1] {
		m[0][1] = v[0]*v[1] + cx[0]
		m[1][0] = m[0][1]
	}
	if !held[0] && !held[2] {
		m[0][2] = v[0]*v[2] + cx[1]
		m[2][0] = m[0][2]
	}
	if !held[1] && !held[2] {
		m[1][2] = v[1]*v[2] + cx[2]
		m[2][1] = m[1][2]
	}
	return solve3(&m, rhs)
}

// solve3 solves m·x = rhs for a symmetric m and reports false when m is not
// positive definite (Sylvester's criterion: the leading principal minors
// are positive). Cramer's rule: no square roots, one division.
func solve3(m *[3][3]float64, rhs [3]float64) ([3]float64, bool) {
	a, b, c := m[0][0], m[0][1], m[0][2]
	d, e := m[1][1], m[1][2]
	f := m[2][2]
	// Cofactors of the symmetric matrix.
	A := d*f - e*e
	B := c*e - b*f
	C := b*e - c*d
	minor2 := a*d - b*b
	det := a*A + b*B + c*C
	if !(a > 0) || !(minor2 > 0) || !(det > 0) {
		return [3]float64{}, false
	}
	D := a*f - c*c
	E := b*c - a*e
	inv := 1 / det
	x0 := (A*rhs[0] + B*rhs[1] + C*rhs[2]) * inv
	x1 := (B*rhs[0] + D*rhs[1] + E*rhs[2]) * inv
	x2 := (C*rhs[0] + E*rhs[1] + minor2*rhs[2]) * inv
	return [3]float64{x0, x1, x2}, true
}

// maxIterations bounds the Gauss-Newton iterations in one cell; stepTolerance
// (DTA units) ends them once a step moves less than that. A step of 1e-7 Δd
// changes Γ by far less than the 0.005 the method is held to.
const (
	maxIterations = 30
	stepTolerance = 1e-6
)
