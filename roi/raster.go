package roi

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"

	"voxgamma/structure"
	"voxgamma/volume"
)

// Defaults and fixed rules of the rasterisation (see the package
// documentation).
const (
	// DefaultInPlane is the default number of sub-samples per voxel along
	// each in-plane axis (4 × 4 per voxel and sub-slice).
	DefaultInPlane = 4
	// DefaultSubSlices is the default number of sub-slices per voxel along z.
	DefaultSubSlices = 4
	// MaxSubSamples bounds InPlane and SubSlices.
	MaxSubSamples = 64
	// PlaneTolerance (mm) is how far the z of a contour's points may spread
	// and still be one axial plane, and how close the planes of two contours
	// must be to count as the same plane.
	PlaneTolerance = 0.01
	// GapFactor: a gap between consecutive contour planes larger than
	// GapFactor times each of the neighbouring gaps is a part of the ROI's z
	// range where the ROI is absent, not a wider plane spacing.
	GapFactor = 1.5
)

// Options tune the rasterisation. The zero value gives the defaults.
type Options struct {
	// InPlane is the number of sub-samples per voxel along each in-plane
	// axis (InPlane² per voxel and sub-slice); 0 means DefaultInPlane.
	InPlane int
	// SubSlices is the number of sub-slices per voxel along z; 0 means
	// DefaultSubSlices.
	SubSlices int
	// SingleSampleThickness (mm) is the voxel thickness along an axis of the
	// grid that has a single sample (a one-frame dose grid, say), where half
	// distances to neighbours do not exist. 0 means the mean spacing of the
	// grid's other axes.
	SingleSampleThickness float64
}

func (o Options) withDefaults() (Options, error) {
	if o.InPlane == 0 {
		o.InPlane = DefaultInPlane
	}
	if o.SubSlices == 0 {
		o.SubSlices = DefaultSubSlices
	}
	if o.InPlane < 1 || o.InPlane > MaxSubSamples {
		return o, fmt.Errorf("roi: %d in-plane sub-samples per voxel, want 1 to %d", o.InPlane, MaxSubSamples)
	}
	if o.SubSlices < 1 || o.SubSlices > MaxSubSamples {
		return o, fmt.Errorf("roi: %d sub-slices per voxel, want 1 to %d", o.SubSlices, MaxSubSamples)
	}
	return o, nil
}

// Rasteriser turns ROIs into Regions on one dose grid. It is not changed
// by rasterising, so one Rasteriser may serve several goroutines at once.
type Rasteriser struct {
	grid  *volume.Grid
	opt   Options
	sizes *VoxelSize
	ax    [3]axisInfo
}

// NewRasteriser prepares the rasterisation of ROIs onto grid g. g's frames
// (index axis k) must run along patient z, in either sense; otherwise axial
// contours cannot be mapped onto its frames and an error is returned.
func NewRasteriser(g *volume.Grid, opt Options) (*Rasteriser, error) {
	if g == nil {
		return nil, errors.New("roi: no dose grid")
	}
	opt, err := opt.withDefaults()
	if err != nil {
		return nil, err
	}
	if p := g.Axis(2).Patient; p != 2 {
		return nil, fmt.Errorf("roi: the dose grid's frames (index axis k) run along patient %c, not z: axial contours cannot be rasterised onto it", "xyz"[p])
	}
	if err := indexable(g); err != nil {
		return nil, err
	}
	single, err := singleThickness(g, opt)
	if err != nil {
		return nil, err
	}
	z := &Rasteriser{grid: g, opt: opt}
	z.ax[0] = newAxisInfo(g, 0, opt.InPlane, single)
	z.ax[1] = newAxisInfo(g, 1, opt.InPlane, single)
	z.ax[2] = newAxisInfo(g, 2, 1, single)
	z.sizes = &VoxelSize{dims: g.Dims()}
	for a := 0; a < 3; a++ {
		z.sizes.width[a] = z.ax[a].width
	}
	return z, nil
}

// Sizes returns the voxel sizes of the rasteriser's grid.
func (z *Rasteriser) Sizes() *VoxelSize { return z.sizes }

