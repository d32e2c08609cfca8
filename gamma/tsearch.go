package gamma

import "math"

// The search over a tensor-product interpolant (cubic B-spline, trilinear).
//
// For one reference point q with dose dr and weight w = 1/ΔD, in DTA units,
// the function minimised is g(p) = |p − q|² + w²(E(p) − dr)², whose minimum
// is Γ². Its minimum over a cubic patch has no closed form and g may have
// several local minima, so the search is a branch and bound that keeps an
// incumbent (the best point found, polished by Newton's method) and
// discards a region only when a lower bound of g over it proves that the
// region cannot hold a value below the incumbent minus the tolerance: the
// minimum reported is at most tol (in Γ) above the interpolant's true
// minimum, and never below it (it is a value the interpolant takes). Three
// lower bounds over a box, each valid, the largest used:
//
//  1. Separated: the squared distance from q to the box plus w² times the
//     squared gap between dr and the dose range of the box's Bernstein
//     control values (the patch lies within them).
//  2. Slab: with ℓ the least-squares linear fit of the control values and δ
//     their largest deviation from it, E lies within ℓ ± δ on the box, so g
//     ≥ |p − q|² + w²·max(0, |ℓ(p) − dr| − δ)², a convex function whose
//     minimum over the box is found exactly (its minimiser is p(t) = clamp(q
//     − t∇ℓ) for the root t of a monotone piecewise-linear equation). The
//     bound's error shrinks with the square of the box size.
//  3. Curvature, around the incumbent p̂ with e₀ = E(p̂) − dr: for any p,
//     exactly, g(p) = g(p̂) + ∇g(p̂)·d + |d|² + w²ΔE² + 2w²e₀R(d), d = p − p̂,
//     R(d) = E(p) − E(p̂) − ∇E(p̂)·d the remainder of the first-order Taylor
//     expansion, which lies between ½λ_min|d|² and ½λ_max|d|² when the dose
//     Hessian's eigenvalues lie in [λ_min, λ_max] on the segment from p̂ to
//     p. Hence g(p) ≥ g(p̂) + ∇g(p̂)·d + c|d|², c = 1 + w²·min(e₀λ_min,
//     e₀λ_max), minimised over the box in closed form. Where c > 0 and p̂ is
//     a stationary point this proves p̂ the minimum over the whole region at
//     once. The Hessian bounds come from the Bernstein coefficients of the
//     second derivatives of the patches that hold the segments (for a C²
//     spline, the union over several cells; a convex-combination bound);
//     the eigenvalue bounds of the interval matrix from Weyl's inequality
//     about its midpoint and Gershgorin's discs (Horn and Johnson, "Matrix
//     Analysis" (1985), 4.3.1 and 6.1.1). A second form keeps half of the
//     w²ΔE² term and holds near a strict local minimum even where the
//     dose is steep (curvatureBound).
//
// Boxes are split in two along their longest side by de Casteljau's
// algorithm; every corner of a box is an exact value of the interpolant
// (the end control values) and tightens the incumbent, as does the point
// that minimises the slab bound. The search is the method of branch and
// bound of global optimisation (Horst and Tuy, "Global Optimization:
// Deterministic Approaches", 3rd ed. (1996)); the Bernstein bounds and
// subdivision are those of Bernstein-form polynomial range bounding
// (Garloff, Interval Computations 2 (1993) 154).

// certTol is the tolerance in Γ to which the fast search certifies the
// minimum over a tensor-product interpolant: the Γ reported is at most
// this above the interpolant's minimum (and float32 storage adds at most
// 2·10⁻⁷ for Γ ≤ 3: the stated tolerance is 10⁻⁶, the bar 10⁻⁴).
// Tighter costs little: near the incumbent the curvature bound is exact,
// and the boxes it cannot settle are far from the tolerance.
const certTol = 1e-7

// maxBoxes bounds the boxes one point's search may split; beyond it the
// point's certified tolerance is whatever the remaining bounds prove (and
// counted in Result.Uncertified).
const maxBoxes = 1 << 15

// cubeR and cubeLevels set the cubes about the incumbent over which the
// search bounds the dose Hessian: half-sides cubeR·2^-k (DTA units), k <
// cubeLevels.
const (
	cubeR      = 1.0
	cubeLevels = 9
)

// maxNewton bounds the Newton polishes per point.
const maxNewton = 32

// tpoint is the state of one reference point's search.
type tpoint struct {
	q     [3]float64
	dr, w float64
	best2 float64    // g at the incumbent
	p     [3]float64 // the incumbent
	e0    float64    // E(p) − dr
	grad  [3]float64 // ∇g(p)
	gE    [3]float64 // ∇E(p)
	hE    [6]float64 // ∇²E(p): xx, yy, zz, xy, xz, yz
	// hlo, hhi are the extreme eigenvalues of hE; qlo, qhi those of I +
	// ½w²∇E∇Eᵀ + w²e₀∇²E (curvatureBound's second form).
	hlo, hhi, qlo, qhi float64
	cell               [3]int // the cell whose polynomial gave e0 and grad
	// newtons counts Newton polishes; boxes the boxes split.
	newtons, boxes int
	// Region Hessian eigenvalue bounds over the box regLo … regHi (a C²
	// spline's block of cells holding every box searched).
	region       bool
	rlo, rhi     float64
	regLo, regHi [3]float64
	// Hessian bounds over cubes of half-side cubeR·2^-k about incumbents.
	cubes [cubeLevels]hessCube
	// gap is the largest amount, in Γ, by which a box given up on could
	// still be below the incumbent (0 when every box was settled).
	gap float64
}

// tbox is a box of the branch and bound with its patch.
type tbox struct {
	lo, h [3]float64
	lb    float64
	b     bnet
}

// target returns the Γ² below which a box must be examined: boxes whose
// lower bound is at least (min(Γ_incumbent, R/Δd) − tol)² cannot improve
// the result by more than the tolerance.
func (s *searcher) target(best2 float64) float64 {
	g := math.Sqrt(best2)
	if g > s.rn {
		g = s.rn
	}
	g -= certTol
	if g <= 0 {
		return 0
	}
	return g * g
}

