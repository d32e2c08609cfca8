package gamma

import (
	"fmt"
	"math"
	"sort"

	"voxgamma/volume"
)

// field is the evaluated grid in the engine's working units and frame:
// the canonical frame, whose axes run along increasing patient x, y and z
// from the grid's corner of lowest coordinates, positions in DTA units (mm
// / Δd), doses in Gy. Laying the grid out this way first makes every
// interpolant a function of patient position alone: a flipped or
// transposed grid gives the same field, cell for cell. It is read-only
// during a comparison and shared by all workers.
type field struct {
	n      [3]int
	off    [3][]float64 // sample positions in DTA units, increasing, off[a][0] = 0
	step   [3]float64   // uniform step in DTA units, 0 when not uniform or single-sample
	stride [3]int       // index stride of each axis; 0 on a single-sample axis
	invH   [3][]float64 // 1 / cell size along each axis, per cell (DTA units)
	data   []float32    // samples in canonical order

	// origin is the patient position (mm) of canonical sample (0, 0, 0);
	// offMM the sample positions in mm from it.
	origin [3]float64
	offMM  [3][]float64

	interp Interpolation
	// sp is the tensor-product interpolant (cubic B-spline or trilinear);
	// nil for the piecewise-linear simplex interpolant.
	sp *spline
}

// newField lays g out in the canonical frame and builds the interpolant.
// g's samples must be finite numbers (compare checks).
func newField(g *volume.Grid, dta float64, interp Interpolation, workers int) (*field, error) {
	if interp < CubicBSpline || interp > LinearSimplex {
		return nil, fmt.Errorf("unknown interpolation %v", interp)
	}
	lay := canonicalLayout(g)
	f := &field{n: lay.n, data: lay.data, origin: lay.origin, offMM: lay.off, interp: interp}
	strides := [3]int{1, f.n[0], f.n[0] * f.n[1]}
	for a := 0; a < 3; a++ {
		src := lay.off[a]
		f.off[a] = make([]float64, len(src))
		for i, v := range src {
			f.off[a][i] = v / dta
		}
		if s, uniform := g.Spacing(g.AxisAlong(a)); uniform && s > 0 {
			f.step[a] = s / dta
		}
		if f.n[a] > 1 {
			f.stride[a] = strides[a]
			f.invH[a] = make([]float64, f.n[a]-1)
			for c := range f.invH[a] {
				f.invH[a][c] = 1 / (f.off[a][c+1] - f.off[a][c])
			}
		}
	}
	if interp != LinearSimplex {
		f.sp = newSpline(f, interp, workers)
	}
	return f, nil
}

// releaseSamples lets go of the field's samples once its tensor-product
// interpolant is built (the spline's coefficients hold all that the fast
// search reads): a caller that does not keep the evaluated grid then frees
// its memory, 4 bytes a voxel, for the rest of the search. The linear-simplex
// interpolant and the exhaustive method read the samples themselves. It
// reports whether it let go of them (a tensor-product interpolant only).
func (f *field) releaseSamples() bool {
	if f.sp == nil {
		return false
	}
	f.data = nil
	return true
}

// nodeDose returns the evaluated dose at node ijk (index n): its sample or,
// once the samples are released, the interpolant's value there (the sample
// to the rounding of the spline's float32 coefficients).
func (f *field) nodeDose(n int, ijk [3]int) float64 {
	if f.data != nil {
		return float64(f.data[n])
	}
	var c [3]int
	var t [3]float64
	for a := 0; a < 3; a++ {
		c[a] = min(ijk[a], f.sp.ax[a].nc-1)
		t[a] = float64(ijk[a] - c[a])
	}
	return f.sp.value(c, t)
}

// firstNonFinite returns the index of the first NaN or infinite sample.
func firstNonFinite(d []float32) (int, bool) {
	for n, v := range d {
		if v-v != 0 { // NaN or ±Inf
			return n, true
		}
	}
	return 0, false
}

// layout is a grid laid out along increasing patient x, y and z.
type layout struct {
	n      [3]int
	origin [3]float64   // patient position (mm) of sample (0, 0, 0)
	off    [3][]float64 // increasing offsets (mm) from origin
	data   []float32    // samples, index i + n0·(j + n1·k)
}