// Set rasterises every ROI of s, classified by rules (see [Classify]), in
// the set's order. It stops at the first error (which names the ROI).
func (z *Rasteriser) Set(s *structure.Set, rules []Rule) ([]*Region, error) {
	out := make([]*Region, 0, len(s.ROIs))
	for i := range s.ROIs {
		r, err := z.Rasterise(&s.ROIs[i], Classify(&s.ROIs[i], rules))
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, nil
}

// plane is one contour plane of an ROI: all its polygons' edges in the
// in-plane coordinates (x along index axis i's patient axis, y along j's).
type plane struct {
	z                      float64
	edges                  []edge
	groups                 []int32 // group of each polygon when some overlap (see sweep); nil otherwise
	minX, maxX, minY, maxY float64
	lo, hi                 float64 // the slab [lo, hi) of patient z the plane stands for
	i0, i1, j0, j1         int     // voxel index ranges it can touch
	si0, si1               int     // range of i sub-samples within [minX, maxX]
}

// Rasterise computes the Region of ROI r, with the given kind. ROIs without
// usable contours give an empty Region with the reason recorded (see
// [Region.Notes]); the part of an ROI outside the grid is clipped and
// measured in OutsideCC. Errors (non-finite coordinates) name the ROI.
func (z *Rasteriser) Rasterise(r *structure.ROI, kind Kind) (*Region, error) {
	reg := &Region{Name: r.Name, Number: r.Number, Kind: kind, Box: emptyBox(), grid: z.grid, sizes: z.sizes}
	if len(r.Contours) == 0 {
		reg.NoContours = true
		return reg, nil
	}
	planes, err := z.planes(r, reg)
	if err != nil {
		return nil, fmt.Errorf("roi: ROI %q (number %d): %w", r.Name, r.Number, err)
	}
	if len(planes) == 0 {
		return reg, nil
	}
	reg.Planes = len(planes)
	z.slabs(planes)
	z.measure(planes, reg)
	z.fill(planes, reg)
	return reg, nil
}

// planes groups the ROI's usable CLOSED_PLANAR contours into planes of
// increasing z, recording the others in reg.Skipped.
func (z *Rasteriser) planes(r *structure.ROI, reg *Region) ([]plane, error) {
	type cz struct {
		c int
		z float64
	}
	var cs []cz
	for ci, c := range r.Contours {
		for _, p := range c.Points {
			for _, v := range p {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					return nil, fmt.Errorf("contour %d has a coordinate that is not finite", ci)
				}
			}
		}
		if c.Type != structure.ClosedPlanar {
			reg.Skipped = append(reg.Skipped, SkippedContour{ci, c.Type, "only CLOSED_PLANAR contours enclose a volume"})
			continue
		}
		if len(c.Points) < 3 {
			reg.Skipped = append(reg.Skipped, SkippedContour{ci, c.Type, "fewer than 3 points"})
			continue
		}
		lo, hi := math.Inf(1), math.Inf(-1)
		var sum float64
		for _, p := range c.Points {
			lo, hi = math.Min(lo, p[2]), math.Max(hi, p[2])
			sum += p[2]
		}
		if hi-lo > PlaneTolerance {
			reg.Skipped = append(reg.Skipped, SkippedContour{ci, c.Type, "not in an axial plane (z varies along the contour)"})
			continue
		}
		cs = append(cs, cz{ci, sum / float64(len(c.Points))})
	}
	slices.SortStableFunc(cs, func(a, b cz) int {
		switch {
		case a.z < b.z:
			return -1
		case a.z > b.z:
			return 1
		}
		return 0
	})
	px, py := z.ax[0].patient, z.ax[1].patient
	var planes []plane
	var xs, ys []float64
	var ov overlapFinder
	for q := 0; q < len(cs); {
		pl := plane{z: cs[q].z, minX: math.Inf(1), maxX: math.Inf(-1), minY: math.Inf(1), maxY: math.Inf(-1)}
		e := q
		ov.reset()
		for ; e < len(cs) && cs[e].z-cs[q].z <= PlaneTolerance; e++ {
			pts := r.Contours[cs[e].c].Points
			xs, ys = xs[:0], ys[:0]
			for _, p := range pts {
				xs = append(xs, p[px])
				ys = append(ys, p[py])
				pl.minX, pl.maxX = math.Min(pl.minX, p[px]), math.Max(pl.maxX, p[px])
				pl.minY, pl.maxY = math.Min(pl.minY, p[py]), math.Max(pl.maxY, p[py])
			}
			pl.edges = appendEdges(pl.edges, xs, ys, int32(e-q))
			ov.add(cs[e].c, xs, ys)
		}
		sortEdges(pl.edges)
		if found := ov.find(); len(found) > 0 {
			pl.groups = ov.groups
			for _, o := range found {
				o.Z = pl.z
				reg.Overlaps = append(reg.Overlaps, o)
			}
		}
		var j0, j1 int
		var si0, si1 int
		pl.i0, pl.i1, si0, si1 = z.ax[0].span(pl.minX, pl.maxX)
		j0, j1, _, _ = z.ax[1].span(pl.minY, pl.maxY)
		pl.j0, pl.j1, pl.si0, pl.si1 = j0, j1, si0, si1
		planes = append(planes, pl)
		q = e
	}
	return planes, nil
}