// locate returns the cell holding p and p's position in it (clamped to the
// grid).
func (s *searcher) locate(p [3]float64) (c [3]int, t [3]float64) {
	f := s.f
	for a := 0; a < 3; a++ {
		if f.n[a] == 1 {
			continue
		}
		c[a] = f.cell(a, p[a])
		t[a] = clamp01((p[a] - f.off[a][c[a]]) * f.invH[a][c[a]])
	}
	return c, t
}

// cellPos returns the position in cell c of p (clamped to the cell).
func (s *searcher) cellPos(c [3]int, p [3]float64) (t [3]float64) {
	f := s.f
	for a := 0; a < 3; a++ {
		if f.n[a] > 1 {
			t[a] = clamp01((p[a] - f.off[a][c[a]]) * f.invH[a][c[a]])
		}
	}
	return t
}

// cellBox returns the lower corner and size of cell c.
func (s *searcher) cellBox(c [3]int) (lo, h [3]float64) {
	f := s.f
	for a := 0; a < 3; a++ {
		lo[a] = f.off[a][c[a]]
		if f.n[a] > 1 {
			h[a] = f.off[a][c[a]+1] - lo[a]
		}
	}
	return lo, h
}

// gAt returns g at p, E evaluated on cell c.
func (pt *tpoint) gOf(p [3]float64, e float64) float64 {
	dx, dy, dz := p[0]-pt.q[0], p[1]-pt.q[1], p[2]-pt.q[2]
	d := pt.w * (e - pt.dr)
	return dx*dx + dy*dy + dz*dz + d*d
}

// accept makes p (E evaluated on cell c, with its derivatives ev) the
// incumbent when it improves on it.
func (pt *tpoint) accept(p [3]float64, c [3]int, ev *evalOut) bool {
	g := pt.gOf(p, ev.v)
	if !(g < pt.best2) {
		return false
	}
	w2 := pt.w * pt.w
	pt.best2, pt.p, pt.cell = g, p, c
	pt.e0 = ev.v - pt.dr
	pt.gE, pt.hE = ev.g, ev.h
	for a := 0; a < 3; a++ {
		pt.grad[a] = 2*(p[a]-pt.q[a]) + 2*w2*pt.e0*ev.g[a]
	}
	pt.hlo, pt.hhi = symEig3(pt.hE)
	var q [6]float64
	for e, ab := range hessPairs {
		q[e] = 0.5*w2*pt.gE[ab[0]]*pt.gE[ab[1]] + w2*pt.e0*pt.hE[e]
		if e < 3 {
			q[e]++
		}
	}
	pt.qlo, pt.qhi = symEig3(q)
	return true
}

// tensorHome starts point pt: the incumbent is the interpolant at q (the
// grid's nearest point when q lies on its edge), polished by Newton's
// method.
func (s *searcher) tensorHome(pt *tpoint, q [3]float64, dr, w float64) {
	*pt = tpoint{q: q, dr: dr, w: w, best2: math.Inf(1)}
	p := s.clampDomain(q)
	c, t := s.locate(p)
	var ev evalOut
	s.sp.eval(c, t, &ev)
	pt.accept(p, c, &ev)
	s.improve(pt, p, c)
}

// clampDomain returns p clamped into the grid's box.
func (s *searcher) clampDomain(p [3]float64) [3]float64 {
	f := s.f
	for a := 0; a < 3; a++ {
		p[a] = fmax(0, fmin(f.off[a][f.n[a]-1], p[a]))
	}
	return p
}

// improve runs Newton's method from p (on cell c for an interpolant that
// is only C⁰ across cells) and takes what it finds if better; past the
// point's budget of polishes it takes p itself.
func (s *searcher) improve(pt *tpoint, p [3]float64, c [3]int) {
	if pt.newtons >= maxNewton {
		var ev evalOut
		s.sp.eval(c, s.cellPos(c, p), &ev)
		pt.accept(p, c, &ev)
		return
	}
	pt.newtons++
	var lo, hi [3]float64
	fixed := !s.sp.c2
	if fixed {
		var h [3]float64
		lo, h = s.cellBox(c)
		for a := 0; a < 3; a++ {
			hi[a] = lo[a] + h[a]
		}
	} else {
		for a := 0; a < 3; a++ {
			hi[a] = s.f.off[a][s.f.n[a]-1]
		}
	}
	s.newton(pt, p, c, lo, hi, fixed)
}

// newton minimises g from p over the box lo … hi by projected Newton steps
// with a backtracking line search (the Gauss-Newton matrix 2(I + w²∇E∇Eᵀ)
// where the Hessian is not positive definite), and offers every point it
// reaches to the incumbent. With fixed set E is the polynomial of cell c
// throughout.
func (s *searcher) newton(pt *tpoint, p [3]float64, c [3]int, lo, hi [3]float64, fixed bool) {
	w2 := pt.w * pt.w
	var ev evalOut
	at := func(p [3]float64) [3]int {
		if fixed {
			return c
		}
		cc, _ := s.locate(p)
		return cc
	}
	c = at(p)
	s.sp.eval(c, s.cellPos(c, p), &ev)
	g := pt.gOf(p, ev.v)
	pt.accept(p, c, &ev)
	for it := 0; it < 40; it++ {
		r := ev.v - pt.dr
		var grad [3]float64
		for a := 0; a < 3; a++ {
			grad[a] = 2*(p[a]-pt.q[a]) + 2*w2*r*ev.g[a]
		}
		var free [3]bool
		nfree := 0
		for a := 0; a < 3; a++ {
			free[a] = hi[a] > lo[a] && !(p[a] <= lo[a] && grad[a] > 0) && !(p[a] >= hi[a] && grad[a] < 0)
			if free[a] {
				nfree++
			}
		}
		if nfree == 0 {
			return
		}
		// H/2 = I + w²∇E∇Eᵀ + w²r∇²E on the free axes.
		var hm [3][3]float64
		hidx := [3][3]int{{0, 3, 4}, {3, 1, 5}, {4, 5, 2}}
		newtonStep := func(withCurvature bool) ([3]float64, bool) {
			for a := 0; a < 3; a++ {
				for b := 0; b < 3; b++ {
					v := w2 * ev.g[a] * ev.g[b]
					if a == b {
						v++
					}
					if withCurvature {
						v += w2 * r * ev.h[hidx[a][b]]
					}
					if !free[a] || !free[b] {
						v = 0
						if a == b {
							v = 1
						}
					}
					hm[a][b] = v
				}
			}
			var rhs [3]float64
			for a := 0; a < 3; a++ {
				if free[a] {
					rhs[a] = -grad[a] / 2
				}
			}
			return solve3(hm, rhs)
		}
		step, ok := newtonStep(true)
		if !ok {
			step, ok = newtonStep(false)
			if !ok {
				return
			}
		}
		// Backtracking: halve the step until g decreases, or until the
		// step moves the point by no more than 10⁻¹³ (DTA units), which
		// ends the polish: at a minimum every trial fails, and halving on
		// to the float64 resolution of p cost 26 evaluations per polish
		// on the sweep of BENCHMARKS.md.
		moved := false
		for alpha := 1.0; alpha > 1e-9; alpha /= 2 {
			var np [3]float64
			for a := 0; a < 3; a++ {
				np[a] = fmax(lo[a], fmin(hi[a], p[a]+alpha*step[a]))
			}
			dp := math.Abs(np[0]-p[0]) + math.Abs(np[1]-p[1]) + math.Abs(np[2]-p[2])
			if dp <= 1e-13 {
				break
			}
			nc := at(np)
			nv := s.sp.value(nc, s.cellPos(nc, np))
			if ng := pt.gOf(np, nv); ng < g {
				p, g, c = np, ng, nc
				s.sp.eval(c, s.cellPos(c, p), &ev)
				pt.accept(p, c, &ev)
				moved = true
				break
			}
		}
		if !moved {
			return
		}
	}
}

