package roi

// What rasterisation yields: a Region (an ROI on a dose grid), its volumes
// and notes, and the contours it left out or found overlapping.

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"voxgamma/structure"
	"voxgamma/volume"
)

// Box is an inclusive range of voxel indices along i, j and k. A Box with
// Hi[0] < Lo[0] is empty.
type Box struct {
	Lo, Hi [3]int
}

// Empty reports whether the box holds no voxel.
func (b Box) Empty() bool { return b.Hi[0] < b.Lo[0] || b.Hi[1] < b.Lo[1] || b.Hi[2] < b.Lo[2] }

func emptyBox() Box {
	return Box{Lo: [3]int{math.MaxInt, math.MaxInt, math.MaxInt}, Hi: [3]int{-1, -1, -1}}
}

func (b *Box) add(i, j, k int) {
	b.Lo = [3]int{min(b.Lo[0], i), min(b.Lo[1], j), min(b.Lo[2], k)}
	b.Hi = [3]int{max(b.Hi[0], i), max(b.Hi[1], j), max(b.Hi[2], k)}
}

// SkippedContour is a contour of an ROI that was not rasterised.
type SkippedContour struct {
	// Contour is the contour's position in the ROI's Contours.
	Contour int
	// Type is its geometric type.
	Type structure.GeometricType
	// Reason says why it was left out.
	Reason string
}

// OverlapKind says how two contours of one plane cover each other.
type OverlapKind int

// The kinds of overlap.
const (
	// Duplicate: the same contour twice (the same region, whatever the
	// vertices or the orientation). By the even-odd rule the two cancel.
	Duplicate OverlapKind = iota
	// Partial: the contours overlap and neither lies inside the other. By
	// the even-odd rule their overlap would be cut out.
	Partial
)

func (k OverlapKind) String() string {
	if k == Duplicate {
		return "the same contour twice"
	}
	return "contours overlapping without one inside the other"
}

// ContourOverlap is a pair of contours of one plane that overlap.
type ContourOverlap struct {
	// Z is the plane's patient z (mm).
	Z float64
	// Kind says how they overlap.
	Kind OverlapKind
	// A and B are the contours' positions in the ROI's Contours.
	A, B int
}

// Region is an ROI (or a derived region) on a particular dose grid: the
// voxels whose centre is inside and the partial-volume fraction of every
// voxel it touches, as sets of positions in the grid's Data.
type Region struct {
	// Name and Number of the ROI (Number 0 for derived regions).
	Name   string
	Number int
	// Kind is the ROI's clinical role.
	Kind Kind
	// Derived describes how a derived region was made ("union of targets",
	// an isodose level, ...); empty for an ROI rasterised from contours.
	Derived string

	// Centres holds the Data positions of the voxels whose centre is
	// inside the ROI: the voxels that count for the ROI's pass rate. See
	// also [Region.Mask].
	Centres volume.Runs
	// Cover holds the voxels with a partial-volume fraction > 0 and their
	// fractions. A voxel may have its centre inside and a fraction of 0 (a
	// contour thinner than the sub-sample spacing) or the reverse.
	Cover Cover
	// Box bounds every voxel of Centres and Cover.
	Box Box

	// NoContours is set when the ROI has no contour at all.
	NoContours bool
	// Planes is the number of contour planes rasterised.
	Planes int
	// Skipped lists the contours not rasterised (POINT, OPEN_PLANAR,
	// non-axial, fewer than three points).
	Skipped []SkippedContour
	// Overlaps lists the contour planes where contours cover each other
	// without one lying inside the other: the same contour twice, or two
	// contours that partly overlap (see the package documentation,
	// "Contours that overlap").
	Overlaps []ContourOverlap
	// ContourCC is the volume (cm³) the rasterised contours enclose, each
	// plane's even-odd area times the thickness of its slab (see the package
	// documentation), and OutsideCC the part of it beyond the dose grid's
	// extent (the union of its voxels), which is not rasterised.
	ContourCC, OutsideCC float64

	grid  *volume.Grid
	sizes *VoxelSize
}

// Grid returns the grid the region was made on (its geometry; its samples
// are not used by the region).
func (r *Region) Grid() *volume.Grid { return r.grid }

// voxelCC returns the volume (cm³) that voxel n counts for with fraction
// f: that fraction of its voxel's volume.
func (r *Region) voxelCC(n int32, f float32) float64 {
	return float64(f) * r.sizes.Volume(int(n)) / 1000
}

// Sizes returns the voxel sizes of the region's grid.
func (r *Region) Sizes() *VoxelSize { return r.sizes }

// Empty reports whether no voxel has its centre inside and none has a
// fraction > 0.
func (r *Region) Empty() bool { return r.Centres.Len() == 0 && r.Cover.Len() == 0 }