// canonicalLayout returns g's samples along increasing patient x, y, z.
// The grid's own slices are reused when it is already laid out so
// (head-first supine); otherwise the samples are copied.
func canonicalLayout(g *volume.Grid) layout {
	var lay layout
	dims := g.Dims()
	gs := [3]int{1, dims[0], dims[0] * dims[1]}
	var srcStride [3]int
	start := 0
	same := true
	for p := 0; p < 3; p++ {
		a := g.AxisAlong(p)
		ax := g.Axis(a)
		n := dims[a]
		lay.n[p] = n
		off := g.Offsets(a)
		if a != p || ax.Sign < 0 {
			same = false
		}
		if ax.Sign > 0 {
			lay.off[p] = off
			lay.origin[p] = g.Origin()[p]
			srcStride[p] = gs[a]
		} else {
			last := off[n-1]
			lay.origin[p] = g.Origin()[p] - last
			lay.off[p] = make([]float64, n)
			for j := range lay.off[p] {
				lay.off[p][j] = last - off[n-1-j]
			}
			lay.off[p][0] = 0
			srcStride[p] = -gs[a]
			start += (n - 1) * gs[a]
		}
	}
	if same {
		lay.data = g.Data
		return lay
	}
	lay.data = make([]float32, len(g.Data))
	d := 0
	for k := 0; k < lay.n[2]; k++ {
		for j := 0; j < lay.n[1]; j++ {
			s := start + j*srcStride[1] + k*srcStride[2]
			for i := 0; i < lay.n[0]; i++ {
				lay.data[d] = g.Data[s]
				d++
				s += srcStride[0]
			}
		}
	}
	return lay
}

// local returns the canonical position (DTA units) of patient position p
// (mm).
func (f *field) local(p [3]float64, dta float64) [3]float64 {
	return [3]float64{(p[0] - f.origin[0]) / dta, (p[1] - f.origin[1]) / dta, (p[2] - f.origin[2]) / dta}
}

// insideTol is the relative tolerance with which a point on the grid's
// outer faces counts as inside: it absorbs rounding in coordinate transforms.
const insideTol = 1e-9

// cell returns the lower sample index of the cell holding u along axis a,
// clamped to the grid; u must already be known to be inside or is clamped.
func (f *field) cell(a int, u float64) int {
	n := f.n[a]
	if n == 1 || !(u > 0) {
		return 0 // NaN too: never an index out of the grid
	}
	if s := f.step[a]; s > 0 {
		// Compared before the conversion: int of a value beyond the int
		// range (a search distance of 1e300 DTA) is undefined.
		if v := u / s; !(v < float64(n-2)) {
			return n - 2
		}
		return int(u / s)
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

// diagonal returns the length of the grid's diagonal in DTA units: no two
// points of the grid are farther apart.
func (f *field) diagonal() float64 {
	var d2 float64
	for a := 0; a < 3; a++ {
		l := f.off[a][f.n[a]-1] - f.off[a][0]
		d2 += l * l
	}
	return math.Sqrt(d2)
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

func clamp01(v float64) float64 {
	if v < 0 {
		return 0
	}
	if v > 1 {
		return 1
	}
	return v
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
// cell: the piecewise-linear interpolant never leaves the range of its
// corners.
func doseGap2(c *[8]float64, dr, w float64) float64 {
	// Straight-line code: branches on dose values mispredict.
	cmin := min(c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7])
	cmax := max(c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7])
	gap := w * max(cmin-dr, dr-cmax, 0)
	return gap * gap // (w·gap)², not w²·gap²: w² may overflow where the product does not
}

// cellMin returns min(best2, the minimum over cell (ci, cj, ck), whose
// corners are c and whose box lies ds2 (squared) from q, of
// |p − q|² + w²·(E(p) − dr)²).
func (f *field) cellMin(ci, cj, ck int, c *[8]float64, q [3]float64, dr, w, ds2, best2 float64) float64 {
	idx := [3]int{ci, cj, ck}
	var lo, h, inv [3]float64
	for a := 0; a < 3; a++ {
		lo[a] = f.off[a][idx[a]]
		if f.n[a] > 1 {
			h[a] = f.off[a][idx[a]+1] - lo[a]
			inv[a] = f.invH[a][idx[a]]
		}
	}
	return cellMinPL(c, lo, h, inv, q, dr, w, ds2, best2)
}