// solve3 solves the symmetric system m x = b by Cholesky factorisation; it
// reports false when m is not positive definite.
func solve3(m [3][3]float64, b [3]float64) ([3]float64, bool) {
	l00 := m[0][0]
	if !(l00 > 0) {
		return b, false
	}
	l00 = math.Sqrt(l00)
	l10 := m[1][0] / l00
	l20 := m[2][0] / l00
	d1 := m[1][1] - l10*l10
	if !(d1 > 0) {
		return b, false
	}
	l11 := math.Sqrt(d1)
	l21 := (m[2][1] - l20*l10) / l11
	d2 := m[2][2] - l20*l20 - l21*l21
	if !(d2 > 0) {
		return b, false
	}
	l22 := math.Sqrt(d2)
	y0 := b[0] / l00
	y1 := (b[1] - l10*y0) / l11
	y2 := (b[2] - l20*y0 - l21*y1) / l22
	x2 := y2 / l22
	x1 := (y1 - l21*x2) / l11
	x0 := (y0 - l10*x1 - l20*x2) / l00
	return [3]float64{x0, x1, x2}, true
}

// curvatureLB is bound 3 over the box lo … lo+h, for dose Hessian
// eigenvalues within [lmin, lmax] on every segment from the incumbent to
// the box.
func (pt *tpoint) curvatureLB(lo, h [3]float64, lmin, lmax float64) float64 {
	return pt.curvatureC(lo, h, 1+pt.w*pt.w*fmin(pt.e0*lmin, pt.e0*lmax))
}

// curvatureC returns min over the box of g(p̂) + ∇g(p̂)·d + c|d|², d = p −
// p̂ (separable along the axes).
func (pt *tpoint) curvatureC(lo, h [3]float64, c float64) float64 {
	sum := 0.0
	for a := 0; a < 3; a++ {
		dlo := lo[a] - pt.p[a]
		dhi := dlo + h[a]
		g := pt.grad[a]
		m := g*dlo + c*dlo*dlo
		if v := g*dhi + c*dhi*dhi; v < m {
			m = v
		}
		if c > 0 {
			if d := -g / (2 * c); d > dlo && d < dhi {
				if v := -g * g / (4 * c); v < m {
					m = v
				}
			}
		}
		sum += m
	}
	return pt.best2 + sum
}

// slabLB is bound 2 over the box lo … lo+h with patch b; it also returns
// the point of the box that minimises the bound.
func (pt *tpoint) slabLB(b *bnet, lo, h [3]float64) (float64, [3]float64) {
	alpha, beta, delta := b.linearFit()
	return pt.slabOf(alpha, beta, delta, lo, h)
}

// cellSlab is bound 2 over the whole of cell c, from the fit the worker's
// cache keeps of the cell: most candidate cells of a point far from
// passing are settled by it before their branch and bound starts.
func (s *searcher) cellSlab(pt *tpoint, c [3]int, ts *tscratch) float64 {
	e := s.cacheOf(ts, c)
	if !e.fit {
		e.alpha, e.beta, e.delta = e.net.linearFit()
		e.fit = true
	}
	lo, h := s.cellBox(c)
	v, _ := pt.slabOf(e.alpha, e.beta, e.delta, lo, h)
	return v
}

// slabOf is bound 2 over the box lo … lo+h for a patch whose linear fit is
// α + β·(t − ½) (t the box's own coordinates) within ±δ.
func (pt *tpoint) slabOf(alpha float64, beta [3]float64, delta float64, lo, h [3]float64) (float64, [3]float64) {
	var gw, ylo, yhi [3]float64
	e := alpha - pt.dr
	for a := 0; a < 3; a++ {
		if h[a] > 0 {
			g := beta[a] / h[a]
			e += g * (pt.q[a] - lo[a] - h[a]/2)
			gw[a] = pt.w * g
		}
		ylo[a] = lo[a] - pt.q[a]
		yhi[a] = ylo[a] + h[a]
	}
	v, y := slabMin(pt.w*e, gw, pt.w*delta, ylo, yhi)
	return v * (1 - 1e-12), [3]float64{pt.q[0] + y[0], pt.q[1] + y[1], pt.q[2] + y[2]}
}

