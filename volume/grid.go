package volume

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
)

// InsideTolerance is the distance (mm) by which a point may lie beyond the
// first or last voxel centre of an axis and still count as inside the grid.
// It absorbs floating-point rounding of coordinates computed elsewhere.
const InsideTolerance = 1e-6

// orientationTolerance bounds how far a direction cosine may stray from 0 or
// ±1 and still count as axis-aligned. DICOM writers print cosines with a few
// decimals; 1e-4 accepts "1.0000" and "-0.99999" but refuses any real tilt
// (1e-4 is a tilt of 0.006°).
const orientationTolerance = 1e-4

// Axis says which patient axis an index axis runs along, and in which sense.
type Axis struct {
	// Patient is the patient axis: 0 = x, 1 = y, 2 = z.
	Patient int
	// Sign is +1 when the index axis runs along the positive patient axis and
	// -1 when it runs against it.
	Sign float64
}

// Grid is a 3D grid of float32 samples (dose in Gy, a gamma value, ...)
// placed in patient coordinates. See the package documentation for the
// geometry. The zero Grid is empty and not usable; build grids with [New] or
// [NewUniform].
type Grid struct {
	dims    [3]int
	origin  [3]float64
	axes    [3]Axis
	offsets [3][]float64
	spacing [3]float64 // uniform spacing of each axis, 0 when not uniform
	// Data holds the samples, index i + nx*(j + ny*k); see [Grid.Index].
	Data []float32
}

// New returns a zero-filled grid with the given number of samples per index
// axis (i, j, k), origin (patient position of voxel (0,0,0), mm), direction
// cosines of each index axis (direction[a] is the unit vector of axis a in
// patient coordinates) and the offsets (mm) of the samples along each axis
// from the origin. offsets[a] must have dims[a] elements, start at 0 and be
// strictly monotonic; decreasing offsets flip the axis (see the package
// documentation). New refuses oblique or non-orthogonal directions.
func New(dims [3]int, origin [3]float64, direction [3][3]float64, offsets [3][]float64) (*Grid, error) {
	return newGrid(dims, origin, direction, offsets, true)
}

// newGrid is [New], allocating the samples only when withData is set.
func newGrid(dims [3]int, origin [3]float64, direction [3][3]float64, offsets [3][]float64, withData bool) (*Grid, error) {
	g := &Grid{dims: dims, origin: origin}
	n := 1
	for a := 0; a < 3; a++ {
		if dims[a] < 1 {
			return nil, fmt.Errorf("volume: axis %d has %d samples, want at least 1", a, dims[a])
		}
		if n > math.MaxInt32/dims[a] {
			return nil, fmt.Errorf("volume: %d×%d×%d samples is too many", dims[0], dims[1], dims[2])
		}
		n *= dims[a]
	}
	for a := 0; a < 3; a++ {
		if math.IsNaN(origin[a]) || math.IsInf(origin[a], 0) {
			return nil, fmt.Errorf("volume: origin %v is not finite", origin)
		}
	}
	seen := [3]bool{}
	for a := 0; a < 3; a++ {
		ax, err := axisOf(direction[a])
		if err != nil {
			return nil, fmt.Errorf("volume: index axis %d: %w", a, err)
		}
		if seen[ax.Patient] {
			return nil, fmt.Errorf("volume: direction cosines %v are not orthogonal: two index axes run along patient axis %c", direction, "xyz"[ax.Patient])
		}
		seen[ax.Patient] = true
		g.axes[a] = ax
	}
	for a := 0; a < 3; a++ {
		off, flip, err := normaliseOffsets(offsets[a], dims[a])
		if err != nil {
			return nil, fmt.Errorf("volume: index axis %d: %w", a, err)
		}
		if flip {
			g.axes[a].Sign = -g.axes[a].Sign
		}
		g.offsets[a] = off
		g.spacing[a] = uniformSpacing(off)
	}
	if withData {
		g.Data = make([]float32, n)
	}
	return g, nil
}

// NewUniform returns a zero-filled grid with uniform spacing (mm, positive)
// along each index axis. It is [New] with offsets 0, s, 2s, ...
func NewUniform(dims [3]int, origin, spacing [3]float64, direction [3][3]float64) (*Grid, error) {
	return newUniform(dims, origin, spacing, direction, true)
}

