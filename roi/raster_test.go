package roi

import (
	"math"
	"slices"
	"strings"
	"testing"

	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

// unitGrid is a 1 mm head-first grid whose voxels span [0, nx] × [0, ny] in
// x and y (centres at 0.5, 1.5, ...), so contours on integer coordinates
// never pass through a sub-sample or a centre, and frames centred on the
// given z values.
func unitGrid(t *testing.T, nx, ny int, frameZ []float64) *volume.Grid {
	t.Helper()
	off := make([]float64, len(frameZ))
	for k := range frameZ {
		off[k] = frameZ[k] - frameZ[0]
	}
	ox, oy := make([]float64, nx), make([]float64, ny)
	for i := range ox {
		ox[i] = float64(i)
	}
	for j := range oy {
		oy[j] = float64(j)
	}
	g, err := volume.New([3]int{nx, ny, len(frameZ)}, [3]float64{0.5, 0.5, frameZ[0]}, volume.Identity, [3][]float64{ox, oy, off})
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func onPlanes(zs []float64, make func(z float64) []structure.Contour) structure.ROI {
	r := structure.ROI{Name: "test", Number: 7}
	for _, z := range zs {
		r.Contours = append(r.Contours, make(z)...)
	}
	return r
}

// frameCount returns the number of centre voxels in frame k.
func frameCount(g *volume.Grid, reg *Region, k int) int {
	n := 0
	for idx := range reg.Centres.All() {
		if _, _, kk := g.IJK(int(idx)); kk == k {
			n++
		}
	}
	return n
}

// insideAt reports whether the centre of voxel (i, j, k) is in the region.
func insideAt(g *volume.Grid, reg *Region, i, j, k int) bool {
	ok := reg.Centres.Contains(int32(g.Index(i, j, k)))
	return ok
}

// Even-odd rule: a square with a square hole, as two polygons on each plane.
func TestEvenOddHole(t *testing.T) {
	zs := []float64{0, 1, 2, 3, 4}
	g := unitGrid(t, 40, 40, zs)
	r := onPlanes(zs, func(z float64) []structure.Contour {
		return []structure.Contour{square(5, 5, 35, 35, z), square(15, 15, 25, 25, z)}
	})
	reg := mustRasterise(t, g, &r, Options{})
	for k := range zs {
		if n := frameCount(g, reg, k); n != 900-100 {
			t.Errorf("frame %d: %d centre voxels, want 30² − 10² = 800", k, n)
		}
	}
	if insideAt(g, reg, 20, 20, 2) {
		t.Error("a voxel in the hole is inside")
	}
	if !insideAt(g, reg, 10, 10, 2) {
		t.Error("a voxel of the ring is outside")
	}
	// Edges on whole mm, voxel boundaries on whole mm: fractions are 0 or 1
	// and the volume is exactly 800 mm² × 5 mm.
	if v := reg.VolumeCC() * 1000; math.Abs(v-4000) > 1e-6 {
		t.Errorf("volume %g mm³, want 4000", v)
	}
	idx, fr := coverLists(reg)
	for q, f := range fr {
		if f != 1 {
			t.Fatalf("voxel %d has fraction %g, want 1", idx[q], f)
		}
	}
	if !slices.Equal(idx, centreList(reg)) {
		t.Error("fraction list and centre list differ for a voxel-aligned ROI")
	}
	if math.Abs(reg.ContourCC-4.0) > 1e-12 {
		t.Errorf("ContourCC %g cm³, want 4", reg.ContourCC)
	}
}

// Even-odd rule: two islands, and an island inside a hole (three nested
// squares: outer minus middle plus inner).
func TestEvenOddIslands(t *testing.T) {
	zs := []float64{0, 1, 2}
	g := unitGrid(t, 40, 40, zs)
	two := onPlanes(zs, func(z float64) []structure.Contour {
		return []structure.Contour{square(2, 2, 12, 8, z), square(20, 20, 30, 35, z)}
	})
	reg := mustRasterise(t, g, &two, Options{})
	if n := frameCount(g, reg, 1); n != 60+150 {
		t.Errorf("two islands: %d centre voxels per frame, want 60 + 150", n)
	}
	nested := onPlanes(zs, func(z float64) []structure.Contour {
		return []structure.Contour{square(0, 0, 30, 30, z), square(5, 5, 25, 25, z), square(10, 10, 20, 20, z)}
	})
	reg = mustRasterise(t, g, &nested, Options{})
	if n := frameCount(g, reg, 1); n != 900-400+100 {
		t.Errorf("nested squares: %d centre voxels per frame, want 900 − 400 + 100 = 600", n)
	}
	if !insideAt(g, reg, 15, 15, 1) || insideAt(g, reg, 7, 15, 1) || !insideAt(g, reg, 2, 15, 1) {
		t.Error("nested squares: wrong inside/outside at the island, the hole or the ring")
	}
}

// Clockwise and counter-clockwise polygons (outer and hole in all four
// combinations) give identical regions.
func TestOrientationIndependent(t *testing.T) {
	zs := []float64{0, 2, 4}
	g, err := volume.NewUniform([3]int{50, 50, 8}, [3]float64{-24.3, -24.1, -1.2}, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	sph := phantom.Sphere{Centre: [3]float64{0.2, 0.1, 2}, Radius: 20}
	outer, _ := sph.Contours(zs, 48)
	hole, _ := phantom.Sphere{Centre: [3]float64{3.3, -1.7, 2}, Radius: 9}.Contours(zs, 40)
	var regs []*Region
	for _, flip := range [][2]bool{{false, false}, {true, false}, {false, true}, {true, true}} {
		r := structure.ROI{Name: "ring"}
		for q := range outer {
			o, h := outer[q], hole[q]
			if flip[0] {
				o = reversed(o)
			}
			if flip[1] {
				h = reversed(h)
			}
			r.Contours = append(r.Contours, o, h)
		}
		regs = append(regs, mustRasterise(t, g, &r, Options{}))
	}
	for q := 1; q < len(regs); q++ {
		iq, fq := coverLists(regs[q])
		i0, f0 := coverLists(regs[0])
		if !slices.Equal(centreList(regs[q]), centreList(regs[0])) || !slices.Equal(iq, i0) || !slices.Equal(fq, f0) {
			t.Errorf("orientation case %d gives a different region from the all-counter-clockwise case", q)
		}
	}
	if regs[0].Centres.Len() == 0 {
		t.Fatal("empty region")
	}
}

// Self-touching polygons: two squares drawn as one polygon meeting at a
// corner, and a keyhole contour (outer square, slit, inner hole traversed
// the other way, back along the slit).
func TestSelfTouching(t *testing.T) {
	zs := []float64{0, 1, 2}
	g := unitGrid(t, 40, 40, zs)
	bow := onPlanes(zs, func(z float64) []structure.Contour {
		return []structure.Contour{{Type: structure.ClosedPlanar, Points: [][3]float64{
			{0, 0, z}, {10, 0, z}, {10, 10, z}, {20, 10, z}, {20, 20, z}, {10, 20, z}, {10, 10, z}, {0, 10, z},
		}}}
	})
	reg := mustRasterise(t, g, &bow, Options{})
	if n := frameCount(g, reg, 1); n != 200 {
		t.Errorf("corner-touching squares: %d centre voxels, want 200", n)
	}
	if v := reg.VolumeCC() * 1000; math.Abs(v-600) > 1e-9 {
		t.Errorf("corner-touching squares: volume %g mm³, want 200 mm² × 3 mm", v)
	}
	key := onPlanes(zs, func(z float64) []structure.Contour {
		return []structure.Contour{{Type: structure.ClosedPlanar, Points: [][3]float64{
			{0, 0, z}, {30, 0, z}, {30, 30, z}, {15, 30, z}, {15, 20, z}, {20, 20, z}, {20, 10, z},
			{10, 10, z}, {10, 20, z}, {15, 20, z}, {15, 30, z}, {0, 30, z},
		}}}
	})
	reg = mustRasterise(t, g, &key, Options{})
	if n := frameCount(g, reg, 1); n != 800 {
		t.Errorf("keyhole: %d centre voxels, want 900 − 100 = 800", n)
	}
	if insideAt(g, reg, 15, 15, 1) || !insideAt(g, reg, 14, 25, 1) || !insideAt(g, reg, 15, 25, 1) {
		t.Error("keyhole: wrong inside/outside in the hole or beside the slit")
	}
	if math.Abs(reg.ContourCC*1000-2400) > 1e-9 {
		t.Errorf("keyhole: contoured volume %g mm³, want 800 mm² × 3 mm", reg.ContourCC*1000)
	}
}

// The z rule: frames beyond half a plane spacing past the last (first)
// plane are outside; a frame half covered gets fraction 1/2; a frame
// between planes takes the nearer plane.
func TestPlaneRule(t *testing.T) {
	// Planes at 0, 2, 4 (spacing 2): the ROI spans [−1, 5).
	frames := []float64{-3, -2, -1, 0, 1, 2, 3, 4, 5, 6, 7}
	g := unitGrid(t, 20, 20, frames)
	r := onPlanes([]float64{0, 2, 4}, func(z float64) []structure.Contour {
		return []structure.Contour{square(2, 2, 12, 12, z)}
	})
	reg := mustRasterise(t, g, &r, Options{})
	for k, z := range frames {
		want := 0
		if z >= -1 && z < 5 {
			want = 100
		}
		if n := frameCount(g, reg, k); n != want {
			t.Errorf("frame at z = %g: %d centre voxels, want %d", z, n, want)
		}
	}
	// Fractions of the voxel (5, 5): frame −1 spans [−1.5, −0.5], half in;
	// frame 5 spans [4.5, 5.5], half in; frame −2 and 6 out.
	frac := func(k int) float64 {
		idx, fr := coverLists(reg)
		q, ok := slices.BinarySearch(idx, int32(g.Index(5, 5, k)))
		if !ok {
			return 0
		}
		return float64(fr[q])
	}
	for k, want := range map[int]float64{1: 0, 2: 0.5, 3: 1, 7: 1, 8: 0.5, 9: 0} {
		if f := frac(k); f != want {
			t.Errorf("frame at z = %g: fraction %g, want %g", frames[k], f, want)
		}
	}
	if v := reg.VolumeCC() * 1000; math.Abs(v-600) > 1e-9 {
		t.Errorf("volume %g mm³, want 100 mm² × 6 mm", v)
	}

	// Nearer plane: planes at 0 (small square) and 4 (large square); frames
	// at 1.3 and 2.7 (non-uniform offsets) take the plane at 0 and at 4.
	fz := []float64{-0.7, 1.3, 2.7, 4.1}
	g = unitGrid(t, 30, 30, fz)
	r = structure.ROI{Name: "two planes", Contours: []structure.Contour{square(2, 2, 6, 6, 0), square(2, 2, 22, 22, 4)}}
	reg = mustRasterise(t, g, &r, Options{})
	for k, want := range []int{16, 16, 400, 400} {
		if n := frameCount(g, reg, k); n != want {
			t.Errorf("frame at z = %g: %d centre voxels, want %d", fz[k], n, want)
		}
	}
}

// A gap much wider than the neighbouring plane spacing is where the ROI is
// absent; a single-plane ROI fills one frame's thickness.
func TestGapsAndSinglePlane(t *testing.T) {
	frames := make([]float64, 0, 30)
	for z := -2.0; z <= 26; z++ {
		frames = append(frames, z)
	}
	g := unitGrid(t, 20, 20, frames)
	r := onPlanes([]float64{0, 2, 4, 20, 22, 24}, func(z float64) []structure.Contour {
		return []structure.Contour{square(2, 2, 12, 12, z)}
	})
	reg := mustRasterise(t, g, &r, Options{})
	for k, z := range frames {
		want := 0
		if (z >= -1 && z < 5) || (z >= 19 && z < 25) {
			want = 100
		}
		if n := frameCount(g, reg, k); n != want {
			t.Errorf("split ROI, frame at z = %g: %d centre voxels, want %d", z, n, want)
		}
	}
	if math.Abs(reg.ContourCC*1000-1200) > 1e-9 {
		t.Errorf("split ROI: contoured volume %g mm³, want 2 × 100 mm² × 6 mm", reg.ContourCC*1000)
	}

	// Single plane at z = 0.3 on frames 2 mm apart at 0, 2, 4: nearest frame
	// width 2 mm, slab [−0.7, 1.3): frame 0 fully in (its sub-slices at
	// ±0.25, ±0.75), frame 2 out.
	g = unitGrid(t, 20, 20, []float64{0, 2, 4})
	r = structure.ROI{Name: "one plane", Contours: []structure.Contour{square(2, 2, 12, 12, 0.3)}}
	reg = mustRasterise(t, g, &r, Options{})
	if n0, n1 := frameCount(g, reg, 0), frameCount(g, reg, 1); n0 != 100 || n1 != 0 {
		t.Errorf("single plane: %d and %d centre voxels in frames 0 and 2, want 100 and 0", n0, n1)
	}
	if v := reg.VolumeCC() * 1000; math.Abs(v-200) > 1e-9 {
		t.Errorf("single plane: volume %g mm³, want 100 mm² × 2 mm", v)
	}
}

// Feet-first and prone grids (direction cosines with −1), and a grid whose
// i axis runs along patient y, covering the same voxel centres as a
// head-first supine grid, give the same volume and the same voxels in space
// with the same fractions.
func TestFlippedGrids(t *testing.T) {
	sph := phantom.Sphere{Centre: [3]float64{3.37, -4.21, 7.93}, Radius: 10.3}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "sphere", PlaneSpacing: 2.5, PlanePhase: 0.4})
	dims := [3]int{30, 28, 26}
	h := [3]float64{1, 1.2, 1.5}
	lo := [3]float64{-12, -19, -11}
	hi := [3]float64{lo[0] + float64(dims[0]-1)*h[0], lo[1] + float64(dims[1]-1)*h[1], lo[2] + float64(dims[2]-1)*h[2]}
	type world struct{ x, y, z float64 }
	key := func(p [3]float64) world {
		r := func(v float64) float64 { return math.Round(v*1e6) / 1e6 }
		return world{r(p[0]), r(p[1]), r(p[2])}
	}
	collect := func(g *volume.Grid, reg *Region) (map[world]bool, map[world]float32) {
		c := map[world]bool{}
		f := map[world]float32{}
		for n := range reg.Centres.All() {
			c[key(g.WorldOf(g.IJK(int(n))))] = true
		}
		for n, fn := range reg.Cover.All() {
			f[key(g.WorldOf(g.IJK(int(n))))] = fn
		}
		return c, f
	}
	ref, err := volume.NewUniform(dims, lo, h, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	refReg := mustRasterise(t, ref, &roi, Options{})
	refC, refF := collect(ref, refReg)
	cases := []struct {
		name   string
		dims   [3]int
		origin [3]float64
		h      [3]float64
		dir    [3][3]float64
	}{
		{"feet-first supine", dims, [3]float64{hi[0], lo[1], hi[2]}, h, [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}}},
		{"head-first prone", dims, [3]float64{hi[0], hi[1], lo[2]}, h, [3][3]float64{{-1, 0, 0}, {0, -1, 0}, {0, 0, 1}}},
		{"feet-first prone", dims, [3]float64{lo[0], hi[1], hi[2]}, h, [3][3]float64{{1, 0, 0}, {0, -1, 0}, {0, 0, -1}}},
		{"i along y", [3]int{dims[1], dims[0], dims[2]}, [3]float64{lo[0], hi[1], lo[2]}, [3]float64{h[1], h[0], h[2]}, [3][3]float64{{0, -1, 0}, {1, 0, 0}, {0, 0, 1}}},
	}
	for _, c := range cases {
		g, err := volume.NewUniform(c.dims, c.origin, c.h, c.dir)
		if err != nil {
			t.Fatal(err)
		}
		reg := mustRasterise(t, g, &roi, Options{})
		if v, w := reg.VolumeCC(), refReg.VolumeCC(); math.Abs(v-w) > 1e-9*w {
			t.Errorf("%s: volume %.9f cm³, head-first %.9f cm³", c.name, v, w)
		}
		gc, gf := collect(g, reg)
		if len(gc) != len(refC) || len(gf) != len(refF) {
			t.Errorf("%s: %d centre voxels and %d fractions, head-first %d and %d", c.name, len(gc), len(gf), len(refC), len(refF))
		}
		for p := range refC {
			if !gc[p] {
				t.Errorf("%s: centre voxel at %v missing", c.name, p)
				break
			}
		}
		for p, f := range refF {
			if math.Abs(float64(gf[p]-f)) > 1e-6 {
				t.Errorf("%s: fraction at %v is %g, head-first %g", c.name, p, gf[p], f)
				break
			}
		}
	}
}

// An ROI half outside the grid is clipped, the outside part measured.
func TestPartlyOutside(t *testing.T) {
	// Grid voxels span x ∈ [0, 40]; the sphere is centred on x = 0, so
	// exactly half of each (symmetric, 64-vertex) polygon lies outside.
	g, err := volume.NewUniform([3]int{40, 60, 60}, [3]float64{0.5, -29.5, -29.5}, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	sph := phantom.Sphere{Centre: [3]float64{0, 0.3, 0.2}, Radius: 20}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "half out", PlaneSpacing: 2})
	reg := mustRasterise(t, g, &roi, Options{})
	if f := reg.OutsideFraction(); math.Abs(f-0.5) > 1e-9 {
		t.Errorf("outside fraction %g, want 0.5", f)
	}
	if v, want := reg.VolumeCC(), reg.ContourCC/2; math.Abs(v-want) > 0.01*want {
		t.Errorf("rasterised volume %g cm³, want about half the contoured %g cm³", v, reg.ContourCC)
	}
	notes := strings.Join(reg.Notes(), "; ")
	if !strings.Contains(notes, "50.0 %") || !strings.Contains(notes, "outside the dose grid") {
		t.Errorf("notes %q do not report the outside part", notes)
	}
	// Entirely outside: empty, all outside, no crash.
	far := mustROI(t, phantom.Sphere{Centre: [3]float64{-50, 0, 0}, Radius: 5}, phantom.ROISpec{Name: "far", PlaneSpacing: 2})
	reg = mustRasterise(t, g, &far, Options{})
	if !reg.Empty() || math.Abs(reg.OutsideFraction()-1) > 1e-12 {
		t.Errorf("ROI outside the grid: empty %v, outside fraction %g", reg.Empty(), reg.OutsideFraction())
	}
	// Beyond the grid along z only.
	high := mustROI(t, phantom.Sphere{Centre: [3]float64{20, 0, 30}, Radius: 8}, phantom.ROISpec{Name: "top", PlaneSpacing: 1})
	reg = mustRasterise(t, g, &high, Options{})
	if f := reg.OutsideFraction(); !(f > 0.4 && f < 0.6) || reg.Empty() {
		t.Errorf("ROI across the top of the grid: outside fraction %g, empty %v", f, reg.Empty())
	}
}