// slabMin returns the minimum over y in the box ylo … yhi of |y|² +
// max(0, |e + G·y| − δ)², and its minimiser.
func slabMin(e float64, g [3]float64, delta float64, ylo, yhi [3]float64) (float64, [3]float64) {
	var y [3]float64
	for a := 0; a < 3; a++ {
		y[a] = clampTo(0, ylo[a], yhi[a])
	}
	s0 := e + g[0]*y[0] + g[1]*y[1] + g[2]*y[2]
	if s0 <= delta && s0 >= -delta {
		return y[0]*y[0] + y[1]*y[1] + y[2]*y[2], y
	}
	// Above the slab (below: mirror the signs): minimise |y|² + (e' +
	// G'·y)⁺² with e' = e − δ. Its minimiser is y(t) = clamp(−tG') for the
	// root t > 0 of F(t) = e' + G'·y(t) − t, decreasing and piecewise
	// linear between the t where a coordinate meets a face of the box.
	ep := e - delta
	gp := g
	if s0 < 0 {
		ep = -e - delta
		gp = [3]float64{-g[0], -g[1], -g[2]}
	}
	var bps [6]float64
	nb := 0
	for a := 0; a < 3; a++ {
		if gp[a] == 0 {
			continue
		}
		if t := -ylo[a] / gp[a]; t > 0 {
			bps[nb] = t
			nb++
		}
		if t := -yhi[a] / gp[a]; t > 0 {
			bps[nb] = t
			nb++
		}
	}
	for i := 1; i < nb; i++ {
		for j := i; j > 0 && bps[j] < bps[j-1]; j-- {
			bps[j], bps[j-1] = bps[j-1], bps[j]
		}
	}
	tp, fp := 0.0, slabF(0, ep, &gp, &ylo, &yhi)
	t := -1.0
	for _, b := range bps[:nb] {
		fb := slabF(b, ep, &gp, &ylo, &yhi)
		if fb <= 0 {
			t = tp + fp*(b-tp)/(fp-fb)
			break
		}
		tp, fp = b, fb
	}
	if t < 0 {
		t = tp + fp // beyond the last kink every coordinate is fixed: slope −1
	}
	for a := 0; a < 3; a++ {
		y[a] = clampTo(-t*gp[a], ylo[a], yhi[a])
	}
	return y[0]*y[0] + y[1]*y[1] + y[2]*y[2] + t*t, y
}

// slabF is slabMin's F(t) = e' + G'·clamp(−tG') − t.
func slabF(t, ep float64, gp, ylo, yhi *[3]float64) float64 {
	return ep + gp[0]*clampTo(-t*gp[0], ylo[0], yhi[0]) + gp[1]*clampTo(-t*gp[1], ylo[1], yhi[1]) + gp[2]*clampTo(-t*gp[2], ylo[2], yhi[2]) - t
}

// clampTo returns v clamped to lo … hi.
func clampTo(v, lo, hi float64) float64 {
	if v < lo {
		return lo
	}
	if v > hi {
		return hi
	}
	return v
}

// eigenBounds bounds the eigenvalues of every symmetric matrix with entries
// (xx, yy, zz, xy, xz, yz) within lo … hi.
func eigenBounds(lo, hi [6]float64) (lmin, lmax float64) {
	var mid, rad [6]float64
	for i := range mid {
		mid[i] = (lo[i] + hi[i]) / 2
		rad[i] = (hi[i] - lo[i]) / 2
	}
	e0, e2 := symEig3(mid)
	// Weyl: the eigenvalues move by at most the spectral norm of the
	// perturbation, at most that of the radius matrix (entrywise larger,
	// non-negative), bounded by its largest row sum and its Frobenius norm.
	rows := [3]float64{rad[0] + rad[3] + rad[4], rad[3] + rad[1] + rad[5], rad[4] + rad[5] + rad[2]}
	fro := math.Sqrt(rad[0]*rad[0] + rad[1]*rad[1] + rad[2]*rad[2] + 2*(rad[3]*rad[3]+rad[4]*rad[4]+rad[5]*rad[5]))
	rho := fmin(fro, max(rows[0], rows[1], rows[2]))
	scale := math.Abs(e0) + math.Abs(e2) + rho
	lmin, lmax = e0-rho-1e-12*scale, e2+rho+1e-12*scale
	// Gershgorin's discs over the interval entries.
	off := func(x int) float64 { return fmax(math.Abs(lo[x]), math.Abs(hi[x])) }
	r := [3]float64{off(3) + off(4), off(3) + off(5), off(4) + off(5)}
	glo := min(lo[0]-r[0], lo[1]-r[1], lo[2]-r[2])
	ghi := max(hi[0]+r[0], hi[1]+r[1], hi[2]+r[2])
	return fmax(lmin, glo), fmin(lmax, ghi)
}

// symEig3 returns the smallest and largest eigenvalue of the symmetric
// matrix (xx, yy, zz, xy, xz, yz), by the trigonometric solution of the
// characteristic cubic (Smith, Commun ACM 4 (1961) 168).
func symEig3(m [6]float64) (lmin, lmax float64) {
	p1 := m[3]*m[3] + m[4]*m[4] + m[5]*m[5]
	if p1 == 0 {
		return min(m[0], m[1], m[2]), max(m[0], m[1], m[2])
	}
	q := (m[0] + m[1] + m[2]) / 3
	a, b, c := m[0]-q, m[1]-q, m[2]-q
	p2 := a*a + b*b + c*c + 2*p1
	p := math.Sqrt(p2 / 6)
	// det((M − qI)/p) / 2
	det := a*(b*c-m[5]*m[5]) - m[3]*(m[3]*c-m[5]*m[4]) + m[4]*(m[3]*m[5]-b*m[4])
	r := det / (2 * p * p * p)
	r = fmax(-1, fmin(1, r))
	phi := math.Acos(r) / 3
	lmax = q + 2*p*math.Cos(phi)
	lmin = q + 2*p*math.Cos(phi+2*math.Pi/3)
	return lmin, lmax
}

// maxCand is how many candidate cells one point's search keeps in order of
// their lower bounds; further cells are searched at once, in scan order.
const maxCand = 512

// stackCap is the depth of the branch and bound's box stack.
const stackCap = 160

// tscratch is one worker's reusable memory for the tensor search.
type tscratch struct {
	candLB   [maxCand]float64
	candCell [maxCand][3]int32
	// stack is the pool of boxes, free its free slots, order the
	// depth-first stack of slots.
	stack [stackCap]tbox
	free  [stackCap]uint16
	order [stackCap]uint16
	// A direct-mapped cache of cells: their nets and Hessian bounds.
	cells [netCache]cellCache
}