// newUniform is [NewUniform], allocating the samples only when withData is
// set.
func newUniform(dims [3]int, origin, spacing [3]float64, direction [3][3]float64, withData bool) (*Grid, error) {
	var offsets [3][]float64
	for a := 0; a < 3; a++ {
		if !(spacing[a] > 0) || math.IsInf(spacing[a], 0) {
			return nil, fmt.Errorf("volume: spacing %g mm along index axis %d, want a positive finite value", spacing[a], a)
		}
		if dims[a] < 1 {
			return nil, fmt.Errorf("volume: axis %d has %d samples, want at least 1", a, dims[a])
		}
		offsets[a] = make([]float64, dims[a])
		for i := range offsets[a] {
			offsets[a][i] = float64(i) * spacing[a]
		}
	}
	return newGrid(dims, origin, direction, offsets, withData)
}

// NewUniformGeometry is [NewUniform] without samples: its Data is nil. It
// places positions (Index, IJK, WorldOf, the rasterising of ROIs) where no
// value is held at them, such as a lattice of reference points, without
// allocating 4 bytes a position.
func NewUniformGeometry(dims [3]int, origin, spacing [3]float64, direction [3][3]float64) (*Grid, error) {
	return newUniform(dims, origin, spacing, direction, false)
}

// Identity is the direction cosine matrix of a grid whose i, j and k axes run
// along patient x, y and z (head-first supine in DICOM terms).
var Identity = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}

func axisOf(d [3]float64) (Axis, error) {
	best, count := -1, 0
	for p := 0; p < 3; p++ {
		v := d[p]
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Axis{}, fmt.Errorf("direction cosine %v is not finite", d)
		}
		switch {
		case math.Abs(math.Abs(v)-1) <= orientationTolerance:
			best = p
			count++
		case math.Abs(v) <= orientationTolerance:
		default:
			return Axis{}, fmt.Errorf("direction cosine %v is oblique: only axis-aligned grids (flipped axes allowed) are supported", d)
		}
	}
	if count != 1 {
		return Axis{}, fmt.Errorf("direction cosine %v is not a unit vector along one patient axis", d)
	}
	return Axis{Patient: best, Sign: math.Copysign(1, d[best])}, nil
}

// normaliseOffsets checks offsets and returns them increasing, with flip set
// when they had to be negated.
func normaliseOffsets(in []float64, n int) (out []float64, flip bool, err error) {
	if len(in) != n {
		return nil, false, fmt.Errorf("%d offsets for %d samples", len(in), n)
	}
	for i, v := range in {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, false, fmt.Errorf("offset %d is %g, want a finite value", i, v)
		}
	}
	if in[0] != 0 {
		return nil, false, fmt.Errorf("first offset is %g mm, want 0 (offsets are relative to the origin)", in[0])
	}
	out = append([]float64(nil), in...)
	if n > 1 && out[1] < 0 {
		flip = true
		for i := range out {
			out[i] = -out[i]
		}
	}
	for i := 1; i < n; i++ {
		if !(out[i] > out[i-1]) {
			return nil, false, fmt.Errorf("offsets not strictly monotonic at sample %d (%g then %g mm)", i, in[i-1], in[i])
		}
	}
	return out, flip, nil
}

// uniformSpacing returns the common spacing of increasing offsets, or 0 when
// the spacing varies by more than 1e-6 of itself. A single sample has spacing 0.
func uniformSpacing(off []float64) float64 {
	if len(off) < 2 {
		return 0
	}
	s := (off[len(off)-1] - off[0]) / float64(len(off)-1)
	for i := 1; i < len(off); i++ {
		if math.Abs((off[i]-off[i-1])-s) > 1e-6*s {
			return 0
		}
	}
	return s
}

// Dims returns the number of samples along i, j and k.
func (g *Grid) Dims() [3]int { return g.dims }

// Len returns the number of positions, dims[0]·dims[1]·dims[2] (the
// length of Data, unless the grid is a geometry without samples).
func (g *Grid) Len() int { return g.dims[0] * g.dims[1] * g.dims[2] }

// Origin returns the patient position (mm) of the centre of voxel (0,0,0).
func (g *Grid) Origin() [3]float64 { return g.origin }

// Axis returns the patient axis and sense of index axis a (0, 1 or 2).
func (g *Grid) Axis(a int) Axis { return g.axes[a] }

// AxisAlong returns the index axis (0, 1 or 2) that runs along patient
// axis p (0 = x, 1 = y, 2 = z), in either sense.
func (g *Grid) AxisAlong(p int) int {
	for a := 0; a < 3; a++ {
		if g.axes[a].Patient == p {
			return a
		}
	}
	panic(fmt.Sprintf("volume: no index axis along patient axis %d", p))
}

// Direction returns the direction cosines of the three index axes.
func (g *Grid) Direction() [3][3]float64 {
	var d [3][3]float64
	for a := 0; a < 3; a++ {
		d[a][g.axes[a].Patient] = g.axes[a].Sign
	}
	return d
}

