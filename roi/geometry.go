package roi

import (
	"fmt"
	"math"
	"sort"

	"voxgamma/volume"
)

// axisInfo is one index axis of a grid seen in patient coordinates: voxel
// centres and extents, and the sample positions (voxel centres and
// sub-samples) sorted by increasing patient coordinate, each with its voxel
// index. Working in patient coordinates (not the grid's local frame) makes
// every inside/outside decision independent of the axis sense, so flipped
// grids give exactly the same voxels in space.
type axisInfo struct {
	patient int       // patient axis: 0 = x, 1 = y, 2 = z
	centre  []float64 // patient coordinate of each voxel centre, index order
	lo, hi  []float64 // patient extent of each voxel (lo < hi), index order
	width   []float64 // hi − lo
	extLo   float64   // patient extent of the whole axis
	extHi   float64
	subPos  []float64 // sub-sample positions, increasing
	subVox  []int32   // voxel index of each sub-sample
	cenPos  []float64 // voxel centres, increasing
	cenVox  []int32   // voxel index of each centre
}

// newAxisInfo describes index axis a of g with sub sub-samples per voxel.
// A voxel extends half-way to its neighbours; the first and last voxels
// extend as far beyond their centre as towards their one neighbour; along a
// single-sample axis the voxel is single mm thick.
func newAxisInfo(g *volume.Grid, a, sub int, single float64) axisInfo {
	off := g.Offsets(a)
	ax := g.Axis(a)
	o := g.Origin()[ax.Patient]
	n := len(off)
	ai := axisInfo{
		patient: ax.Patient,
		centre:  make([]float64, n),
		lo:      make([]float64, n),
		hi:      make([]float64, n),
		width:   make([]float64, n),
		subPos:  make([]float64, 0, n*sub),
		subVox:  make([]int32, 0, n*sub),
		cenPos:  make([]float64, 0, n),
		cenVox:  make([]int32, 0, n),
	}
	for v := 0; v < n; v++ {
		var below, above float64
		switch {
		case n == 1:
			below, above = single/2, single/2
		case v == 0:
			above = (off[1] - off[0]) / 2
			below = above
		case v == n-1:
			below = (off[v] - off[v-1]) / 2
			above = below
		default:
			below, above = (off[v]-off[v-1])/2, (off[v+1]-off[v])/2
		}
		// Boundaries shared with the neighbour are computed once, the same
		// way from both sides, so neighbouring voxels tile without a gap.
		l, h := off[v]-below, off[v]+above
		if v > 0 {
			l = (off[v-1] + off[v]) / 2
		}
		if v < n-1 {
			h = (off[v] + off[v+1]) / 2
		}
		w0, w1 := o+ax.Sign*l, o+ax.Sign*h
		ai.centre[v] = o + ax.Sign*off[v]
		ai.lo[v], ai.hi[v] = math.Min(w0, w1), math.Max(w0, w1)
		ai.width[v] = h - l
	}
	for q := 0; q < n; q++ {
		v := q
		if ax.Sign < 0 {
			v = n - 1 - q
		}
		step := (ai.hi[v] - ai.lo[v]) / float64(sub)
		for s := 0; s < sub; s++ {
			ai.subPos = append(ai.subPos, ai.lo[v]+(float64(s)+0.5)*step)
			ai.subVox = append(ai.subVox, int32(v))
		}
		ai.cenPos = append(ai.cenPos, ai.centre[v])
		ai.cenVox = append(ai.cenVox, int32(v))
	}
	ai.extLo, ai.extHi = math.Inf(1), math.Inf(-1)
	for v := 0; v < n; v++ {
		ai.extLo = math.Min(ai.extLo, ai.lo[v])
		ai.extHi = math.Max(ai.extHi, ai.hi[v])
	}
	return ai
}

// span returns the smallest and largest voxel index having a sub-sample or
// a centre at a patient coordinate in [lo, hi], and the range [s0, s1) of
// sub-samples inside it; v1 < v0 when there is none.
func (ai *axisInfo) span(lo, hi float64) (v0, v1, s0, s1 int) {
	v0, v1 = math.MaxInt, -1
	s0 = sort.SearchFloat64s(ai.subPos, lo)
	s1 = sort.Search(len(ai.subPos), func(i int) bool { return ai.subPos[i] > hi })
	if s1 > s0 {
		a, b := int(ai.subVox[s0]), int(ai.subVox[s1-1])
		v0, v1 = min(v0, a, b), max(v1, a, b)
	} else {
		s1 = s0
	}
	c0 := sort.SearchFloat64s(ai.cenPos, lo)
	c1 := sort.Search(len(ai.cenPos), func(i int) bool { return ai.cenPos[i] > hi })
	if c1 > c0 {
		a, b := int(ai.cenVox[c0]), int(ai.cenVox[c1-1])
		v0, v1 = min(v0, a, b), max(v1, a, b)
	}
	return v0, v1, s0, s1
}

// VoxelSize gives the volume each voxel of a grid stands for. A voxel
// extends half-way to its neighbours along each axis (the first and last
// voxel of an axis as far beyond their centre as towards their neighbour), so
// grids with non-uniform frame offsets get voxels of different thickness;
// along an axis with a single sample the thickness is chosen as described at
// [Options.SingleSampleThickness].
type VoxelSize struct {
	dims  [3]int
	width [3][]float64
}

// Dims returns the dimensions of the grid the sizes belong to.
func (v *VoxelSize) Dims() [3]int { return v.dims }

// Width returns the extent (mm) of voxel idx along index axis a.
func (v *VoxelSize) Width(a, idx int) float64 { return v.width[a][idx] }

// Volume returns the volume (mm³) of the voxel at position n of the grid's
// Data.
func (v *VoxelSize) Volume(n int) float64 {
	i := n % v.dims[0]
	n /= v.dims[0]
	return v.width[0][i] * v.width[1][n%v.dims[1]] * v.width[2][n/v.dims[1]]
}

// NewVoxelSize returns the voxel sizes of g, with the single-sample rule of
// opt (see [Options.SingleSampleThickness]).
func NewVoxelSize(g *volume.Grid, opt Options) (*VoxelSize, error) {
	single, err := singleThickness(g, opt)
	if err != nil {
		return nil, err
	}
	vs := &VoxelSize{dims: g.Dims()}
	for a := 0; a < 3; a++ {
		vs.width[a] = newAxisInfo(g, a, 1, single).width
	}
	return vs, nil
}

// singleThickness returns the thickness used along single-sample axes.
func singleThickness(g *volume.Grid, opt Options) (float64, error) {
	if opt.SingleSampleThickness < 0 || math.IsNaN(opt.SingleSampleThickness) || math.IsInf(opt.SingleSampleThickness, 0) {
		return 0, fmt.Errorf("roi: single-sample thickness %g mm, want a positive finite value or 0 for the default", opt.SingleSampleThickness)
	}
	if opt.SingleSampleThickness > 0 {
		return opt.SingleSampleThickness, nil
	}
	var sum float64
	var n int
	d := g.Dims()
	for a := 0; a < 3; a++ {
		if d[a] > 1 {
			s, _ := g.Spacing(a)
			sum += s
			n++
		}
	}
	if n == 0 {
		return 0, fmt.Errorf("roi: the grid has a single voxel; set Options.SingleSampleThickness")
	}
	return sum / float64(n), nil
}