// cellCache is what a worker keeps of one recent cell.
type cellCache struct {
	key      int32 // 1 + the cell's index; 0 for an empty slot
	hess     bool  // hlo, hhi computed
	fit      bool  // alpha, beta, delta computed
	net      bnet
	hlo, hhi [6]float64
	// The net's least-squares linear fit and largest deviation from it
	// (bnet.linearFit): E lies within the fit ± delta over the whole cell.
	alpha, delta float64
	beta         [3]float64
}

// netCache is the number of cell nets a worker keeps (a power of two).
const netCache = 4096

// regionCells is the largest block of cells, per axis, over which the
// search bounds the dose Hessian of a C² spline at once (the bound loosens,
// and costs more, with the block).
const regionCells = 8

// regionReach is the largest search ball (Γ, DTA units) over which the
// search tries the region's Hessian bound: for a point passing at its
// home it often settles the minimum at once; for a failing one the dose
// term is large and the bound over the wider block too loose to settle
// anything (measured on the sweep of BENCHMARKS.md), so it is not
// computed.
const regionReach = 1.0

// certify proves the incumbent of pt the minimum of g within the search
// distance (to the tolerance), or replaces it by one that is.
func (s *searcher) certify(pt *tpoint, ts *tscratch) {
	f := s.f
	T := s.target(pt.best2)
	if T <= 0 {
		return
	}
	rho := fmin(math.Sqrt(pt.best2), s.rn)
	var c0, c1 [3]int
	small := rho <= regionReach
	for a := 0; a < 3; a++ {
		c0[a] = f.cell(a, pt.q[a]-rho)
		c1[a] = f.cell(a, pt.q[a]+rho)
		if c1[a]-c0[a] >= regionCells {
			small = false
		}
	}
	pt.region = false
	if s.sp.c2 && small {
		// The union of the cells' own Hessian bounds (from their nets,
		// cached per worker): the spline is C², so a segment through
		// several cells has its Hessians in the union.
		var lo6, hi6 [6]float64
		for e := range lo6 {
			lo6[e], hi6[e] = math.Inf(1), math.Inf(-1)
		}
		for ck := c0[2]; ck <= c1[2]; ck++ {
			for cj := c0[1]; cj <= c1[1]; cj++ {
				for ci := c0[0]; ci <= c1[0]; ci++ {
					e := s.cacheOf(ts, [3]int{ci, cj, ck})
					if !e.hess {
						_, h := s.cellBox([3]int{ci, cj, ck})
						e.hlo, e.hhi = e.net.hessianRange(h)
						e.hess = true
					}
					for x := range lo6 {
						lo6[x] = min(lo6[x], e.hlo[x])
						hi6[x] = max(hi6[x], e.hhi[x])
					}
				}
			}
		}
		pt.rlo, pt.rhi = eigenBounds(lo6, hi6)
		pt.region = true
		for a := 0; a < 3; a++ {
			pt.regLo[a] = f.off[a][c0[a]]
			pt.regHi[a] = f.off[a][min(c1[a]+1, f.n[a]-1)]
		}
		var h [3]float64
		for a := 0; a < 3; a++ {
			h[a] = pt.regHi[a] - pt.regLo[a]
		}
		if pt.curvatureLB(pt.regLo, h, pt.rlo, pt.rhi) >= T {
			return
		}
	}
	// Candidate cells within the bound, kept in a heap on their lower
	// bound from the stored dose range.
	n := 0
	nc0, nc1 := s.sp.ax[0].nc, s.sp.ax[1].nc
	w2 := pt.w * pt.w
	for ck := c0[2]; ck <= c1[2]; ck++ {
		dz := f.slabDist2(2, ck, pt.q[2])
		if dz >= T {
			continue
		}
		for cj := c0[1]; cj <= c1[1]; cj++ {
			dyz := dz + f.slabDist2(1, cj, pt.q[1])
			if dyz >= T {
				continue
			}
			row := nc0 * (cj + nc1*ck)
			for ci := c0[0]; ci <= c1[0]; ci++ {
				ds2 := dyz + f.slabDist2(0, ci, pt.q[0])
				if ds2 >= T {
					continue
				}
				lo, hi := s.sp.cellRange(row+ci, ci, cj, ck)
				gap := max(lo-pt.dr, pt.dr-hi, 0)
				lb := ds2 + w2*gap*gap
				if lb >= T {
					continue
				}
				if n == maxCand {
					if cl := [3]int{ci, cj, ck}; s.cellSlab(pt, cl, ts) < T {
						s.searchCell(pt, cl, ts)
						T = s.target(pt.best2)
					}
					continue
				}
				// Push onto the heap.
				i := n
				n++
				for i > 0 {
					parent := (i - 1) / 2
					if ts.candLB[parent] <= lb {
						break
					}
					ts.candLB[i], ts.candCell[i] = ts.candLB[parent], ts.candCell[parent]
					i = parent
				}
				ts.candLB[i], ts.candCell[i] = lb, [3]int32{int32(ci), int32(cj), int32(ck)}
			}
		}
	}
	for n > 0 {
		lb, cl := ts.candLB[0], ts.candCell[0]
		// Pop: the last element sifts down from the root.
		n--
		last, lastCell := ts.candLB[n], ts.candCell[n]
		i := 0
		for {
			child := 2*i + 1
			if child >= n {
				break
			}
			if child+1 < n && ts.candLB[child+1] < ts.candLB[child] {
				child++
			}
			if ts.candLB[child] >= last {
				break
			}
			ts.candLB[i], ts.candCell[i] = ts.candLB[child], ts.candCell[child]
			i = child
		}
		ts.candLB[i], ts.candCell[i] = last, lastCell
		T := s.target(pt.best2)
		if lb >= T {
			break
		}
		c := [3]int{int(cl[0]), int(cl[1]), int(cl[2])}
		if s.cellSlab(pt, c, ts) >= T {
			continue
		}
		s.searchCell(pt, c, ts)
	}
}

