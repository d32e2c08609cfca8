package gamma

import "math"

// bnet is the Bernstein net of a tensor-product cubic patch over a box:
// the control values b[i + 4j + 16k], i, j, k = 0 … 3 along x, y, z. The
// patch is E(t) = Σ b_ijk B_i(t_x) B_j(t_y) B_k(t_z), t ∈ [0, 1]³ across
// the box, B_i the cubic Bernstein polynomials.
type bnet [64]float64

// cellNet sets b to the Bernstein net of cell c.
func (s *spline) cellNet(c [3]int, b *bnet) {
	base := c[0]*s.cs[0] + c[1]*s.cs[1] + c[2]*s.cs[2]
	mx, my, mz := &s.ax[0].mat[c[0]], &s.ax[1].mat[c[1]], &s.ax[2].mat[c[2]]
	var t bnet
	// Along x, each of the 16 lines of the coefficient block.
	for jk := 0; jk < 16; jk++ {
		row := base + (jk&3)*s.cs[1] + (jk>>2)*s.cs[2]
		v0, v1, v2, v3 := float64(s.coef[row]), float64(s.coef[row+1]), float64(s.coef[row+2]), float64(s.coef[row+3])
		for i := 0; i < 4; i++ {
			m := &mx[i]
			t[4*jk+i] = m[0]*v0 + m[1]*v1 + m[2]*v2 + m[3]*v3
		}
	}
	// Along y.
	for k := 0; k < 4; k++ {
		for i := 0; i < 4; i++ {
			o := 16*k + i
			v0, v1, v2, v3 := t[o], t[o+4], t[o+8], t[o+12]
			for j := 0; j < 4; j++ {
				m := &my[j]
				b[o+4*j] = m[0]*v0 + m[1]*v1 + m[2]*v2 + m[3]*v3
			}
		}
	}
	// Along z.
	for ij := 0; ij < 16; ij++ {
		v0, v1, v2, v3 := b[ij], b[ij+16], b[ij+32], b[ij+48]
		for k := 0; k < 4; k++ {
			m := &mz[k]
			t[ij+16*k] = m[0]*v0 + m[1]*v1 + m[2]*v2 + m[3]*v3
		}
	}
	*b = t
}

// netStride is the index stride of each axis in a bnet.
var netStride = [3]int{1, 4, 16}

// splitAt cuts the patch b at fraction t of axis a with de Casteljau's
// algorithm: lo and hi are the nets of the parts below and above (either
// may be b itself). It returns the range of each part's control values.
func (b *bnet) splitAt(a int, t float64, lo, hi *bnet) (lmn, lmx, hmn, hmx float64) {
	s := netStride[a]
	o1, o2 := netStride[(a+1)%3], netStride[(a+2)%3]
	u := 1 - t
	lmn, hmn = math.Inf(1), math.Inf(1)
	lmx, hmx = math.Inf(-1), math.Inf(-1)
	for x := 0; x < 4; x++ {
		for y := 0; y < 4; y++ {
			i := x*o1 + y*o2
			b0, b1, b2, b3 := b[i], b[i+s], b[i+2*s], b[i+3*s]
			l1 := u*b0 + t*b1
			m := u*b1 + t*b2
			r2 := u*b2 + t*b3
			l2 := u*l1 + t*m
			r1 := u*m + t*r2
			mid := u*l2 + t*r1
			lo[i], lo[i+s], lo[i+2*s], lo[i+3*s] = b0, l1, l2, mid
			hi[i], hi[i+s], hi[i+2*s], hi[i+3*s] = mid, r1, r2, b3
			lmn, lmx = minMax4(lmn, lmx, b0, l1, l2, mid)
			hmn, hmx = minMax4(hmn, hmx, mid, r1, r2, b3)
		}
	}
	return lmn, lmx, hmn, hmx
}

