package gamma

// The evaluated dose between grid nodes is the piecewise-linear interpolant
// on the Kuhn (Freudenthal) triangulation of each cell: the cube of eight
// nodes is cut into six tetrahedra, one per ordering of the three axes. For
// the ordering (a, b, c) the tetrahedron holds the points with
// 1 ≥ t_a ≥ t_b ≥ t_c ≥ 0 (t: position in the cell, 0 to 1 per axis) and has
// the vertices 0, e_a, e_a + e_b and (1, 1, 1). Every cell is cut the same
// way, so the interpolant is continuous across cells, and it reproduces any
// dose that is linear in position exactly. This is the surface of Ju et
// al., Med Phys 35 (2008) 879: on each tetrahedron the dose is linear, so
// Γ² restricted to it is a convex quadratic, whose minimum is the squared
// distance from the reference point to a tetrahedron in (x/Δd, y/Δd, z/Δd,
// D/ΔD) space, found exactly.

// kuhnPerm lists the axis orderings of the six tetrahedra.
var kuhnPerm = [6][3]int{{0, 1, 2}, {0, 2, 1}, {1, 0, 2}, {1, 2, 0}, {2, 0, 1}, {2, 1, 0}}

// kuhn lists, per tetrahedron, the corners (bit 0 = +i, bit 1 = +j,
// bit 2 = +k, as in field.corners) of its vertices v0..v3.
var kuhn = func() (k [6][4]uint8) {
	for i, p := range kuhnPerm {
		k[i][0] = 0
		k[i][1] = 1 << p[0]
		k[i][2] = k[i][1] | 1<<p[1]
		k[i][3] = 7
	}
	return k
}()

// plValue interpolates the corners c at position t in the cell with the
// Kuhn piecewise-linear interpolant: along the path 0 → e_a → e_a + e_b →
// (1,1,1) through the tetrahedron holding t (t_a ≥ t_b ≥ t_c), the dose
// gains the differences of successive vertices weighted by t_a, t_b, t_c.
func plValue(c *[8]float64, t [3]float64) float64 {
	a, b, d := 0, 1, 2 // axes in decreasing order of t
	if t[a] < t[b] {
		a, b = b, a
	}
	if t[b] < t[d] {
		b, d = d, b
	}
	if t[a] < t[b] {
		a, b = b, a
	}
	v1 := 1 << a
	v2 := v1 | 1<<b
	return c[0] + (c[v1]-c[0])*t[a] + (c[v2]-c[v1])*t[b] + (c[7]-c[v2])*t[d]
}