// slabs sets the z slab [lo, hi) of every plane (see the package
// documentation): half-way to each neighbouring plane; across a gap (see
// GapFactor) and at the first and last plane, as far as on the other side;
// a plane with no neighbour on either side takes half the ROI's median plane
// spacing, or, in a single-plane ROI, half the thickness of the dose frame
// nearest to it.
func (z *Rasteriser) slabs(planes []plane) {
	n := len(planes)
	if n == 1 {
		h := z.nearestFrameWidth(planes[0].z) / 2
		planes[0].lo, planes[0].hi = planes[0].z-h, planes[0].z+h
		return
	}
	gap := make([]float64, n-1)
	for p := range gap {
		gap[p] = planes[p+1].z - planes[p].z
	}
	empty := make([]bool, n-1)
	for p := range gap {
		var nb float64
		has := false
		if p > 0 {
			nb, has = gap[p-1], true
		}
		if p < n-2 {
			nb, has = math.Max(nb, gap[p+1]), true
		}
		empty[p] = has && gap[p] > GapFactor*nb
	}
	sorted := append([]float64(nil), gap...)
	slices.Sort(sorted)
	median := sorted[len(sorted)/2]
	if len(sorted)%2 == 0 {
		median = (sorted[len(sorted)/2-1] + sorted[len(sorted)/2]) / 2
	}
	for p := 0; p < n; p++ {
		below, above := math.NaN(), math.NaN()
		if p > 0 && !empty[p-1] {
			below = gap[p-1] / 2
		}
		if p < n-1 && !empty[p] {
			above = gap[p] / 2
		}
		switch {
		case math.IsNaN(below) && math.IsNaN(above):
			below, above = median/2, median/2
		case math.IsNaN(below):
			below = above
		case math.IsNaN(above):
			above = below
		}
		if p > 0 {
			below = math.Min(below, gap[p-1]/2)
		}
		if p < n-1 {
			above = math.Min(above, gap[p]/2)
		}
		planes[p].lo, planes[p].hi = planes[p].z-below, planes[p].z+above
		// Contiguous neighbours share one boundary, computed once.
		if p > 0 && !empty[p-1] {
			planes[p].lo = planes[p-1].hi
		}
	}
}

// nearestFrameWidth returns the thickness of the dose frame whose centre is
// nearest to patient z.
func (z *Rasteriser) nearestFrameWidth(pz float64) float64 {
	ax := &z.ax[2]
	best, w := math.Inf(1), ax.width[0]
	for k, c := range ax.centre {
		if d := math.Abs(c - pz); d < best {
			best, w = d, ax.width[k]
		}
	}
	return w
}

// measure sets reg.ContourCC and reg.OutsideCC.
func (z *Rasteriser) measure(planes []plane, reg *Region) {
	var sw sweep
	var ys []float64
	ax, ay, az := &z.ax[0], &z.ax[1], &z.ax[2]
	var total, inside float64
	for p := range planes {
		pl := &planes[p]
		var a, ain float64
		a, ys = evenOddArea(pl.edges, pl.groups, math.Inf(-1), math.Inf(1), math.Inf(-1), math.Inf(1), &sw, ys)
		ain, ys = evenOddArea(pl.edges, pl.groups, ax.extLo, ax.extHi, ay.extLo, ay.extHi, &sw, ys)
		total += a * (pl.hi - pl.lo)
		if t := math.Min(pl.hi, az.extHi) - math.Max(pl.lo, az.extLo); t > 0 {
			inside += ain * t
		}
	}
	reg.ContourCC = total / 1000
	reg.OutsideCC = math.Max(0, total-inside) / 1000
}

