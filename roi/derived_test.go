package roi

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

func TestDerivedRegions(t *testing.T) {
	g, err := volume.NewUniform([3]int{50, 50, 40}, [3]float64{-24.5, -24.5, -19.5}, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	set := &structure.Set{ROIs: []structure.ROI{
		mustROI(t, phantom.Sphere{Centre: [3]float64{-4, 0, 0}, Radius: 8}, phantom.ROISpec{Name: "PTV_a", Number: 1, InterpretedType: "PTV", PlaneSpacing: 2}),
		mustROI(t, phantom.Sphere{Centre: [3]float64{5, 0, 0}, Radius: 8}, phantom.ROISpec{Name: "PTV_b", Number: 2, PlaneSpacing: 2}),
		mustROI(t, phantom.Cylinder{CentreX: 0, CentreY: 10, Radius: 4, ZMin: -15, ZMax: 15}, phantom.ROISpec{Name: "Cord", Number: 3, InterpretedType: "ORGAN", PlaneSpacing: 2}),
		mustROI(t, phantom.Box{Min: [3]float64{-22, -22, -18}, Max: [3]float64{22, 22, 18}}, phantom.ROISpec{Name: "Outline", Number: 4, InterpretedType: "EXTERNAL", PlaneSpacing: 2, PlanePhase: 1}),
	}}
	z, err := NewRasteriser(g, Options{})
	if err != nil {
		t.Fatal(err)
	}
	rules := []Rule{{Pattern: "PTV*", Kind: Target}}
	regs, err := z.Set(set, rules)
	if err != nil {
		t.Fatal(err)
	}
	if regs[1].Kind != Target || regs[2].Kind != OAR || regs[3].Kind != Body {
		t.Fatalf("kinds %v %v %v", regs[1].Kind, regs[2].Kind, regs[3].Kind)
	}
	all, err := AllTargets(regs)
	if err != nil || all == nil {
		t.Fatalf("all targets: %v", err)
	}
	a, b := regs[0], regs[1]
	// Centre union: every centre of either, nothing else.
	want := map[int32]bool{}
	for _, n := range append(centreList(a), centreList(b)...) {
		want[n] = true
	}
	if got := centreList(all); len(got) != len(want) || !slices.IsSorted(got) {
		t.Errorf("union has %d centres, want %d, sorted %v", len(got), len(want), slices.IsSorted(got))
	}
	for n := range want {
		if !all.Centres.Contains(n) {
			t.Fatalf("union lacks centre %d", n)
		}
	}
	// Fractions: the maximum of the two; the union's volume is below the sum
	// (they overlap) and above either.
	fr := func(r *Region, n int32) float32 {
		idx, f := coverLists(r)
		if q, ok := slices.BinarySearch(idx, n); ok {
			return f[q]
		}
		return 0
	}
	aIdx, _ := coverLists(a)
	bIdx, _ := coverLists(b)
	allIdx, allFr := coverLists(all)
	if want := volume.RunsOf(append(aIdx, bIdx...)); want.Len() != len(allIdx) {
		t.Errorf("union covers %d voxels, want %d", len(allIdx), want.Len())
	}
	for q, n := range allIdx {
		if allFr[q] != max(fr(a, n), fr(b, n)) {
			t.Fatalf("union fraction at %d is %g, members %g and %g", n, allFr[q], fr(a, n), fr(b, n))
		}
	}
	va, vb, vu := a.VolumeCC(), b.VolumeCC(), all.VolumeCC()
	if !(vu < va+vb && vu > math.Max(va, vb)) {
		t.Errorf("union volume %g, members %g and %g", vu, va, vb)
	}
	if all.Name != "all targets" || all.Kind != Target || all.Derived == "" {
		t.Errorf("union labelled %q %v %q", all.Name, all.Kind, all.Derived)
	}
	body, err := BodyOf(regs)
	if err != nil || body == nil || body.Kind != Body || math.Abs(body.VolumeCC()-regs[3].VolumeCC()) > 1e-12 {
		t.Errorf("body: %v %+v", err, body)
	}
	if none, err := BodyOf(regs[:3]); none != nil || err != nil {
		t.Errorf("body without EXTERNAL: %v %v", none, err)
	}
	// One EXTERNAL ROI already named "body" (any case) is not listed again
	// as its own union; one named otherwise ("Outline") still is.
	named := *regs[3]
	named.Name = " BODY"
	if dup, err := BodyOf([]*Region{regs[0], &named}); dup != nil || err != nil {
		t.Errorf("union of the one EXTERNAL ROI named BODY: %v %v", dup, err)
	}
	if one, err := AllTargets(regs[:1]); one == nil || err != nil || one.Name != "all targets" {
		t.Errorf("all targets of one target named %q: %v %v", regs[0].Name, one, err)
	}

	// Isodose: voxels ≥ 50 % of 60 Gy of a Gaussian dose are those within
	// σ·sqrt(2 ln 2) of its centre.
	if err := phantom.Fill(g, phantom.Gaussian([3]float64{0, 0, 0}, 6, 60)); err != nil {
		t.Fatal(err)
	}
	iso, err := Isodose(g, 50, 60, Options{})
	if err != nil {
		t.Fatal(err)
	}
	r50 := 6 * math.Sqrt(2*math.Ln2)
	for n, v := range g.Data {
		in := iso.Centres.Contains(int32(n))
		if in != (v >= 30) {
			t.Fatalf("isodose membership of voxel %d (dose %g) is %v", n, v, in)
		}
	}
	if v, want := iso.VolumeCC()*1000, 4.0/3*math.Pi*r50*r50*r50; math.Abs(v-want) > 0.05*want {
		t.Errorf("50 %% isodose volume %g mm³, sphere of radius %g mm has %g", v, r50, want)
	}
	h, err := RegionDVH(g, iso)
	if err != nil || h.Min < 30 {
		t.Errorf("isodose DVH: %v, min %g", err, h.Min)
	}
	if _, err := Isodose(g, 0, 60, Options{}); err == nil {
		t.Error("isodose at 0 % accepted")
	}
	other, _ := volume.NewUniform([3]int{5, 5, 5}, [3]float64{}, [3]float64{1, 1, 1}, volume.Identity)
	if _, err := Union("mixed", Other, []*Region{a, iso, {Name: "x", grid: other}}); err == nil {
		t.Error("union across grids accepted")
	}
	m := all.Mask()
	if m.Count() != all.Centres.Len() {
		t.Errorf("mask has %d voxels, centres %d", m.Count(), all.Centres.Len())
	}
}

// TestIsodoseBox: the bounding box of a region made from runs of positions
// (setBox), whose runs may cross rows and slices, is the box of its voxels
// found one by one. Doses random on a small grid; levels from sparse to
// nearly all.
func TestIsodoseBox(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 2))
	g, err := volume.NewUniform([3]int{7, 5, 4}, [3]float64{}, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	for trial := 0; trial < 300; trial++ {
		for n := range g.Data {
			g.Data[n] = float32(rng.Float64())
		}
		pct := 100 * rng.Float64()
		iso, err := Isodose(g, pct, 1, Options{})
		if err != nil {
			t.Fatal(err)
		}
		want := emptyBox()
		for n, v := range g.Data {
			if float64(v) >= pct/100 {
				i, j, k := g.IJK(n)
				want.add(i, j, k)
			}
		}
		if iso.Box != want {
			t.Fatalf("trial %d, level %g %%: box %+v, want %+v", trial, pct, iso.Box, want)
		}
	}
}