// ROIs without usable contours; overlapping ROIs; invalid input.
func TestSpecialROIs(t *testing.T) {
	g := unitGrid(t, 20, 20, []float64{0, 1, 2, 3})
	z, err := NewRasteriser(g, Options{})
	if err != nil {
		t.Fatal(err)
	}
	none, err := z.Rasterise(&structure.ROI{Name: "empty"}, Other)
	if err != nil || !none.NoContours || !none.Empty() || !slices.Contains(none.Notes(), "no contours") {
		t.Errorf("ROI with no contours: err %v, NoContours %v, notes %q", err, none.NoContours, none.Notes())
	}
	pts := structure.ROI{Name: "marker", Contours: []structure.Contour{
		{Type: structure.Point, Points: [][3]float64{{5, 5, 1}}},
		{Type: structure.OpenPlanar, Points: [][3]float64{{1, 1, 1}, {5, 5, 1}, {9, 1, 1}}},
	}}
	reg, err := z.Rasterise(&pts, Other)
	if err != nil || !reg.Empty() || reg.NoContours || len(reg.Skipped) != 2 {
		t.Fatalf("POINT/OPEN_PLANAR ROI: err %v, empty %v, skipped %v", err, reg.Empty(), reg.Skipped)
	}
	if n := strings.Join(reg.Notes(), "; "); !strings.Contains(n, "1 POINT contour(s) not rasterised") || !strings.Contains(n, "1 OPEN_PLANAR") || !strings.Contains(n, "nothing rasterised") {
		t.Errorf("notes %q do not list the skipped contours", n)
	}
	pointOnly := structure.ROI{Name: "iso", Contours: []structure.Contour{{Type: structure.Point, Points: [][3]float64{{5, 5, 1}}}}}
	if reg, err := z.Rasterise(&pointOnly, Other); err != nil || !reg.Empty() || reg.Planes != 0 || len(reg.Skipped) != 1 || reg.Skipped[0].Type != structure.Point {
		t.Errorf("POINT-only ROI: err %v, region %+v", err, reg)
	}
	// Non-axial and too short closed contours are skipped, the rest kept.
	mixed := structure.ROI{Name: "mixed", Contours: []structure.Contour{
		square(2, 2, 8, 8, 1),
		{Type: structure.ClosedPlanar, Points: [][3]float64{{1, 1, 0}, {5, 1, 1}, {5, 5, 2}}},
		{Type: structure.ClosedPlanar, Points: [][3]float64{{1, 1, 1}, {5, 1, 1}}},
	}}
	reg, err = z.Rasterise(&mixed, Other)
	if err != nil || len(reg.Skipped) != 2 || frameCount(g, reg, 1) != 36 {
		t.Errorf("mixed ROI: err %v, skipped %v, %d centre voxels", err, reg.Skipped, frameCount(g, reg, 1))
	}
	// Overlapping ROIs: each has the shared voxels.
	a := onPlanes([]float64{0, 1, 2, 3}, func(z float64) []structure.Contour { return []structure.Contour{square(2, 2, 12, 12, z)} })
	b := onPlanes([]float64{0, 1, 2, 3}, func(z float64) []structure.Contour { return []structure.Contour{square(8, 8, 18, 18, z)} })
	ra, _ := z.Rasterise(&a, Target)
	rb, _ := z.Rasterise(&b, OAR)
	if !insideAt(g, ra, 10, 10, 1) || !insideAt(g, rb, 10, 10, 1) || ra.Centres.Len() != 400 || rb.Centres.Len() != 400 {
		t.Errorf("overlapping ROIs: %d and %d centre voxels, shared voxel in both: %v %v", ra.Centres.Len(), rb.Centres.Len(), insideAt(g, ra, 10, 10, 1), insideAt(g, rb, 10, 10, 1))
	}
	// A non-finite coordinate is an error naming the ROI.
	bad := structure.ROI{Name: "Rectum", Number: 3, Contours: []structure.Contour{{Type: structure.ClosedPlanar, Points: [][3]float64{{1, 1, 1}, {math.NaN(), 1, 1}, {5, 5, 1}}}}}
	if _, err := z.Rasterise(&bad, OAR); err == nil || !strings.Contains(err.Error(), `"Rectum"`) {
		t.Errorf("NaN coordinate: error %v, want one naming the ROI", err)
	}
}