// Mask returns the centre mask as a volume.Mask over the region's grid (a
// new full-size mask on each call). The region must have been made by this
// package.
func (r *Region) Mask() *volume.Mask {
	m := volume.NewMask(r.grid)
	for _, run := range r.Centres.Runs() {
		for n := run.Start; n < run.End; n++ {
			m.Bits[n] = true
		}
	}
	return m
}

// VolumeCC returns the fraction-weighted volume (cm³): Σ fraction × voxel
// volume.
func (r *Region) VolumeCC() float64 {
	var v float64
	for n, f := range r.Cover.All() {
		v += float64(f) * r.sizes.Volume(int(n))
	}
	return v / 1000
}

// CentreVolumeCC returns the volume (cm³) of the voxels whose centre is
// inside.
func (r *Region) CentreVolumeCC() float64 {
	var v float64
	for n := range r.Centres.All() {
		v += r.sizes.Volume(int(n))
	}
	return v / 1000
}

// OutsideFraction returns OutsideCC / ContourCC (0 when ContourCC is 0).
func (r *Region) OutsideFraction() float64 {
	if r.ContourCC <= 0 {
		return 0
	}
	return r.OutsideCC / r.ContourCC
}

// Notes returns human-readable remarks for a report: no contours, contours
// left out, the part of the ROI outside the dose grid, an empty result.
func (r *Region) Notes() []string {
	var out []string
	if r.NoContours {
		out = append(out, "no contours")
	}
	byType := map[structure.GeometricType]int{}
	var types []structure.GeometricType
	for _, s := range r.Skipped {
		if byType[s.Type] == 0 {
			types = append(types, s.Type)
		}
		byType[s.Type]++
	}
	for _, t := range types {
		var reason string
		for _, s := range r.Skipped {
			if s.Type == t {
				reason = s.Reason
				break
			}
		}
		name := string(t)
		if name == "" {
			name = "untyped"
		}
		out = append(out, fmt.Sprintf("%d %s contour(s) not rasterised (%s)", byType[t], name, reason))
	}
	out = append(out, r.OverlapSummary()...)
	if r.OutsideCC > 0 && r.ContourCC > 0 {
		out = append(out, fmt.Sprintf("%.1f %% of the contoured volume (%.3g of %.3g cm³) lies outside the dose grid and is not evaluated",
			100*r.OutsideFraction(), r.OutsideCC, r.ContourCC))
	}
	switch {
	case r.Derived != "" || r.NoContours:
	case r.Planes == 0:
		out = append(out, "no usable CLOSED_PLANAR contour: nothing rasterised")
	case r.Empty():
		out = append(out, "no voxel of the dose grid lies in the ROI")
	}
	return out
}

// OverlapSummary says, one line per kind, on which planes contours of the
// region overlap and how they were filled: "the same contour twice on 3
// planes (z = -2, 0, 2 mm): counted once", "contours overlapping without
// one inside the other on 1 plane (z = 4 mm): filled as their union (the
// even-odd rule would cut their overlap out)". nil when none do.
func (r *Region) OverlapSummary() []string {
	var out []string
	for _, k := range []OverlapKind{Duplicate, Partial} {
		var zs []float64
		for _, o := range r.Overlaps {
			if o.Kind == k && (len(zs) == 0 || zs[len(zs)-1] != o.Z) {
				zs = append(zs, o.Z)
			}
		}
		if len(zs) == 0 {
			continue
		}
		list := make([]string, 0, min(len(zs), maxListedPlanes)+1)
		for i, z := range zs {
			if i == maxListedPlanes {
				list = append(list, "…")
				break
			}
			list = append(list, strconv.FormatFloat(z, 'g', 6, 64))
		}
		planes := "planes"
		if len(zs) == 1 {
			planes = "plane"
		}
		how := "counted once"
		if k == Partial {
			how = "filled as their union (the even-odd rule would cut their overlap out)"
		}
		out = append(out, fmt.Sprintf("%s on %d %s (z = %s mm): %s", k, len(zs), planes, strings.Join(list, ", "), how))
	}
	return out
}

// maxListedPlanes bounds the planes OverlapSummary lists by z.
const maxListedPlanes = 10

// trim gives back spare room in the region's lists, which are held from
// rasterisation to the report.
func (r *Region) trim() {
	r.Centres.Trim()
	r.Cover.trim()
}

// trimmed returns s, or a copy of it without spare capacity when s has
// more than len(s)/32 of it.
func trimmed[S ~[]E, E any](s S) S {
	if cap(s)-len(s) <= len(s)/32 {
		return s
	}
	t := make(S, len(s))
	copy(t, s)
	return t
}
