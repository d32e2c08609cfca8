package report

import (
	"fmt"
	"math"
	"sort"

	"voxgamma/volume"
)

// view is one of the three orthogonal slice orientations, named in patient
// terms.
type view int

const (
	axial    view = iota // plane of constant z (transverse)
	coronal              // plane of constant y
	sagittal             // plane of constant x
)

var views = [3]view{axial, coronal, sagittal}

func (v view) String() string {
	switch v {
	case axial:
		return "axial"
	case coronal:
		return "coronal"
	case sagittal:
		return "sagittal"
	}
	return fmt.Sprintf("view(%d)", int(v))
}

// fixed returns the patient axis (0 = x, 1 = y, 2 = z) the view's plane is
// perpendicular to.
func (v view) fixed() int {
	switch v {
	case axial:
		return 2
	case coronal:
		return 1
	}
	return 0
}

// inPlane returns the patient axes shown across (left to right) and down
// (top to bottom) the display, and whether the patient coordinate increases
// downwards (axial: anterior, the smaller y, at the top) or upwards
// (coronal and sagittal: superior, the larger z, at the top). Across, the
// coordinate always increases to the right: x towards the patient's left
// (patient right on the image's left), y towards posterior (anterior on the
// left in the sagittal view).
func (v view) inPlane() (across, down int, downIncreasing bool) {
	switch v {
	case axial:
		return 0, 1, true
	case coronal:
		return 0, 2, false
	}
	return 1, 2, false
}

// edgeLetters names the patient directions at the left, right, top and
// bottom edges of the displayed slice.
func (v view) edgeLetters() (left, right, top, bottom string) {
	switch v {
	case axial:
		return "R", "L", "A", "P"
	case coronal:
		return "R", "L", "S", "I"
	}
	return "A", "P", "S", "I"
}

// slice2D is one plane of a grid, arranged as it is displayed: row 0 at
// the top, column 0 at the left, in patient orientation (see [view]).
type slice2D struct {
	View view
	// W and H are the number of columns and rows.
	W, H int
	// Voxel holds, row-major, the position in the grid's Data of the voxel
	// shown at each pixel.
	Voxel []int
	// X holds the patient coordinate (mm) along the across axis of each
	// column centre (increasing); Y that along the down axis of each row
	// centre, top row first (increasing for axial, decreasing otherwise).
	X, Y []float64
	// XEdges (W+1 values) and YEdges (H+1 values) are the pixel boundaries
	// in the same coordinates: half-way between centres, and half a
	// spacing beyond the first and last centre.
	XEdges, YEdges []float64
	// Plane is the patient coordinate (mm) of the plane along the fixed
	// axis; Index is the voxel index of the plane along the grid's index
	// axis that runs along the fixed patient axis.
	Plane float64
	Index int
}

// indexAxisAlong returns the grid's index axis that runs along patient
// axis p.
func indexAxisAlong(g *volume.Grid, p int) int {
	for a := 0; a < 3; a++ {
		if g.Axis(a).Patient == p {
			return a
		}
	}
	panic("report: grid has no index axis along a patient axis") // volume.New guarantees one
}

// nearestIndex returns the index of the offset of index axis a nearest to
// local coordinate u, clamped to the grid.
func nearestIndex(g *volume.Grid, a int, u float64) int {
	off := g.Offsets(a)
	i := sort.SearchFloat64s(off, u)
	switch {
	case i <= 0:
		return 0
	case i >= len(off):
		return len(off) - 1
	case u-off[i-1] <= off[i]-u:
		return i - 1
	}
	return i
}

// axisOrder returns, for the samples of index axis a, the patient
// coordinates in display order and the index of the sample at each display
// position. increasing says whether display order is increasing patient
// coordinate.
func axisOrder(g *volume.Grid, a int, increasing bool) (coords []float64, index []int) {
	ax := g.Axis(a)
	off := g.Offsets(a)
	n := len(off)
	coords = make([]float64, n)
	index = make([]int, n)
	origin := g.Origin()[ax.Patient]
	// Patient coordinate of sample i is origin + Sign·off[i]: increasing in
	// i when Sign > 0.
	forward := (ax.Sign > 0) == increasing
	for d := 0; d < n; d++ {
		i := d
		if !forward {
			i = n - 1 - d
		}
		index[d] = i
		coords[d] = origin + ax.Sign*off[i]
	}
	return coords, index
}

// edgesOf returns the pixel boundaries of centres given in display order
// (monotonic): half-way between centres, half a spacing beyond the ends. A
// single centre gets a pixel 1 mm wide, oriented like the axis would be.
func edgesOf(c []float64, increasing bool) []float64 {
	n := len(c)
	e := make([]float64, n+1)
	if n == 1 {
		h := 0.5
		if !increasing {
			h = -0.5
		}
		e[0], e[1] = c[0]-h, c[0]+h
		return e
	}
	for i := 1; i < n; i++ {
		e[i] = (c[i-1] + c[i]) / 2
	}
	e[0] = c[0] - (c[1]-c[0])/2
	e[n] = c[n-1] + (c[n-1]-c[n-2])/2
	return e
}

