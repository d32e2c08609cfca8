package roi

import (
	"math"
	"slices"
	"testing"

	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

// boxGrid returns a head-first supine grid (identity directions) with
// spacing h whose voxel centres cover [lo, hi] with a margin of two voxels,
// shifted by shift (mm) so that centres need not fall on round numbers.
func boxGrid(t testing.TB, lo, hi [3]float64, h [3]float64, shift [3]float64) *volume.Grid {
	t.Helper()
	var dims [3]int
	var origin [3]float64
	for a := 0; a < 3; a++ {
		origin[a] = lo[a] - 2*h[a] + shift[a]
		dims[a] = int(math.Ceil((hi[a]+2*h[a]-origin[a])/h[a])) + 1
	}
	g, err := volume.NewUniform(dims, origin, h, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func mustROI(t testing.TB, s phantom.Shape, spec phantom.ROISpec) structure.ROI {
	t.Helper()
	r, err := phantom.NewROI(s, spec)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func mustRasterise(t testing.TB, g *volume.Grid, r *structure.ROI, opt Options) *Region {
	t.Helper()
	z, err := NewRasteriser(g, opt)
	if err != nil {
		t.Fatal(err)
	}
	reg, err := z.Rasterise(r, Classify(r, nil))
	if err != nil {
		t.Fatal(err)
	}
	return reg
}

// square returns the closed polygon of the axis-aligned square
// [x0, x1] × [y0, y1] in plane z, counter-clockwise.
func square(x0, y0, x1, y1, z float64) structure.Contour {
	return structure.Contour{Type: structure.ClosedPlanar, Points: [][3]float64{
		{x0, y0, z}, {x1, y0, z}, {x1, y1, z}, {x0, y1, z},
	}}
}

// reversed returns c with its points in the opposite order.
func reversed(c structure.Contour) structure.Contour {
	p := make([][3]float64, len(c.Points))
	for i := range p {
		p[i] = c.Points[len(p)-1-i]
	}
	return structure.Contour{Type: c.Type, Points: p}
}

func relErr(got, want float64) float64 { return (got - want) / want }

// centreList returns the positions of the region's centres, increasing.
func centreList(r *Region) []int32 { return slices.Collect(r.Centres.All()) }

// coverLists returns the positions of the region's cover and their
// fractions, increasing.
func coverLists(r *Region) ([]int32, []float32) {
	var idx []int32
	var fr []float32
	for n, f := range r.Cover.All() {
		idx, fr = append(idx, n), append(fr, f)
	}
	return idx, fr
}