// searchCell is the branch and bound over cell c: a depth-first search
// over boxes held in the worker's pool, the part with the lower bound
// first.
func (s *searcher) searchCell(pt *tpoint, c [3]int, ts *tscratch) {
	// The pool's free slots.
	nfree := 0
	for i := stackCap - 1; i >= 0; i-- {
		ts.free[nfree] = uint16(i)
		nfree++
	}
	take := func() int {
		nfree--
		return int(ts.free[nfree])
	}
	give := func(i int) {
		ts.free[nfree] = uint16(i)
		nfree++
	}
	lo, h := s.cellBox(c)
	i0 := take()
	top := &ts.stack[i0]
	top.b = *s.netOf(ts, c)
	// Only the cube about q of half-side √T can hold g below T (g ≥ |p −
	// q|²): the search starts from the part of the cell inside it, its net
	// cut out of the cell's by de Casteljau's algorithm (a ball that a
	// cell holds many times over is searched from boxes of its own size).
	r := math.Sqrt(s.target(pt.best2))
	var tmp bnet
	for a := 0; a < 3; a++ {
		if h[a] == 0 {
			continue
		}
		t0 := (pt.q[a] - r - lo[a]) / h[a]
		t1 := (pt.q[a] + r - lo[a]) / h[a]
		if t1 <= 0 || t0 >= 1 {
			give(i0)
			return
		}
		if t1 < 1 {
			top.b.splitAt(a, t1, &tmp, &top.b)
			top.b, tmp = tmp, top.b
		} else {
			t1 = 1
		}
		if t0 > 0 {
			top.b.splitAt(a, t0/t1, &tmp, &top.b)
		} else {
			t0 = 0
		}
		lo[a] += t0 * h[a]
		h[a] *= t1 - t0
	}
	top.lo, top.h = lo, h
	mn, mx := top.b.bounds()
	top.lb = pt.sepBound(lo, h, mn, mx)
	ns := 0
	ts.order[ns] = uint16(i0)
	ns++
	for ns > 0 {
		ns--
		bi := int(ts.order[ns])
		bx := &ts.stack[bi]
		T := s.target(pt.best2)
		if bx.lb >= T {
			give(bi)
			continue
		}
		if pt.boxes >= maxBoxes || nfree == 0 {
			pt.giveUp(bx.lb)
			give(bi)
			continue
		}
		pt.boxes++
		// The corners are values of the interpolant.
		for m := 0; m < 8; m++ {
			i, j, k := 3*(m&1), 3*(m>>1&1), 3*(m>>2)
			p := [3]float64{bx.lo[0] + float64(m&1)*bx.h[0], bx.lo[1] + float64(m>>1&1)*bx.h[1], bx.lo[2] + float64(m>>2)*bx.h[2]}
			if pt.gOf(p, bx.b[i+4*j+16*k]) < pt.best2 {
				s.improve(pt, p, c)
			}
		}
		T = s.target(pt.best2)
		if bx.lb >= T {
			give(bi)
			continue
		}
		holds := inBox(pt.p, bx.lo, bx.h)
		// A box holding the incumbent is settled, if at all, by the
		// curvature bound; others first by the slab.
		if holds && s.curvatureBound(pt, bx, c, ts) >= T {
			give(bi)
			continue
		}
		lbS, pS := pt.slabLB(&bx.b, bx.lo, bx.h)
		if lbS >= T || (!holds && s.curvatureBound(pt, bx, c, ts) >= T) {
			give(bi)
			continue
		}
		// The point minimising the slab bound is a good guess of the box's
		// minimiser.
		if !holds {
			v := s.sp.value(c, s.cellPos(c, pS))
			if pt.gOf(pS, v) < pt.best2 {
				s.improve(pt, pS, c)
				T = s.target(pt.best2)
				if bx.lb >= T || lbS >= T || s.curvatureBound(pt, bx, c, ts) >= T {
					give(bi)
					continue
				}
				holds = inBox(pt.p, bx.lo, bx.h)
			}
		}
		// Split through the incumbent when it lies inside the box, so that
		// both parts have it on their boundary and their own Hessian
		// bounds hold on the segments from it; else at the middle of the
		// longest side.
		a := 0
		for x := 1; x < 3; x++ {
			if bx.h[x] > bx.h[a] {
				a = x
			}
		}
		if bx.h[a] < 1e-7 {
			pt.giveUp(max(bx.lb, lbS))
			give(bi)
			continue
		}
		at := 0.5
		if holds {
			best := 0.0
			for x := 0; x < 3; x++ {
				if bx.h[x] < bx.h[a]/4 {
					continue
				}
				f := (pt.p[x] - bx.lo[x]) / bx.h[x]
				if f > 0.05 && f < 0.95 && bx.h[x] > best {
					best, a, at = bx.h[x], x, f
				}
			}
		}
		// The lower part stays in the parent's slot.
		hj := take()
		hb := &ts.stack[hj]
		plo, ph := bx.lo, bx.h
		lmn, lmx, hmn, hmx := bx.b.splitAt(a, at, &bx.b, &hb.b)
		bx.h[a] = ph[a] * at
		hb.lo, hb.h = plo, ph
		hb.lo[a] += bx.h[a]
		hb.h[a] = ph[a] - bx.h[a]
		bx.lb = pt.sepBound(bx.lo, bx.h, lmn, lmx)
		hb.lb = pt.sepBound(hb.lo, hb.h, hmn, hmx)
		// Push the part with the higher bound first: the other is popped
		// first.
		if bx.lb < hb.lb {
			ts.order[ns], ts.order[ns+1] = uint16(hj), uint16(bi)
		} else {
			ts.order[ns], ts.order[ns+1] = uint16(bi), uint16(hj)
		}
		ns += 2
	}
}

// sepBound is bound 1 over the box lo … lo+h whose control values lie in
// mn … mx: its squared distance from q plus w² times the squared gap
// between dr and the control values.
func (pt *tpoint) sepBound(lo, h [3]float64, mn, mx float64) float64 {
	ds := 0.0
	for a := 0; a < 3; a++ {
		if d := lo[a] - pt.q[a]; d > 0 {
			ds += d * d
		} else if d := pt.q[a] - lo[a] - h[a]; d > 0 {
			ds += d * d
		}
	}
	gap := max(mn-pt.dr, pt.dr-mx, 0)
	return ds + pt.w*pt.w*gap*gap
}