// extractSlice returns the plane of g of the given view nearest to patient
// point p (clamped to the grid), in patient orientation.
func extractSlice(g *volume.Grid, v view, p [3]float64) *slice2D {
	across, down, downInc := v.inPlane()
	af := indexAxisAlong(g, v.fixed())
	ah := indexAxisAlong(g, across)
	av := indexAxisAlong(g, down)
	u := g.WorldToLocal(p)
	k := nearestIndex(g, af, u[af])

	s := &slice2D{View: v, Index: k}
	var hi, vi []int
	s.X, hi = axisOrder(g, ah, true)
	s.Y, vi = axisOrder(g, av, downInc)
	s.W, s.H = len(s.X), len(s.Y)
	s.XEdges = edgesOf(s.X, true)
	s.YEdges = edgesOf(s.Y, downInc)
	fax := g.Axis(af)
	s.Plane = g.Origin()[fax.Patient] + fax.Sign*g.Offsets(af)[k]

	s.Voxel = make([]int, s.W*s.H)
	var ijk [3]int
	ijk[af] = k
	for r := 0; r < s.H; r++ {
		ijk[av] = vi[r]
		row := s.Voxel[r*s.W : (r+1)*s.W]
		for c := 0; c < s.W; c++ {
			ijk[ah] = hi[c]
			row[c] = g.Index(ijk[0], ijk[1], ijk[2])
		}
	}
	return s
}

// values returns the samples of g at the slice's pixels (g must have the
// geometry the slice was extracted from).
func (s *slice2D) values(g *volume.Grid) []float32 {
	out := make([]float32, len(s.Voxel))
	for n, at := range s.Voxel {
		out[n] = g.Data[at]
	}
	return out
}

// maskValues returns the mask's flags at the slice's pixels.
func (s *slice2D) maskValues(m *volume.Mask) []bool {
	out := make([]bool, len(s.Voxel))
	for n, at := range s.Voxel {
		out[n] = m.Bits[at]
	}
	return out
}

// rasterAxis maps raster pixels to slice pixels along one display axis
// whose pixel boundaries are edges (monotonic). A uniform axis keeps one
// raster pixel per slice pixel; a non-uniform one (irregular frame offsets)
// is resampled to pixels as wide as its narrowest, at most four times as
// many, so that the raster keeps the mm geometry.
func rasterAxis(edges []float64) []int {
	n := len(edges) - 1
	widths := make([]float64, n)
	minW, maxW := math.Inf(1), 0.0
	for i := 0; i < n; i++ {
		widths[i] = math.Abs(edges[i+1] - edges[i])
		minW = math.Min(minW, widths[i])
		maxW = math.Max(maxW, widths[i])
	}
	if maxW-minW <= 1e-6*maxW {
		m := make([]int, n)
		for i := range m {
			m[i] = i
		}
		return m
	}
	extent := math.Abs(edges[n] - edges[0])
	count := int(math.Ceil(extent/minW - 1e-9))
	if count > 4*n {
		count = 4 * n
	}
	m := make([]int, count)
	dir := 1.0
	if edges[n] < edges[0] {
		dir = -1
	}
	j := 0
	for p := 0; p < count; p++ {
		centre := edges[0] + dir*(float64(p)+0.5)*extent/float64(count)
		for j < n-1 && dir*(centre-edges[j+1]) > 0 {
			j++
		}
		m[p] = j
	}
	return m
}

// crop returns the part of the slice whose pixel centres lie within half
// of size (mm) of the point (across, down) on each axis, at least one
// pixel each way; the slice itself when the window covers it.
func (s *slice2D) crop(across, down, size float64) *slice2D {
	pick := func(c []float64, at float64) (lo, hi int) {
		lo, hi = -1, -1
		for i, x := range c {
			if math.Abs(x-at) <= size/2 {
				if lo < 0 {
					lo = i
				}
				hi = i + 1
			}
		}
		if lo < 0 { // the point is off the slice: the nearest pixel
			best := 0
			for i, x := range c {
				if math.Abs(x-at) < math.Abs(c[best]-at) {
					best = i
				}
			}
			lo, hi = best, best+1
		}
		return lo, hi
	}
	c0, c1 := pick(s.X, across)
	r0, r1 := pick(s.Y, down)
	if c0 == 0 && r0 == 0 && c1 == s.W && r1 == s.H {
		return s
	}
	out := &slice2D{View: s.View, W: c1 - c0, H: r1 - r0, Plane: s.Plane, Index: s.Index,
		X: s.X[c0:c1], Y: s.Y[r0:r1], XEdges: s.XEdges[c0 : c1+1], YEdges: s.YEdges[r0 : r1+1]}
	out.Voxel = make([]int, 0, out.W*out.H)
	for r := r0; r < r1; r++ {
		out.Voxel = append(out.Voxel, s.Voxel[r*s.W+c0:r*s.W+c1]...)
	}
	return out
}