// cellMinPL returns min(best2, the minimum over the cell of
// g(p) = |p − q|² + w²·(E(p) − dr)²), E being the Kuhn interpolant of the
// corners c, the cell spanning lo to lo + h (DTA units). ds2 is the squared
// distance from q to the cell box.
//
// On one tetrahedron E is linear, E(p) = E(v0) + G·(p − v0), so the points
// (p, w·E(p)) lie on a hyperplane of the renormalised space, and the
// distance from (q, w·dr) to that hyperplane,
//
//	w²·e²/(1 + w²|G|²),  e = E(v0) + G·(q − v0) − dr,
//
// is Γ² of a linear field (the closed form of the package tests). It bounds
// the tetrahedron's minimum from below, and is the minimum when the foot of
// the perpendicular, q − w²·e·G/(1 + w²|G|²), lies in the tetrahedron.
// Otherwise the minimum lies on the tetrahedron's boundary, found exactly by
// tetraDist2's faces. Tetrahedra whose bound cannot beat best2 are skipped.
//
// inv holds 1/h (0 along an axis with h = 0).
func cellMinPL(c *[8]float64, lo, h, inv, q [3]float64, dr, w, ds2, best2 float64) float64 {
	if h[0] == 0 || h[1] == 0 || h[2] == 0 {
		return cellMinFlat(c, lo, h, q, dr, w, ds2, best2)
	}
	// Weighted dose differences from dr at the corners, and q's position
	// relative to the cell's lower corner, in cell fractions.
	var d [8]float64
	for m := range d {
		d[m] = w * (c[m] - dr)
	}
	var u, qlo [3]float64 // q in cell fractions, and q − lo
	for a := 0; a < 3; a++ {
		qlo[a] = q[a] - lo[a]
		u[a] = qlo[a] * inv[a]
	}
	var pts [8][4]float64 // built on first need
	built := false
	// First, for all six tetrahedra in straight-line code, the two lower
	// bounds: the box distance with the gap between dr and the dose range,
	// and the distance to the tetrahedron's hyperplane.
	var lbs, planes, ks [6]float64
	var gs [6][3]float64
	for ti := range kuhn {
		tet := &kuhn[ti]
		d0, d1, d2, d3 := d[tet[0]], d[tet[1]], d[tet[2]], d[tet[3]]
		lo4 := min(d0, d1, d2, d3)
		hi4 := max(d0, d1, d2, d3)
		gap := max(lo4, -hi4, 0)
		// The weighted dose gradient G (per DTA unit) along the Kuhn path
		// v0 → v1 → v2 → v3, one axis per step.
		perm := &kuhnPerm[ti]
		g := &gs[ti]
		g[perm[0]] = (d1 - d0) * inv[perm[0]]
		g[perm[1]] = (d2 - d1) * inv[perm[1]]
		g[perm[2]] = (d3 - d2) * inv[perm[2]]
		// e: the weighted dose difference of the linear extension at q.
		e := d0 + g[0]*qlo[0] + g[1]*qlo[1] + g[2]*qlo[2]
		den := 1 + g[0]*g[0] + g[1]*g[1] + g[2]*g[2]
		ks[ti] = e / den
		planes[ti] = e * ks[ti]
		lbs[ti] = max(ds2+gap*gap, planes[ti])
	}
	for ti := range kuhn {
		if lbs[ti] >= best2 {
			continue
		}
		tet := &kuhn[ti]
		perm := &kuhnPerm[ti]
		a0, a1, a2 := perm[0], perm[1], perm[2]
		g := &gs[ti]
		plane, k := planes[ti], ks[ti]
		// The foot of the perpendicular, q − (e/den)·G, in cell fractions,
		// and its barycentric coordinates in the tetrahedron.
		t0 := u[a0] - k*g[a0]*inv[a0]
		t1 := u[a1] - k*g[a1]*inv[a1]
		t2 := u[a2] - k*g[a2]*inv[a2]
		lam := [4]float64{1 - t0, t0 - t1, t1 - t2, t2}
		if lam[0] >= 0 && lam[1] >= 0 && lam[2] >= 0 && lam[3] >= 0 {
			best2 = plane
			continue
		}
		// Outside: by Pythagoras in the hyperplane, the minimum is plane
		// plus the squared distance from the foot to the tetrahedron, which
		// is at least the spatial distance from the foot to the cell box.
		out := 0.0
		for i, ti := range [3]float64{t0, t1, t2} {
			a := perm[i]
			if ti < 0 {
				out += ti * ti * h[a] * h[a]
			} else if ti > 1 {
				out += (ti - 1) * (ti - 1) * h[a] * h[a]
			}
		}
		// The same for the tetrahedron's slanted faces t_a = t_b and
		// t_b = t_c, which the foot lies beyond when λ1 or λ2 < 0: in space,
		// the plane t_x = t_y lies |t_x − t_y|/√(1/h_x² + 1/h_y²) away.
		if lam[1] < 0 {
			out = max(out, lam[1]*lam[1]/(inv[a0]*inv[a0]+inv[a1]*inv[a1]))
		}
		if lam[2] < 0 {
			out = max(out, lam[2]*lam[2]/(inv[a1]*inv[a1]+inv[a2]*inv[a2]))
		}
		if plane+out >= best2 {
			continue
		}
		// The nearest point lies on a face that the foot sees: one opposite
		// a vertex whose barycentric coordinate is negative (the Euclidean
		// projection onto a simplex within its hyperplane).
		if !built {
			cornerPoints(&pts, &d, lo, h, q)
			built = true
		}
		vs := [4]*vec4{&pts[tet[0]], &pts[tet[1]], &pts[tet[2]], &pts[tet[3]]}
		for i := 0; i < 4; i++ {
			if lam[i] < 0 {
				var f [3]*vec4
				n := 0
				for j := 0; j < 4; j++ {
					if j != i {
						f[n] = vs[j]
						n++
					}
				}
				best2 = triDist2(f[0], f[1], f[2], ds2, best2)
			}
		}
	}
	return best2
}

// cornerPoints sets pts to the cell's corners as points of the renormalised
// space relative to the reference point (q, w·dr): spatial offsets from q
// and the weighted dose differences d.
func cornerPoints(pts *[8][4]float64, d *[8]float64, lo, h, q [3]float64) {
	for m := 0; m < 8; m++ {
		for a := 0; a < 3; a++ {
			x := lo[a] - q[a]
			if m&(1<<a) != 0 {
				x += h[a]
			}
			pts[m][a] = x
		}
		pts[m][3] = d[m]
	}
}

// cellMinFlat is cellMinPL for a cell with no extent along some axis (a
// grid with a single sample along that axis): its tetrahedra are flat, and
// each is solved through its faces by tetraDist2.
func cellMinFlat(c *[8]float64, lo, h, q [3]float64, dr, w, ds2, best2 float64) float64 {
	var d [8]float64
	for m := range d {
		d[m] = w * (c[m] - dr)
	}
	var pts [8][4]float64
	cornerPoints(&pts, &d, lo, h, q)
	for ti := range kuhn {
		tet := &kuhn[ti]
		best2 = tetraDist2(&pts[tet[0]], &pts[tet[1]], &pts[tet[2]], &pts[tet[3]], ds2, best2)
	}
	return best2
}

type vec4 = [4]float64

func dot4(a, b *vec4) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] + a[3]*b[3] }