// curvatureBound returns bound 3 over the box: with the region's Hessian
// bounds when they hold (a C² spline), and with Hessian bounds about the
// incumbent: on the cube of half-side r about p̂ that holds the box, the
// dose Hessian is within ∇²E(p̂) ± r·Σ_c M_abc, M bounding the third
// derivatives on the cells the cube meets (the Hessian is continuous across
// cells for a C² spline; a C⁰ interpolant uses its incumbent's cell
// alone). About p̂ a second form also holds, which keeps half of the w²ΔE²
// term the first drops: with ΔE = ∇E·d + R,
//
//	w²ΔE² + 2w²e₀R ≥ ½w²(∇E·d)² + w²e₀ dᵀH_c d − w²|e₀|ρ|d|² − ½w²K²|d|⁴
//
// (2ab ≥ −a²/2 − 2b², |R| ≤ ½K|d|²), so g(p) ≥ g(p̂) + ∇g·d + c₂|d|² with
// c₂ = λ_min(I + ½w²∇E∇Eᵀ + w²e₀H_c) − w²|e₀|ρ − ½w²K²D², D the box's
// largest distance from p̂: positive near a strict local minimum even
// where the dose is steep. It returns -Inf when no bound applies.
func (s *searcher) curvatureBound(pt *tpoint, bx *tbox, c [3]int, ts *tscratch) float64 {
	lb := math.Inf(-1)
	if pt.region && s.sp.c2 {
		lb = pt.curvatureLB(bx.lo, bx.h, pt.rlo, pt.rhi)
	}
	if !s.sp.c2 && pt.cell != c {
		return lb
	}
	var hrad [6]float64
	if inBox(pt.p, bx.lo, bx.h) {
		// The box holds every segment from p̂ into it: its own Hessian
		// bounds hold.
		lo6, hi6 := bx.b.hessianRange(bx.h)
		lmin, lmax := eigenBounds(lo6, hi6)
		lb = fmax(lb, pt.curvatureLB(bx.lo, bx.h, lmin, lmax))
		for e := range hrad {
			hrad[e] = fmax(hi6[e]-pt.hE[e], pt.hE[e]-lo6[e])
		}
		return fmax(lb, pt.taylorBound(bx, hrad))
	}
	// Otherwise the Hessian bounds over a cube that holds the box and p̂:
	// cubes of half-sides cubeR·2^-k about the incumbent, bounded once from
	// the nets of the cells each meets (a C² spline's Hessian is continuous
	// across cells; a C⁰ interpolant keeps to its incumbent's cell) and
	// kept while they hold the segments asked about, even as the incumbent
	// moves.
	var hlo, hhi [3]float64
	r := 0.0
	for a := 0; a < 3; a++ {
		hlo[a] = fmin(bx.lo[a], pt.p[a])
		hhi[a] = fmax(bx.lo[a]+bx.h[a], pt.p[a])
		r = fmax(r, fmax(pt.p[a]-hlo[a], hhi[a]-pt.p[a]))
	}
	k := 0
	for k+1 < cubeLevels && cubeR*math.Ldexp(1, -(k+1)) >= r {
		k++
	}
	if cubeR*math.Ldexp(1, -k) < r {
		return lb
	}
	cb := &pt.cubes[k]
	if !cb.ok || (!s.sp.c2 && cb.cell != pt.cell) || !(inBox(hlo, cb.lo, cb.size) && inBox(hhi, cb.lo, cb.size)) {
		rk := cubeR * math.Ldexp(1, -k)
		var clo, chi [3]float64
		for a := 0; a < 3; a++ {
			clo[a] = fmax(0, pt.p[a]-rk)
			chi[a] = fmin(s.f.off[a][s.f.n[a]-1], pt.p[a]+rk)
		}
		if !s.sp.c2 {
			cl, ch := s.cellBox(pt.cell)
			for a := 0; a < 3; a++ {
				clo[a] = fmax(clo[a], cl[a])
				chi[a] = fmin(chi[a], cl[a]+ch[a])
			}
		}
		lo6, hi6, ok := s.hullHessian(ts, clo, chi)
		if !ok {
			cb.ok = false
			return lb
		}
		*cb = hessCube{ok: true, cell: pt.cell, lo: clo, lo6: lo6, hi6: hi6}
		for a := 0; a < 3; a++ {
			cb.size[a] = chi[a] - clo[a]
		}
		cb.lmin, cb.lmax = eigenBounds(lo6, hi6)
	}
	lb = fmax(lb, pt.curvatureLB(bx.lo, bx.h, cb.lmin, cb.lmax))
	for e := range hrad {
		hrad[e] = fmax(cb.hi6[e]-pt.hE[e], pt.hE[e]-cb.lo6[e])
	}
	return fmax(lb, pt.taylorBound(bx, hrad))
}

// hessCube holds the dose Hessian's bounds over a box about an incumbent.
type hessCube struct {
	ok         bool
	cell       [3]int // the incumbent's cell (a C⁰ interpolant's bounds hold in it only)
	lo, size   [3]float64
	lo6, hi6   [6]float64
	lmin, lmax float64 // eigenvalue bounds of lo6 … hi6
}

// hullHessian bounds the dose Hessian over the box lo … hi: the union over
// the cells the box meets (at most two along each axis) of the Hessian
// bounds of each cell's patch restricted to the box.
func (s *searcher) hullHessian(ts *tscratch, lo, hi [3]float64) (lo6, hi6 [6]float64, ok bool) {
	f := s.f
	var c0, c1 [3]int
	for a := 0; a < 3; a++ {
		c0[a] = f.cell(a, lo[a])
		c1[a] = f.cell(a, hi[a])
		if c1[a]-c0[a] > 1 {
			return lo6, hi6, false
		}
	}
	for e := range lo6 {
		lo6[e], hi6[e] = math.Inf(1), math.Inf(-1)
	}
	for ck := c0[2]; ck <= c1[2]; ck++ {
		for cj := c0[1]; cj <= c1[1]; cj++ {
			for ci := c0[0]; ci <= c1[0]; ci++ {
				c := [3]int{ci, cj, ck}
				clo, ch := s.cellBox(c)
				var b, tmp bnet
				b = *s.netOf(ts, c)
				// Restrict to the box, axis by axis.
				var sh [3]float64
				empty := false
				for a := 0; a < 3; a++ {
					if ch[a] == 0 {
						continue
					}
					t0 := clamp01((lo[a] - clo[a]) / ch[a])
					t1 := clamp01((hi[a] - clo[a]) / ch[a])
					if t1 <= t0 {
						empty = true
						break
					}
					if t1 < 1 {
						b.splitAt(a, t1, &tmp, &b)
						b, tmp = tmp, b
					}
					if t0 > 0 {
						b.splitAt(a, t0/t1, &tmp, &b)
					}
					sh[a] = (t1 - t0) * ch[a]
				}
				if empty {
					continue
				}
				l, h := b.hessianRange(sh)
				for e := range lo6 {
					lo6[e] = fmin(lo6[e], l[e])
					hi6[e] = fmax(hi6[e], h[e])
				}
			}
		}
	}
	return lo6, hi6, lo6[0] <= hi6[0]
}