// minMax4 widens mn … mx to hold a, b, c and d.
func minMax4(mn, mx, a, b, c, d float64) (float64, float64) {
	if a < mn {
		mn = a
	}
	if a > mx {
		mx = a
	}
	if b < mn {
		mn = b
	}
	if b > mx {
		mx = b
	}
	if c < mn {
		mn = c
	}
	if c > mx {
		mx = c
	}
	if d < mn {
		mn = d
	}
	if d > mx {
		mx = d
	}
	return mn, mx
}

// bounds returns the smallest and largest control value: the patch lies
// between them.
func (b *bnet) bounds() (lo, hi float64) {
	lo, hi = b[0], b[0]
	for i := 0; i < 64; i += 4 {
		r := (*[4]float64)(b[i:])
		lo, hi = minMax4(lo, hi, r[0], r[1], r[2], r[3])
	}
	return lo, hi
}

// linearFit returns the least-squares linear function of the control values
// on their Greville points (i/3, j/3, k/3), ℓ(t) = α + β·(t − ½), and the
// largest deviation δ of a control value from it. A linear function has
// the control values ℓ(i/3, j/3, k/3), so E − ℓ has the control values b −
// ℓ, and |E(t) − ℓ(t)| ≤ δ over the whole box.
func (b *bnet) linearFit() (alpha float64, beta [3]float64, delta float64) {
	var sx0, sx1, sx2, sx3 float64
	var sy, sz [4]float64
	for k := 0; k < 4; k++ {
		zs := 0.0
		for j := 0; j < 4; j++ {
			r := (*[4]float64)(b[16*k+4*j:])
			sx0 += r[0]
			sx1 += r[1]
			sx2 += r[2]
			sx3 += r[3]
			rs := r[0] + r[1] + r[2] + r[3]
			sy[j] += rs
			zs += rs
		}
		sz[k] = zs
	}
	sum := sz[0] + sz[1] + sz[2] + sz[3]
	// Σ (i/3 − ½)² over i = 0 … 3 is 5/9; each sum runs over 16 values.
	const f = 9.0 / 80
	alpha = sum / 64
	bx := (-0.5*sx0 - sx1/6 + sx2/6 + 0.5*sx3) * f
	by := (-0.5*sy[0] - sy[1]/6 + sy[2]/6 + 0.5*sy[3]) * f
	bz := (-0.5*sz[0] - sz[1]/6 + sz[2]/6 + 0.5*sz[3]) * f
	beta = [3]float64{bx, by, bz}
	gx0, gx1 := -0.5*bx, -bx/6
	mn, mx := 0.0, 0.0
	for k := 0; k < 4; k++ {
		gz := bz * (float64(k)/3 - 0.5)
		for j := 0; j < 4; j++ {
			base := alpha + by*(float64(j)/3-0.5) + gz
			r := (*[4]float64)(b[16*k+4*j:])
			mn, mx = minMax4(mn, mx, r[0]-base-gx0, r[1]-base-gx1, r[2]-base+gx1, r[3]-base+gx0)
		}
	}
	if -mn > mx {
		mx = -mn
	}
	return alpha, beta, mx
}

// hessianRange bounds the dose Hessian over the patch: the Bernstein
// coefficients of ∂²E/∂t_a² are 6(b_{i+2} − 2b_{i+1} + b_i) and of
// ∂²E/∂t_a∂t_b are 9 Δ_a Δ_b b, and each derivative lies between the
// smallest and largest of its coefficients. h is the box size (DTA units);
// entries are in Gy per DTA unit², ordered xx, yy, zz, xy, xz, yz; an axis
// with h = 0 has no extent and its entries are 0.
func (b *bnet) hessianRange(h [3]float64) (lo, hi [6]float64) {
	// Second differences along x (i = 0, 1), y and z, and mixed first
	// differences, over the whole net in one pass per entry.
	if h[0] > 0 {
		mn, mx := b.diff2(1, 4, 16)
		sc := 6 / (h[0] * h[0])
		lo[0], hi[0] = mn*sc, mx*sc
	}
	if h[1] > 0 {
		mn, mx := b.diff2(4, 1, 16)
		sc := 6 / (h[1] * h[1])
		lo[1], hi[1] = mn*sc, mx*sc
	}
	if h[2] > 0 {
		mn, mx := b.diff2(16, 1, 4)
		sc := 6 / (h[2] * h[2])
		lo[2], hi[2] = mn*sc, mx*sc
	}
	if h[0] > 0 && h[1] > 0 {
		mn, mx := b.mixed(1, 4, 16)
		f := 9 / (h[0] * h[1])
		lo[3], hi[3] = mn*f, mx*f
	}
	if h[0] > 0 && h[2] > 0 {
		mn, mx := b.mixed(1, 16, 4)
		f := 9 / (h[0] * h[2])
		lo[4], hi[4] = mn*f, mx*f
	}
	if h[1] > 0 && h[2] > 0 {
		mn, mx := b.mixed(4, 16, 1)
		f := 9 / (h[1] * h[2])
		lo[5], hi[5] = mn*f, mx*f
	}
	return lo, hi
}