// indexable refuses a grid whose voxels a Region's int32 positions cannot
// all name (2³¹ or more voxels: 2048 × 1024 × 1024, far beyond any dose
// grid).
func indexable(g *volume.Grid) error {
	d := g.Dims()
	if n := int64(d[0]) * int64(d[1]) * int64(d[2]); n > math.MaxInt32 {
		return fmt.Errorf("roi: the dose grid has %d voxels, more than the %d an ROI can index", n, int64(math.MaxInt32))
	}
	return nil
}

// planeRaster is the in-plane rasterisation of one contour plane: the
// number of inside sub-samples and the centre flag of each voxel (i, j) of
// the plane's index box. It depends on the plane only, so frames that share
// a plane share it.
type planeRaster struct {
	p        int
	used     int
	i0, j0   int
	ni, nj   int
	count    []uint16
	centre   []bool
	anyCount bool
}

// rasterPlane fills pr for plane pl.
func (z *Rasteriser) rasterPlane(pl *plane, pr *planeRaster, sw *sweep) {
	pr.i0, pr.j0 = pl.i0, pl.j0
	pr.ni, pr.nj = max(0, pl.i1-pl.i0+1), max(0, pl.j1-pl.j0+1)
	n := pr.ni * pr.nj
	pr.count = slices.Grow(pr.count[:0], n)[:n]
	pr.centre = slices.Grow(pr.centre[:0], n)[:n]
	clear(pr.count)
	clear(pr.centre)
	pr.anyCount = false
	if n == 0 {
		return
	}
	ax, ay := &z.ax[0], &z.ax[1]
	// Sub-sample rows: count the sub-samples between each pair of crossings.
	sw.reset(pl.edges, pl.groups)
	for s := sort.SearchFloat64s(ay.subPos, pl.minY); s < len(ay.subPos) && ay.subPos[s] <= pl.maxY; s++ {
		row := (int(ay.subVox[s]) - pr.j0) * pr.ni
		xs := sw.at(ay.subPos[s])
		for q := 0; q+1 < len(xs); q += 2 {
			a := sort.SearchFloat64s(ax.subPos[pl.si0:pl.si1], xs[q]) + pl.si0
			b := sort.SearchFloat64s(ax.subPos[pl.si0:pl.si1], xs[q+1]) + pl.si0
			for t := a; t < b; t++ {
				pr.count[row+int(ax.subVox[t])-pr.i0]++
			}
			if b > a {
				pr.anyCount = true
			}
		}
	}
	// Centre rows: flag the voxel centres between each pair of crossings.
	c0 := sort.SearchFloat64s(ax.cenPos, pl.minX)
	c1 := sort.Search(len(ax.cenPos), func(i int) bool { return ax.cenPos[i] > pl.maxX })
	if c1 < c0 {
		c1 = c0
	}
	sw.reset(pl.edges, pl.groups)
	for s := sort.SearchFloat64s(ay.cenPos, pl.minY); s < len(ay.cenPos) && ay.cenPos[s] <= pl.maxY; s++ {
		row := (int(ay.cenVox[s]) - pr.j0) * pr.ni
		xs := sw.at(ay.cenPos[s])
		for q := 0; q+1 < len(xs); q += 2 {
			a := sort.SearchFloat64s(ax.cenPos[c0:c1], xs[q]) + c0
			b := sort.SearchFloat64s(ax.cenPos[c0:c1], xs[q+1]) + c0
			for t := a; t < b; t++ {
				pr.centre[row+int(ax.cenVox[t])-pr.i0] = true
			}
		}
	}
}

// rasterCache keeps the rasters of the few planes in use by nearby frames.
type rasterCache struct {
	z      *Rasteriser
	planes []plane
	slots  []*planeRaster
	tick   int
	sw     sweep
}

func (c *rasterCache) get(p int) *planeRaster {
	c.tick++
	var victim *planeRaster
	for _, s := range c.slots {
		if s.p == p {
			s.used = c.tick
			return s
		}
		if victim == nil || s.used < victim.used {
			victim = s
		}
	}
	victim.p, victim.used = p, c.tick
	c.z.rasterPlane(&c.planes[p], victim, &c.sw)
	return victim
}