// A grid whose frames do not run along patient z is refused.
func TestGridNotAxial(t *testing.T) {
	g, err := volume.NewUniform([3]int{4, 4, 4}, [3]float64{}, [3]float64{1, 1, 1}, [3][3]float64{{1, 0, 0}, {0, 0, 1}, {0, 1, 0}})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := NewRasteriser(g, Options{}); err == nil || !strings.Contains(err.Error(), "not z") {
		t.Errorf("coronal grid: error %v", err)
	}
	g2 := unitGrid(t, 4, 4, []float64{0, 1})
	for _, o := range []Options{{InPlane: -1}, {SubSlices: MaxSubSamples + 1}, {SingleSampleThickness: -1}} {
		if _, err := NewRasteriser(g2, o); err == nil {
			t.Errorf("options %+v accepted", o)
		}
	}
}

// Sub-sampling parameters: more sub-samples give a volume at least as close
// to the contoured volume for a sphere on a coarse grid.
func TestSubSamplingConverges(t *testing.T) {
	sph := phantom.Sphere{Centre: [3]float64{0.3, 0.2, 0.1}, Radius: 6}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "s", PlaneSpacing: 1, PointsPerContour: 128})
	g := boxGrid(t, [3]float64{-6, -6, -6}, [3]float64{6, 6, 6}, [3]float64{3, 3, 3}, [3]float64{0.4, 0.7, 1.1})
	var errs []float64
	for _, n := range []int{1, 4, 16} {
		reg := mustRasterise(t, g, &roi, Options{InPlane: n, SubSlices: n})
		errs = append(errs, math.Abs(relErr(reg.VolumeCC(), reg.ContourCC)))
	}
	if !(errs[2] < 0.01 && errs[2] < errs[0]) {
		t.Errorf("relative volume errors at 1, 4, 16 sub-samples: %v; want the last below 1 %% and below the first", errs)
	}
}