func sub4(a, b *vec4) vec4 { return vec4{a[0] - b[0], a[1] - b[1], a[2] - b[2], a[3] - b[3]} }

// tetraDist2 returns min(best, the squared distance from the origin to the
// tetrahedron with vertices p0..p3 in R⁴): the minimum of |Σλ_i p_i|² over
// λ ≥ 0, Σλ = 1, a convex quadratic programme solved exactly. The minimum is
// inside the tetrahedron when the projection onto its affine hull has all
// barycentric coordinates ≥ 0; otherwise it lies on the boundary, the
// minimum over the four triangular faces (a degenerate, flat tetrahedron is
// covered by its faces too). ds2 bounds the spatial part of every squared
// distance from below; with each face's dose gap it skips faces that cannot
// beat best.
func tetraDist2(p0, p1, p2, p3 *vec4, ds2, best float64) float64 {
	d1, d2, d3 := sub4(p1, p0), sub4(p2, p0), sub4(p3, p0)
	a11, a12, a13 := dot4(&d1, &d1), dot4(&d1, &d2), dot4(&d1, &d3)
	a22, a23, a33 := dot4(&d2, &d2), dot4(&d2, &d3), dot4(&d3, &d3)
	r1, r2, r3 := -dot4(&d1, p0), -dot4(&d2, p0), -dot4(&d3, p0)
	// Cofactors of the symmetric Gram matrix, for Cramer's rule.
	c11 := a22*a33 - a23*a23
	c12 := a13*a23 - a12*a33
	c13 := a12*a23 - a13*a22
	det := a11*c11 + a12*c12 + a13*c13
	if det > 1e-12*a11*a22*a33 {
		c22 := a11*a33 - a13*a13
		c23 := a12*a13 - a11*a23
		c33 := a11*a22 - a12*a12
		inv := 1 / det
		m1 := (c11*r1 + c12*r2 + c13*r3) * inv
		m2 := (c12*r1 + c22*r2 + c23*r3) * inv
		m3 := (c13*r1 + c23*r2 + c33*r3) * inv
		if m1 >= 0 && m2 >= 0 && m3 >= 0 && m1+m2+m3 <= 1 {
			// |p0 + Dμ|² = |p0|² − μ·r when Gμ = r.
			return min(best, max(0, dot4(p0, p0)-(m1*r1+m2*r2+m3*r3)))
		}
	}
	// On the boundary: the four faces.
	best = triDist2(p0, p1, p2, ds2, best)
	best = triDist2(p0, p1, p3, ds2, best)
	best = triDist2(p0, p2, p3, ds2, best)
	return triDist2(p1, p2, p3, ds2, best)
}

// gap4 returns the squared distance from 0 to the range of the dose
// coordinates of the given points.
func gap4(a, b, c float64) float64 {
	lo, hi := min(a, b, c), max(a, b, c)
	if lo > 0 {
		return lo * lo
	}
	if hi < 0 {
		return hi * hi
	}
	return 0
}

// triDist2 returns min(best, the squared distance from the origin to the
// triangle p0 p1 p2 in R⁴), like tetraDist2 one dimension down.
func triDist2(p0, p1, p2 *vec4, ds2, best float64) float64 {
	if ds2+gap4(p0[3], p1[3], p2[3]) >= best {
		return best
	}
	d1, d2 := sub4(p1, p0), sub4(p2, p0)
	a11, a12, a22 := dot4(&d1, &d1), dot4(&d1, &d2), dot4(&d2, &d2)
	r1, r2 := -dot4(&d1, p0), -dot4(&d2, p0)
	det := a11*a22 - a12*a12
	if det > 1e-12*a11*a22 {
		inv := 1 / det
		m1 := (a22*r1 - a12*r2) * inv
		m2 := (a11*r2 - a12*r1) * inv
		if m1 >= 0 && m2 >= 0 && m1+m2 <= 1 {
			return min(best, max(0, dot4(p0, p0)-(m1*r1+m2*r2)))
		}
		// The nearest point lies on an edge opposite a negative
		// barycentric coordinate (λ0 = 1 − m1 − m2, λ1 = m1, λ2 = m2).
		if m1+m2 > 1 {
			best = segDist2(p1, p2, best)
		}
		if m1 < 0 {
			best = segDist2(p0, p2, best)
		}
		if m2 < 0 {
			best = segDist2(p0, p1, best)
		}
		return best
	}
	best = segDist2(p0, p1, best)
	best = segDist2(p0, p2, best)
	return segDist2(p1, p2, best)
}

// segDist2 returns min(best, the squared distance from the origin to the
// segment p0 p1 in R⁴).
func segDist2(p0, p1 *vec4, best float64) float64 {
	d := sub4(p1, p0)
	dd := dot4(&d, &d)
	t := 0.0
	if dd > 0 {
		t = clamp01(-dot4(&d, p0) / dd)
	}
	x := vec4{p0[0] + t*d[0], p0[1] + t*d[1], p0[2] + t*d[2], p0[3] + t*d[3]}
	return min(best, dot4(&x, &x))
}