// netOf returns the Bernstein net of cell c from the worker's cache of
// recent cells (neighbouring reference points search the same cells).
func (s *searcher) netOf(ts *tscratch, c [3]int) *bnet { return &s.cacheOf(ts, c).net }

// cacheOf returns the worker's cache entry of cell c, its net computed.
func (s *searcher) cacheOf(ts *tscratch, c [3]int) *cellCache {
	key := int32(c[0]+s.sp.ax[0].nc*(c[1]+s.sp.ax[1].nc*c[2])) + 1
	e := &ts.cells[uint32(key)*2654435761>>20&(netCache-1)] // Knuth's multiplicative hash
	if e.key != key {
		e.key, e.hess, e.fit = key, false, false
		s.sp.cellNet(c, &e.net)
	}
	return e
}

// hessPairs lists the axes of the Hessian entries xx, yy, zz, xy, xz, yz.
var hessPairs = [6][2]int{{0, 0}, {1, 1}, {2, 2}, {0, 1}, {0, 2}, {1, 2}}

// taylorBound is bound 3 over the box, about the incumbent, for dose
// Hessians within ∇²E(p̂) ± hrad (entrywise) on every segment from p̂ into
// the box: the larger of the first form (c from the eigenvalue bounds) and
// the second (c₂, which keeps half the w²ΔE² term).
func (pt *tpoint) taylorBound(bx *tbox, hrad [6]float64) float64 {
	rows := [3]float64{hrad[0] + hrad[3] + hrad[4], hrad[3] + hrad[1] + hrad[5], hrad[4] + hrad[5] + hrad[2]}
	fro := math.Sqrt(hrad[0]*hrad[0] + hrad[1]*hrad[1] + hrad[2]*hrad[2] + 2*(hrad[3]*hrad[3]+hrad[4]*hrad[4]+hrad[5]*hrad[5]))
	rho := fmin(fro, max(rows[0], rows[1], rows[2]))
	hlo, hhi := pt.hlo, pt.hhi
	eps := 1e-12 * (math.Abs(hlo) + math.Abs(hhi) + rho)
	lo1, hi1 := hlo-rho-eps, hhi+rho+eps
	w2 := pt.w * pt.w
	lb := pt.curvatureLB(bx.lo, bx.h, lo1, hi1)
	d2 := 0.0
	for a := 0; a < 3; a++ {
		m := fmax(math.Abs(bx.lo[a]-pt.p[a]), math.Abs(bx.lo[a]+bx.h[a]-pt.p[a]))
		d2 += m * m
	}
	qlo, qhi := pt.qlo, pt.qhi
	k := fmax(math.Abs(lo1), math.Abs(hi1))
	c2 := qlo - 1e-12*(math.Abs(qlo)+math.Abs(qhi)) - w2*math.Abs(pt.e0)*rho - 0.5*w2*k*k*d2
	return fmax(lb, pt.curvatureC(bx.lo, bx.h, c2))
}

// inBox reports whether p lies in the box lo … lo+h.
func inBox(p, lo, h [3]float64) bool {
	for a := 0; a < 3; a++ {
		if p[a] < lo[a] || p[a] > lo[a]+h[a] {
			return false
		}
	}
	return true
}

// giveUp records a box the search could not settle: a value as low as its
// lower bound is not excluded.
func (pt *tpoint) giveUp(lb float64) {
	if g := math.Sqrt(pt.best2) - math.Sqrt(fmax(lb, 0)); g > pt.gap {
		pt.gap = g
	}
}

// treeSeed offers the point the k-d tree's nearest evaluated node in the
// renormalised space (x, y, z, D/ΔD) (Yuan and Chen, Med Phys 37 (2010)
// 4868): a node's dose (nodeDose) is a value of the interpolant, so the
// node bounds the minimum, and Newton's method from it may lower the bound
// further.
func (s *searcher) treeSeed(pt *tpoint) {
	f := s.f
	idx, _, ok := s.tree.Nearest([4]float64{pt.q[0], pt.q[1], pt.q[2], pt.dr}, pt.w, pt.best2)
	if !ok {
		return
	}
	n := int(s.nodes[idx])
	i := n % f.n[0]
	j := (n / f.n[0]) % f.n[1]
	k := n / (f.n[0] * f.n[1])
	p := [3]float64{f.off[0][i], f.off[1][j], f.off[2][k]}
	if pt.gOf(p, f.nodeDose(n, [3]int{i, j, k})) < pt.best2 {
		c, _ := s.locate(p)
		s.improve(pt, p, c)
	}
}

// fmax and fmin are max and min of two numbers that are not NaN (inlined,
// where math.Max and math.Min call out).
func fmax(a, b float64) float64 {
	if a > b {
		return a
	}
	return b
}

func fmin(a, b float64) float64 {
	if a < b {
		return a
	}
	return b
}

// warmStart offers the point its neighbour's best offset: the interpolant
// at q + off, polished by Newton's method when better.
func (s *searcher) warmStart(pt *tpoint, off [3]float64) {
	p := s.clampDomain([3]float64{pt.q[0] + off[0], pt.q[1] + off[1], pt.q[2] + off[2]})
	c, t := s.locate(p)
	if pt.gOf(p, s.sp.value(c, t)) < pt.best2 {
		s.improve(pt, p, c)
	}
}