// Single-frame grids use the single-sample thickness.
func TestSingleFrameGrid(t *testing.T) {
	g := unitGrid(t, 20, 20, []float64{1})
	r := structure.ROI{Name: "slab", Contours: []structure.Contour{square(2, 2, 12, 12, 0), square(2, 2, 12, 12, 1), square(2, 2, 12, 12, 2)}}
	reg := mustRasterise(t, g, &r, Options{SingleSampleThickness: 3})
	if v := reg.VolumeCC() * 1000; math.Abs(v-300) > 1e-9 {
		t.Errorf("volume %g mm³, want 100 mm² × 3 mm", v)
	}
	reg = mustRasterise(t, g, &r, Options{}) // default: mean in-plane spacing, 1 mm
	if v := reg.VolumeCC() * 1000; math.Abs(v-100) > 1e-9 {
		t.Errorf("default single-frame thickness: volume %g mm³, want 100 mm² × 1 mm", v)
	}
}

// Vertices and edges exactly on rows of voxel centres: the half-open rule
// (an edge spans [y0, y1) along the row axis, a span [x0, x1) along the row)
// counts a vertex through which the boundary passes once and a local
// extremum twice or not at all, so the count equals the area. A diamond of
// half-diagonal 5 with vertices on centres has area 50; a square whose edges
// lie on centre rows and columns, [2.5, 7.5]², has area 25.
func TestVerticesOnRows(t *testing.T) {
	g := unitGrid(t, 24, 24, []float64{0, 1, 2})
	diamond := onPlanes([]float64{0, 1, 2}, func(z float64) []structure.Contour {
		return []structure.Contour{{Type: structure.ClosedPlanar, Points: [][3]float64{
			{10.5, 5.5, z}, {15.5, 10.5, z}, {10.5, 15.5, z}, {5.5, 10.5, z},
		}}}
	})
	reg := mustRasterise(t, g, &diamond, Options{})
	if n := frameCount(g, reg, 1); n != 50 {
		t.Errorf("diamond: %d centre voxels, want 50", n)
	}
	if !insideAt(g, reg, 5, 10, 1) || insideAt(g, reg, 15, 10, 1) {
		t.Error("diamond: the row through the side vertices is not [5.5, 15.5)")
	}
	sq := onPlanes([]float64{0, 1, 2}, func(z float64) []structure.Contour {
		return []structure.Contour{reversed(square(2.5, 2.5, 7.5, 7.5, z))}
	})
	reg = mustRasterise(t, g, &sq, Options{})
	if n := frameCount(g, reg, 1); n != 25 {
		t.Errorf("square on centre rows: %d centre voxels, want 25", n)
	}
	// With sub-samples on the vertex rows (InPlane 1 puts them on the
	// centres), fractions follow the same rule: volume 50 mm² × 3 mm.
	reg = mustRasterise(t, g, &diamond, Options{InPlane: 1})
	if v := reg.VolumeCC() * 1000; math.Abs(v-150) > 1e-9 {
		t.Errorf("diamond, one sub-sample per voxel: volume %g mm³, want 150", v)
	}
}