// Offsets returns the increasing positions (mm from the origin along the
// axis direction) of the samples of index axis a. The slice is the grid's
// own: do not modify it.
func (g *Grid) Offsets(a int) []float64 { return g.offsets[a] }

// Spacing returns the spacing (mm) of index axis a and whether it is
// uniform. For a non-uniform axis it returns the mean spacing and false; for
// a single-sample axis, 0 and true.
func (g *Grid) Spacing(a int) (float64, bool) {
	off := g.offsets[a]
	if len(off) < 2 {
		return 0, true
	}
	if g.spacing[a] > 0 {
		return g.spacing[a], true
	}
	return (off[len(off)-1] - off[0]) / float64(len(off)-1), false
}

// Index returns the position in Data of voxel (i, j, k).
func (g *Grid) Index(i, j, k int) int { return i + g.dims[0]*(j+g.dims[1]*k) }

// IJK returns the voxel indices of position n in Data.
func (g *Grid) IJK(n int) (i, j, k int) {
	i = n % g.dims[0]
	n /= g.dims[0]
	return i, n % g.dims[1], n / g.dims[1]
}

// At returns the sample of voxel (i, j, k).
func (g *Grid) At(i, j, k int) float32 { return g.Data[g.Index(i, j, k)] }

// Set sets the sample of voxel (i, j, k).
func (g *Grid) Set(i, j, k int, v float32) { g.Data[g.Index(i, j, k)] = v }

// LocalOf returns the local-frame position (mm along i, j, k from the
// origin) of voxel (i, j, k).
func (g *Grid) LocalOf(i, j, k int) [3]float64 {
	return [3]float64{g.offsets[0][i], g.offsets[1][j], g.offsets[2][k]}
}

// WorldOf returns the patient position (mm) of the centre of voxel (i, j, k).
func (g *Grid) WorldOf(i, j, k int) [3]float64 {
	return g.LocalToWorld(g.LocalOf(i, j, k))
}

// LocalToWorld maps a local-frame position to patient coordinates.
func (g *Grid) LocalToWorld(u [3]float64) [3]float64 {
	p := g.origin
	for a := 0; a < 3; a++ {
		p[g.axes[a].Patient] += g.axes[a].Sign * u[a]
	}
	return p
}

// WorldToLocal maps a patient position to the grid's local frame.
func (g *Grid) WorldToLocal(p [3]float64) [3]float64 {
	var u [3]float64
	for a := 0; a < 3; a++ {
		ax := g.axes[a]
		u[a] = ax.Sign * (p[ax.Patient] - g.origin[ax.Patient])
	}
	return u
}

// Cell locates local coordinate u along index axis a. It returns the index c
// of the lower sample of the cell holding u and the fraction t in [0, 1]
// between samples c and c+1, and ok = false when u lies outside the axis
// (beyond [InsideTolerance]). On a single-sample axis c = 0 and t = 0.
func (g *Grid) Cell(a int, u float64) (c int, t float64, ok bool) {
	off := g.offsets[a]
	n := len(off)
	last := off[n-1]
	if u < -InsideTolerance || u > last+InsideTolerance {
		return 0, 0, false
	}
	if n == 1 {
		return 0, 0, true
	}
	if u <= 0 {
		return 0, 0, true
	}
	if u >= last {
		return n - 2, 1, true
	}
	if s := g.spacing[a]; s > 0 {
		f := u / s
		c = int(f)
		if c > n-2 {
			c = n - 2
		}
		t = f - float64(c)
		if t > 1 {
			t = 1
		}
		return c, t, true
	}
	// First offset greater than u, minus one.
	c = sort.SearchFloat64s(off, u)
	if c >= n || off[c] > u {
		c--
	}
	if c > n-2 {
		c = n - 2
	}
	return c, (u - off[c]) / (off[c+1] - off[c]), true
}

// SampleLocal interpolates the grid trilinearly at local-frame position u.
// ok is false when u is outside the grid.
func (g *Grid) SampleLocal(u [3]float64) (v float64, ok bool) {
	var c [3]int
	var t [3]float64
	for a := 0; a < 3; a++ {
		c[a], t[a], ok = g.Cell(a, u[a])
		if !ok {
			return 0, false
		}
	}
	return g.trilinear(c, t), true
}

// Sample interpolates the grid trilinearly at patient position p. ok is
// false when p is outside the grid.
func (g *Grid) Sample(p [3]float64) (v float64, ok bool) {
	return g.SampleLocal(g.WorldToLocal(p))
}