// planeAt returns the plane whose slab holds patient z, or -1.
func planeAt(planes []plane, pz float64) int {
	p := sort.Search(len(planes), func(i int) bool { return planes[i].lo > pz }) - 1
	if p >= 0 && pz < planes[p].hi {
		return p
	}
	return -1
}

// fill computes reg's centre list and fractions frame by frame.
func (z *Rasteriser) fill(planes []plane, reg *Region) {
	g := z.grid
	dims := g.Dims()
	az := &z.ax[2]
	S := z.opt.SubSlices
	S2 := float64(z.opt.InPlane * z.opt.InPlane)
	// The ROI's in-plane index box: the union of its planes' boxes.
	I0, J0, I1, J1 := math.MaxInt, math.MaxInt, -1, -1
	for p := range planes {
		pl := &planes[p]
		if pl.i1 >= pl.i0 && pl.j1 >= pl.j0 {
			I0, I1 = min(I0, pl.i0), max(I1, pl.i1)
			J0, J1 = min(J0, pl.j0), max(J1, pl.j1)
		}
	}
	if I1 < I0 || J1 < J0 {
		return // entirely outside the grid in-plane
	}
	NI := I1 - I0 + 1
	acc := make([]float64, NI*(J1-J0+1))
	cen := make([]bool, len(acc))
	cache := &rasterCache{z: z, planes: planes}
	for q := 0; q < S+2; q++ {
		cache.slots = append(cache.slots, &planeRaster{p: -1})
	}
	roiLo, roiHi := planes[0].lo, planes[len(planes)-1].hi
	type use struct{ p, n int }
	uses := make([]use, 0, S)
	for k := 0; k < dims[2]; k++ {
		flo, fhi := az.lo[k], az.hi[k]
		if fhi <= roiLo || flo >= roiHi {
			continue
		}
		uses = uses[:0]
		step := (fhi - flo) / float64(S)
		for s := 0; s < S; s++ {
			p := planeAt(planes, flo+(float64(s)+0.5)*step)
			if p < 0 {
				continue
			}
			if len(uses) > 0 && uses[len(uses)-1].p == p {
				uses[len(uses)-1].n++
			} else {
				uses = append(uses, use{p, 1})
			}
		}
		cp := planeAt(planes, az.centre[k])
		if len(uses) == 0 && cp < 0 {
			continue
		}
		ti0, tj0, ti1, tj1 := math.MaxInt, math.MaxInt, -1, -1
		for _, u := range uses {
			pr := cache.get(u.p)
			if !pr.anyCount {
				continue
			}
			w := float64(u.n) / float64(S) / S2
			for jj := 0; jj < pr.nj; jj++ {
				src := pr.count[jj*pr.ni : (jj+1)*pr.ni]
				dst := acc[(pr.j0+jj-J0)*NI+pr.i0-I0:]
				for ii, c := range src {
					if c != 0 {
						dst[ii] += w * float64(c)
					}
				}
			}
			ti0, ti1 = min(ti0, pr.i0), max(ti1, pr.i0+pr.ni-1)
			tj0, tj1 = min(tj0, pr.j0), max(tj1, pr.j0+pr.nj-1)
		}
		if cp >= 0 {
			if pr := cache.get(cp); pr.ni > 0 && pr.nj > 0 {
				for jj := 0; jj < pr.nj; jj++ {
					src := pr.centre[jj*pr.ni : (jj+1)*pr.ni]
					dst := cen[(pr.j0+jj-J0)*NI+pr.i0-I0:]
					for ii, c := range src {
						if c {
							dst[ii] = true
						}
					}
				}
				ti0, ti1 = min(ti0, pr.i0), max(ti1, pr.i0+pr.ni-1)
				tj0, tj1 = min(tj0, pr.j0), max(tj1, pr.j0+pr.nj-1)
			}
		}
		for j := tj0; j <= tj1; j++ {
			row := (j - J0) * NI
			base := g.Index(0, j, k)
			for i := ti0; i <= ti1; i++ {
				a := row + i - I0
				f, c := acc[a], cen[a]
				if c {
					reg.Centres.Add(int32(base + i))
					reg.Box.add(i, j, k)
				}
				if f > 0 {
					reg.Cover.add(int32(base+i), float32(math.Min(f, 1)))
					reg.Box.add(i, j, k)
				}
				acc[a], cen[a] = 0, false
			}
		}
	}
	reg.trim()
}