// diff2 returns the range of the second differences b_{i+2} − 2b_{i+1} +
// b_i along the axis of stride s (o1, o2: the strides of the others).
func (b *bnet) diff2(s, o1, o2 int) (mn, mx float64) {
	mn, mx = math.Inf(1), math.Inf(-1)
	for u := 0; u < 4; u++ {
		for v := 0; v < 4; v++ {
			i := u*o1 + v*o2
			b0, b1, b2, b3 := b[i], b[i+s], b[i+2*s], b[i+3*s]
			d0 := b2 - 2*b1 + b0
			d1 := b3 - 2*b2 + b1
			if d0 < mn {
				mn = d0
			}
			if d0 > mx {
				mx = d0
			}
			if d1 < mn {
				mn = d1
			}
			if d1 > mx {
				mx = d1
			}
		}
	}
	return mn, mx
}

// mixed returns the range of the mixed differences Δ_a Δ_c b (strides sa,
// sc) over the net (so: the stride of the third axis).
func (b *bnet) mixed(sa, sc, so int) (mn, mx float64) {
	mn, mx = math.Inf(1), math.Inf(-1)
	for w := 0; w < 4; w++ {
		for j := 0; j < 3; j++ {
			o := w*so + j*sc
			// Along a: differences of the two rows j and j+1.
			r0, r1, r2, r3 := b[o+sc]-b[o], b[o+sa+sc]-b[o+sa], b[o+2*sa+sc]-b[o+2*sa], b[o+3*sa+sc]-b[o+3*sa]
			d0, d1, d2 := r1-r0, r2-r1, r3-r2
			if d0 < mn {
				mn = d0
			}
			if d0 > mx {
				mx = d0
			}
			if d1 < mn {
				mn = d1
			}
			if d1 > mx {
				mx = d1
			}
			if d2 < mn {
				mn = d2
			}
			if d2 > mx {
				mx = d2
			}
		}
	}
	return mn, mx
}

// bern returns the cubic Bernstein polynomials and their first and second
// derivatives at t.
func bern(t float64) (b0, b1, b2 [4]float64) {
	u := 1 - t
	b0 = [4]float64{u * u * u, 3 * t * u * u, 3 * t * t * u, t * t * t}
	b1 = [4]float64{-3 * u * u, 3 * u * (1 - 3*t), 3 * t * (2 - 3*t), 3 * t * t}
	b2 = [4]float64{6 * u, 18*t - 12, 6 - 18*t, 6 * t}
	return b0, b1, b2
}

// weights returns the weights of the padded coefficients c … c+3 of cell c
// in the value and in the first and second derivative (per DTA unit) at
// position t of the cell.
func (ax *axisSpline) weights(c int, t float64) (w0, w1, w2 [4]float64) {
	if ax.kind == axisConst {
		return [4]float64{0, 1, 0, 0}, w1, w2
	}
	b0, b1, b2 := bern(t)
	m := &ax.mat[c]
	ih := 1 / ax.h[c]
	for r := 0; r < 4; r++ {
		var v0, v1, v2 float64
		for k := 0; k < 4; k++ {
			v0 += b0[k] * m[k][r]
			v1 += b1[k] * m[k][r]
			v2 += b2[k] * m[k][r]
		}
		w0[r], w1[r], w2[r] = v0, v1*ih, v2*ih*ih
	}
	return w0, w1, w2
}