// trilinear interpolates in the cell with lower corner c at fractions t.
// Along an axis with one sample the cell is degenerate and t must be 0.
func (g *Grid) trilinear(c [3]int, t [3]float64) float64 {
	nx, ny := g.dims[0], g.dims[1]
	sx, sy, sz := 1, nx, nx*ny
	if g.dims[0] == 1 {
		sx = 0
	}
	if g.dims[1] == 1 {
		sy = 0
	}
	if g.dims[2] == 1 {
		sz = 0
	}
	d := g.Data
	n := c[0] + nx*(c[1]+ny*c[2])
	tx, ty, tz := t[0], t[1], t[2]
	c00 := float64(d[n])*(1-tx) + float64(d[n+sx])*tx
	c10 := float64(d[n+sy])*(1-tx) + float64(d[n+sy+sx])*tx
	c01 := float64(d[n+sz])*(1-tx) + float64(d[n+sz+sx])*tx
	c11 := float64(d[n+sz+sy])*(1-tx) + float64(d[n+sz+sy+sx])*tx
	c0 := c00*(1-ty) + c10*ty
	c1 := c01*(1-ty) + c11*ty
	return c0*(1-tz) + c1*tz
}

// Bounds returns the smallest and largest patient coordinates of the voxel
// centres, per patient axis.
func (g *Grid) Bounds() (lo, hi [3]float64) {
	a0 := g.WorldOf(0, 0, 0)
	a1 := g.WorldOf(g.dims[0]-1, g.dims[1]-1, g.dims[2]-1)
	for p := 0; p < 3; p++ {
		lo[p], hi[p] = math.Min(a0[p], a1[p]), math.Max(a0[p], a1[p])
	}
	return lo, hi
}

// Max returns the largest sample and its position in Data, ignoring NaN. It
// returns NaN and -1 when every sample is NaN.
func (g *Grid) Max() (float32, int) {
	best, at := float32(math.NaN()), -1
	for n, v := range g.Data {
		if v == v && (at < 0 || v > best) {
			best, at = v, n
		}
	}
	return best, at
}

// SameGeometry reports whether g and h have the same dimensions, origin,
// axes and offsets (to within [InsideTolerance] mm).
func (g *Grid) SameGeometry(h *Grid) bool {
	if g.dims != h.dims || g.axes != h.axes {
		return false
	}
	for a := 0; a < 3; a++ {
		if math.Abs(g.origin[a]-h.origin[a]) > InsideTolerance {
			return false
		}
		for i := range g.offsets[a] {
			if math.Abs(g.offsets[a][i]-h.offsets[a][i]) > InsideTolerance {
				return false
			}
		}
	}
	return true
}

// EmptyLike returns a zero-filled grid with the geometry of g.
func (g *Grid) EmptyLike() *Grid {
	h := *g
	h.Data = make([]float32, len(g.Data))
	return &h
}

// Clone returns a deep copy of g's samples sharing its (immutable) geometry.
func (g *Grid) Clone() *Grid {
	h := g.EmptyLike()
	copy(h.Data, g.Data)
	return h
}

// ErrNoOverlap is returned by [Grid.ResampleOnto] when no voxel of the
// target lies inside the source grid.
var ErrNoOverlap = errors.New("volume: grids do not overlap")

// ResampleOnto returns a grid with the geometry of target whose samples are
// g interpolated trilinearly at target's voxel centres; voxels outside g get
// fill. It returns ErrNoOverlap (with the grid, all fill) when no voxel of
// target lies inside g. Planes of target are done in parallel on up to
// GOMAXPROCS goroutines; each voxel's value does not depend on them.
func (g *Grid) ResampleOnto(target *Grid, fill float32) (*Grid, error) {
	out := target.EmptyLike()
	nk := target.dims[2]
	plane := target.dims[0] * target.dims[1]
	workers := min(runtime.GOMAXPROCS(0), nk)
	counts := make([]int, workers)
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := w; k < nk; k += workers {
				n := k * plane
				for j := 0; j < target.dims[1]; j++ {
					for i := 0; i < target.dims[0]; i++ {
						u := g.WorldToLocal(target.WorldOf(i, j, k))
						if v, ok := g.SampleLocal(u); ok {
							out.Data[n] = float32(v)
							counts[w]++
						} else {
							out.Data[n] = fill
						}
						n++
					}
				}
			}
		}()
	}
	wg.Wait()
	inside := 0
	for _, c := range counts {
		inside += c
	}
	if inside == 0 {
		return out, ErrNoOverlap
	}
	return out, nil
}