// Contours that cover each other (issue 11, item 12). By the even-odd rule
// alone, the same contour twice cancels (an ROI drawn twice had volume 0,
// "smaller than a voxel", and no word), and two overlapping contours give
// their symmetric difference. Contours that overlap without one inside the
// other are now filled as their union (the same contour twice counts once)
// and recorded in Region.Overlaps; nested contours stay holes and islands.
// Truth: areas of axis-aligned squares on whole mm, on the 1 mm unit grid
// whose voxel centres lie on half mm, so every count is exact: |A ∪ B| =
// |A| + |B| − |A ∩ B|.
func TestContoursThatCancel(t *testing.T) {
	zs := []float64{0, 1, 2, 3}
	g := unitGrid(t, 40, 40, zs)
	withExtraVertex := func(z float64) structure.Contour {
		// [5, 35]² with a vertex in the middle of each side.
		return structure.Contour{Type: structure.ClosedPlanar, Points: [][3]float64{
			{5, 5, z}, {20, 5, z}, {35, 5, z}, {35, 20, z}, {35, 35, z}, {20, 35, z}, {5, 35, z}, {5, 20, z},
		}}
	}
	rotated := func(c structure.Contour) structure.Contour {
		return structure.Contour{Type: c.Type, Points: append(append([][3]float64{}, c.Points[2:]...), c.Points[:2]...)}
	}
	for _, tc := range []struct {
		name     string
		contours func(z float64) []structure.Contour
		want     int // centre voxels (and mm²) per frame
		kinds    []OverlapKind
	}{
		{"same_contour_twice", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), square(5, 5, 35, 35, z)}
		}, 900, []OverlapKind{Duplicate}},
		{"twice_reversed_and_rotated", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), rotated(reversed(square(5, 5, 35, 35, z)))}
		}, 900, []OverlapKind{Duplicate}},
		{"twice_other_vertices", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), withExtraVertex(z)}
		}, 900, []OverlapKind{Duplicate}},
		{"three_times", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), square(5, 5, 35, 35, z), square(5, 5, 35, 35, z)}
		}, 900, []OverlapKind{Duplicate, Duplicate, Duplicate}},
		// 20² + 20² − 10² = 700 (even-odd: 800 − 2·100 = 600).
		{"partial_overlap", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 25, 25, z), square(15, 15, 35, 35, z)}
		}, 700, []OverlapKind{Partial}},
		// A hole drawn twice is one hole: 30² − 10² = 800.
		{"hole_twice", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), square(15, 15, 25, 25, z), square(15, 15, 25, 25, z)}
		}, 800, []OverlapKind{Duplicate}},
		// Two overlapping holes in an outline: 40² − (15² + 15² − 10²) = 1250.
		{"overlapping_holes", func(z float64) []structure.Contour {
			return []structure.Contour{square(0, 0, 40, 40, z), square(5, 5, 20, 20, z), square(10, 10, 25, 25, z)}
		}, 1250, []OverlapKind{Partial}},
		// Nested and disjoint contours are not overlaps: even-odd as before.
		{"hole", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 35, 35, z), square(15, 15, 25, 25, z)}
		}, 800, nil},
		{"islands_touching", func(z float64) []structure.Contour {
			return []structure.Contour{square(5, 5, 20, 35, z), square(20, 5, 35, 35, z)}
		}, 900, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := onPlanes(zs, tc.contours)
			reg := mustRasterise(t, g, &r, Options{})
			for k := range zs {
				if n := frameCount(g, reg, k); n != tc.want {
					t.Errorf("frame %d: %d centre voxels, want %d", k, n, tc.want)
				}
			}
			// Every edge on whole mm: fractions 0 or 1, volume exact.
			if v := reg.VolumeCC() * 1000; math.Abs(v-float64(tc.want*len(zs))) > 1e-6 {
				t.Errorf("volume %g mm³, want %d", v, tc.want*len(zs))
			}
			if math.Abs(reg.ContourCC*1000-float64(tc.want*len(zs))) > 1e-6 {
				t.Errorf("contoured volume %g mm³, want %d", reg.ContourCC*1000, tc.want*len(zs))
			}
			var kinds []OverlapKind
			for _, o := range reg.Overlaps {
				if o.Z == zs[0] {
					kinds = append(kinds, o.Kind)
				}
			}
			if !slices.Equal(kinds, tc.kinds) || len(reg.Overlaps) != len(tc.kinds)*len(zs) {
				t.Errorf("overlaps %+v, want %v on each of the %d planes", reg.Overlaps, tc.kinds, len(zs))
			}
			summary := strings.Join(reg.Notes(), "\n")
			if tc.kinds != nil && !strings.Contains(summary, tc.kinds[0].String()+" on 4 planes (z = 0, 1, 2, 3 mm)") {
				t.Errorf("notes do not name the planes: %q", summary)
			}
		})
	}
}