// valueWeights is weights for the value alone.
func (ax *axisSpline) valueWeights(c int, t float64) (w0 [4]float64) {
	if ax.kind == axisConst {
		return [4]float64{0, 1, 0, 0}
	}
	u := 1 - t
	b := [4]float64{u * u * u, 3 * t * u * u, 3 * t * t * u, t * t * t}
	m := &ax.mat[c]
	for r := 0; r < 4; r++ {
		w0[r] = b[0]*m[0][r] + b[1]*m[1][r] + b[2]*m[2][r] + b[3]*m[3][r]
	}
	return w0
}

// evalOut is the interpolant and its derivatives at a point (DTA units).
type evalOut struct {
	v float64
	g [3]float64
	h [6]float64 // xx, yy, zz, xy, xz, yz
}

// eval computes the interpolant, its gradient and Hessian at position t of
// cell c.
func (s *spline) eval(c [3]int, t [3]float64, out *evalOut) {
	x0, x1, x2 := s.ax[0].weights(c[0], t[0])
	y0, y1, y2 := s.ax[1].weights(c[1], t[1])
	z0, z1, z2 := s.ax[2].weights(c[2], t[2])
	base := c[0]*s.cs[0] + c[1]*s.cs[1] + c[2]*s.cs[2]
	// Y[k][d] for the six (x, y) derivative orders d: 00 10 01 20 02 11.
	var y [4][6]float64
	for k := 0; k < 4; k++ {
		for j := 0; j < 4; j++ {
			row := base + j*s.cs[1] + k*s.cs[2]
			v0, v1, v2, v3 := float64(s.coef[row]), float64(s.coef[row+1]), float64(s.coef[row+2]), float64(s.coef[row+3])
			a0 := x0[0]*v0 + x0[1]*v1 + x0[2]*v2 + x0[3]*v3
			a1 := x1[0]*v0 + x1[1]*v1 + x1[2]*v2 + x1[3]*v3
			a2 := x2[0]*v0 + x2[1]*v1 + x2[2]*v2 + x2[3]*v3
			yk := &y[k]
			yk[0] += y0[j] * a0
			yk[1] += y0[j] * a1
			yk[2] += y1[j] * a0
			yk[3] += y0[j] * a2
			yk[4] += y2[j] * a0
			yk[5] += y1[j] * a1
		}
	}
	*out = evalOut{}
	for k := 0; k < 4; k++ {
		yk := &y[k]
		out.v += z0[k] * yk[0]
		out.g[0] += z0[k] * yk[1]
		out.g[1] += z0[k] * yk[2]
		out.g[2] += z1[k] * yk[0]
		out.h[0] += z0[k] * yk[3]
		out.h[1] += z0[k] * yk[4]
		out.h[2] += z2[k] * yk[0]
		out.h[3] += z0[k] * yk[5]
		out.h[4] += z1[k] * yk[1]
		out.h[5] += z1[k] * yk[2]
	}
}

// value computes the interpolant alone at position t of cell c.
func (s *spline) value(c [3]int, t [3]float64) float64 {
	x0 := s.ax[0].valueWeights(c[0], t[0])
	y0 := s.ax[1].valueWeights(c[1], t[1])
	z0 := s.ax[2].valueWeights(c[2], t[2])
	base := c[0]*s.cs[0] + c[1]*s.cs[1] + c[2]*s.cs[2]
	v := 0.0
	for k := 0; k < 4; k++ {
		yk := 0.0
		for j := 0; j < 4; j++ {
			row := base + j*s.cs[1] + k*s.cs[2]
			yk += y0[j] * (x0[0]*float64(s.coef[row]) + x0[1]*float64(s.coef[row+1]) + x0[2]*float64(s.coef[row+2]) + x0[3]*float64(s.coef[row+3]))
		}
		v += z0[k] * yk
	}
	return v
}
