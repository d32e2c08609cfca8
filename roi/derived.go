package roi

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"voxgamma/volume"
)

// Union returns the region made of regions together: a voxel's centre is
// inside when it is inside any of them, and its fraction is the largest of
// theirs (the union of partial volumes is at least the largest of them; the
// maximum is exact when they are nested and never counts an overlap twice).
// All regions must belong to grids of the same geometry. The result has
// Number 0 and Derived set to a description.
func Union(name string, kind Kind, regions []*Region) (*Region, error) {
	if len(regions) == 0 {
		return nil, fmt.Errorf("roi: union %q of no region", name)
	}
	first := regions[0]
	u := &Region{Name: name, Kind: kind, Box: emptyBox(), grid: first.grid, sizes: first.sizes}
	names := ""
	for q, r := range regions {
		if r.grid == nil || first.grid == nil || !r.grid.SameGeometry(first.grid) {
			return nil, fmt.Errorf("roi: union %q: ROI %q is on a different grid from ROI %q", name, r.Name, first.Name)
		}
		if q > 0 {
			names += ", "
		}
		names += r.Name
		u.Centres = volume.Union(&u.Centres, &r.Centres)
		u.Cover = unionCover(&u.Cover, &r.Cover)
		u.ContourCC += r.ContourCC
		u.OutsideCC += r.OutsideCC
	}
	// ContourCC and OutsideCC of a union are sums over its members: an
	// upper bound when members overlap.
	u.Derived = "union of " + names
	u.setBox()
	return u, nil
}

// AllTargets returns the union of the regions of kind Target, named
// "all targets", or nil when there is none.
func AllTargets(regions []*Region) (*Region, error) {
	return unionOfKind("all targets", Target, regions)
}

// BodyOf returns the union of the regions of kind Body (EXTERNAL contours),
// named "body", or nil when there is none.
//
// Neither AllTargets nor BodyOf returns a union of a single region that
// already bears the union's name (a structure set's one EXTERNAL ROI named
// "BODY"): it would be the same ROI listed twice, and a protocol naming
// roi:body finds that ROI itself.
func BodyOf(regions []*Region) (*Region, error) {
	return unionOfKind("body", Body, regions)
}

func unionOfKind(name string, kind Kind, regions []*Region) (*Region, error) {
	var sel []*Region
	for _, r := range regions {
		if r.Kind == kind && r.Derived == "" {
			sel = append(sel, r)
		}
	}
	if len(sel) == 0 || len(sel) == 1 && strings.EqualFold(strings.TrimSpace(sel[0].Name), name) {
		return nil, nil
	}
	return Union(name, kind, sel)
}

// Isodose returns the region of the voxels of ref whose dose is at least
// percent % of norm (Gy): centre inside and fraction 1 for each of them, 0
// elsewhere (NaN doses are never inside). The region is of kind Other and
// named like "isodose 50% of 60 Gy".
func Isodose(ref *volume.Grid, percent, norm float64, opt Options) (*Region, error) {
	if ref == nil {
		return nil, errors.New("roi: isodose of no grid")
	}
	if !(percent > 0) || math.IsInf(percent, 0) || !(norm > 0) || math.IsInf(norm, 0) {
		return nil, fmt.Errorf("roi: isodose %g %% of %g Gy: want a positive percentage of a positive normalisation dose", percent, norm)
	}
	if err := indexable(ref); err != nil {
		return nil, err
	}
	sizes, err := NewVoxelSize(ref, opt)
	if err != nil {
		return nil, err
	}
	level := percent / 100 * norm
	r := &Region{
		Name:    fmt.Sprintf("isodose %g%% of %.4g Gy", percent, norm),
		Kind:    Other,
		Derived: fmt.Sprintf("voxels of the reference dose ≥ %g Gy (%g %% of %g Gy)", level, percent, norm),
		Box:     emptyBox(),
		grid:    ref,
		sizes:   sizes,
	}
	for n, v := range ref.Data {
		if float64(v) >= level {
			r.Centres.Add(int32(n))
			r.Cover.add(int32(n), 1)
		}
	}
	r.setBox()
	return r, nil
}

// setBox recomputes Box from Centres and Cover.
func (r *Region) setBox() {
	r.Box = emptyBox()
	d := r.grid.Dims()
	for _, set := range [2]*volume.Runs{&r.Centres, &r.Cover.Voxels} {
		for _, run := range set.Runs() {
			r.Box.addRun(run, d)
		}
	}
}

// addRun widens the box to the voxels of run, on a grid of dimensions d. A
// run that spans rows covers every i; one that spans slices, every j.
func (b *Box) addRun(run volume.Run, d [3]int) {
	first, last := int(run.Start), int(run.End)-1
	i0, r0 := first%d[0], first/d[0]
	i1, r1 := last%d[0], last/d[0]
	j0, k0 := r0%d[1], r0/d[1]
	j1, k1 := r1%d[1], r1/d[1]
	if r1 > r0 {
		i0, i1 = 0, d[0]-1
	}
	if k1 > k0 {
		j0, j1 = 0, d[1]-1
	}
	b.add(i0, j0, k0)
	b.add(i1, j1, k1)
}