// TestRegionListsTrimmed: a region's voxel lists keep no more than a
// thirty-second of their length as spare room once rasterised (they are held
// to the end of a comparison), whatever the estimate that sized them.
func TestRegionListsTrimmed(t *testing.T) {
	for _, radius := range []float64{3, 20} {
		sph := phantom.Sphere{Centre: [3]float64{0.3, -0.2, 0.1}, Radius: radius}
		roi := mustROI(t, sph, phantom.ROISpec{Name: "sphere", PlaneSpacing: 2})
		g := boxGrid(t, [3]float64{-22, -22, -22}, [3]float64{22, 22, 22}, [3]float64{1, 1, 1}, [3]float64{0.25, 0.25, 0.25})
		reg := mustRasterise(t, g, &roi, Options{})
		for name, lc := range map[string][2]int{
			"Centres": {len(reg.Centres.Runs()), cap(reg.Centres.Runs())}, "Cover": {len(reg.Cover.Voxels.Runs()), cap(reg.Cover.Voxels.Runs())},
			"partial": {len(reg.Cover.partial), cap(reg.Cover.partial)}, "fraction": {len(reg.Cover.fraction), cap(reg.Cover.fraction)},
		} {
			if lc[0] == 0 || lc[1]-lc[0] > lc[0]/32 {
				t.Errorf("radius %g: %s has length %d and capacity %d", radius, name, lc[0], lc[1])
			}
		}
	}
}
