package analysis

import (
	"context"
	"errors"
	"math"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strings"
	"sync/atomic"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/gamma"
	"voxgamma/phantom"
	"voxgamma/result"
	"voxgamma/structure"
	"voxgamma/volume"
)

// writeCase writes a reference, an evaluated dose and a structure set made
// by the given functions into a temporary folder and returns the inputs.
func writeCase(t *testing.T, ref, eval *volume.Grid, rois []structure.ROI) Inputs {
	t.Helper()
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("PHANTOM^TEST", "VG-TEST-001")
	in := Inputs{Reference: filepath.Join(dir, "ref.dcm"), Evaluated: filepath.Join(dir, "eval.dcm")}
	if _, err := dicomio.WriteDose(in.Reference, ref, ids, dicomio.DoseOptions("test reference")); err != nil {
		t.Fatal(err)
	}
	if _, err := dicomio.WriteDose(in.Evaluated, eval, ids, dicomio.DoseOptions("test evaluated")); err != nil {
		t.Fatal(err)
	}
	if rois != nil {
		in.Structures = filepath.Join(dir, "rs.dcm")
		set := &structure.Set{Label: "TEST", FrameOfReferenceUID: ids.FrameOfReferenceUID, ROIs: rois}
		if _, err := dicomio.WriteStructureSet(in.Structures, set, ids); err != nil {
			t.Fatal(err)
		}
	}
	return in
}

func grid(t *testing.T, dims [3]int, origin [3]float64, step float64, fn phantom.DoseFunc) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform(dims, origin, [3]float64{step, step, step}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	if err := phantom.Fill(g, fn); err != nil {
		t.Fatal(err)
	}
	return g
}

func sphereROI(t *testing.T, name, typ string, number int, s phantom.Sphere) structure.ROI {
	t.Helper()
	r, err := phantom.NewROI(s, phantom.ROISpec{Name: name, Number: number, InterpretedType: typ, PlaneSpacing: 1, PointsPerContour: 48})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// sphereErrorCase writes a 31 × 21 × 21 grid of 1 mm voxels (x −15 … 15 mm)
// holding dose field as the reference, the same field multiplied by factor
// inside the target sphere as the evaluated dose, and a structure set with
// the target as "PTV" and oar as "Cord".
func sphereErrorCase(t *testing.T, field phantom.DoseFunc, target, oar phantom.Sphere, factor float64) Inputs {
	t.Helper()
	ref := grid(t, [3]int{31, 21, 21}, [3]float64{-15, -10, -10}, 1, field)
	eval := grid(t, [3]int{31, 21, 21}, [3]float64{-15, -10, -10}, 1, func(p [3]float64) float64 {
		d := field(p)
		if target.Inside(p) {
			d *= factor
		}
		return d
	})
	return writeCase(t, ref, eval, []structure.ROI{sphereROI(t, "PTV", "PTV", 1, target), sphereROI(t, "Cord", "ORGAN", 2, oar)})
}

// prepareCase loads and prepares the inputs.
func prepareCase(t *testing.T, in Inputs, s Settings) *Prepared {
	t.Helper()
	l, err := Load(in)
	if err != nil {
		t.Fatal(err)
	}
	p, err := Prepare(l, s)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func runCase(t *testing.T, in Inputs, s Settings) *Outcome {
	t.Helper()
	out, err := prepareCase(t, in, s).Run(context.Background(), s)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func roiByName(t *testing.T, r *result.Result, name string) result.ROI {
	t.Helper()
	for _, x := range r.ROIs {
		if x.Name == name {
			return x
		}
	}
	t.Fatalf("no ROI %q in the result", name)
	return result.ROI{}
}

// TestPerROIFromOneMap checks that per-ROI statistics come from the one Γ
// map (counts, failing volume and centroid recounted from the map itself):
// a flat 10 Gy field evaluated 5 % low inside a 6 mm target sphere, and an
// OAR sphere in a region below the low-dose threshold.
func TestPerROIFromOneMap(t *testing.T) {
	target := phantom.Sphere{Centre: [3]float64{-6, 0, 0}, Radius: 6}
	oar := phantom.Sphere{Centre: [3]float64{10, 0, 0}, Radius: 3}
	flat := func(p [3]float64) float64 {
		if p[0] > 5 {
			return 0.5 // below the 10 % threshold of 10 Gy
		}
		return 10
	}
	in := sphereErrorCase(t, flat, target, oar, 0.95)
	s := Settings{Criteria: gamma.Criteria{DosePercent: 3, DTA: 2, NormDose: 10, ThresholdPercent: 10}}
	out := runCase(t, in, s)
	r := out.Result
	ptv := roiByName(t, r, "PTV")
	if ptv.Kind != "target" || ptv.Status != "evaluated" {
		t.Fatalf("PTV: %+v", ptv)
	}
	// Recount from the map: the centre voxels of the region.
	var reg = out.Regions[0]
	passed, evaluated := 0, 0
	for n := range reg.Centres.All() {
		if g := out.Gamma.Data[n]; !math.IsNaN(float64(g)) {
			evaluated++
			if g <= 1 {
				passed++
			}
		}
	}
	if ptv.Evaluated != evaluated || ptv.Passed != passed || evaluated == 0 {
		t.Fatalf("PTV evaluated %d passed %d; the map says %d and %d", ptv.Evaluated, ptv.Passed, evaluated, passed)
	}
	if passed == evaluated {
		t.Fatal("a 5 % error inside a 6 mm sphere at 3 %/2 mm should fail its core")
	}
	cord := roiByName(t, r, "Cord")
	if cord.Kind != "oar" || cord.Status != "not evaluated: all below threshold" || cord.PassRate != nil || cord.Evaluated != 0 {
		t.Fatalf("Cord: kind %s status %q pass rate %v", cord.Kind, cord.Status, cord.PassRate)
	}
	if cord.BelowThreshold != cord.Voxels || cord.Voxels == 0 {
		t.Fatalf("Cord: %d voxels, %d below threshold", cord.Voxels, cord.BelowThreshold)
	}
	// Failing volume: the failing centre voxels of 1 mm³ each.
	if want := float64(evaluated-passed) / 1000; math.Abs(ptv.FailingVolumeCC-want) > 1e-9 {
		t.Fatalf("PTV failing volume %g cc, want %g", ptv.FailingVolumeCC, want)
	}
	// The failing voxels are the sphere's core, so their centroid is the
	// sphere's centre by symmetry (grid nodes are symmetric about it).
	if c := ptv.WorstCentroidMM; c == nil || math.Abs(c[0]+6)+math.Abs(c[1])+math.Abs(c[2]) > 1e-6 {
		t.Fatalf("failing centroid %v, want the sphere centre", c)
	}
	// "all targets" exists and equals the one target.
	all := roiByName(t, r, "all targets")
	if all.Evaluated != ptv.Evaluated || all.Passed != ptv.Passed {
		t.Fatalf("all targets %d/%d, PTV %d/%d", all.Passed, all.Evaluated, ptv.Passed, ptv.Evaluated)
	}
	// One failing cluster, touching PTV, of the failing volume.
	if len(r.Clusters) != 1 || math.Abs(r.Clusters[0].VolumeCC-ptv.FailingVolumeCC) > 1e-9 || strings.Join(r.Clusters[0].ROIs, ",") != "PTV" {
		t.Fatalf("clusters %+v", r.Clusters)
	}
}

// TestClusters checks 26-connectivity: voxels touching only at a corner are
// one cluster, voxels two apart are two (connected-component labelling,
// common practice, no source).
func TestClusters(t *testing.T) {
	fails := map[[3]int]bool{
		{5, 5, 5}: true, {6, 6, 6}: true, // corner neighbours: one cluster
		{5, 5, 6}:  true,                   // face neighbour of the first
		{12, 5, 5}: true, {14, 5, 5}: true, // two apart: two singletons
	}
	ref := grid(t, [3]int{20, 12, 12}, [3]float64{0, 0, 0}, 1, phantom.Uniform(10))
	eval := ref.Clone()
	for v := range fails {
		eval.Set(v[0], v[1], v[2], 5) // 50 % low at one voxel
	}
	// With DTA 0.5 mm on a 1 mm grid, a one-voxel dip cannot be reached
	// from a voxel that does not hold it, so exactly the dipped voxels fail.
	in := writeCase(t, ref, eval, nil)
	s := Settings{Criteria: gamma.Criteria{DosePercent: 3, DTA: 0.5, NormDose: 10, ThresholdPercent: 10}}
	out := runCase(t, in, s)
	cs := out.Result.Clusters
	if len(cs) != 3 {
		t.Fatalf("%d clusters, want 3: %+v", len(cs), cs)
	}
	if cs[0].Voxels != 3 || cs[1].Voxels != 1 || cs[2].Voxels != 1 {
		t.Fatalf("cluster sizes %d %d %d, want 3 1 1", cs[0].Voxels, cs[1].Voxels, cs[2].Voxels)
	}
	// Centroid of (5,5,5), (6,6,6), (5,5,6) in mm (origin 0, 1 mm steps).
	want := [3]float64{16.0 / 3, 16.0 / 3, 17.0 / 3}
	for a := 0; a < 3; a++ {
		if math.Abs(cs[0].CentroidMM[a]-want[a]) > 0.006 {
			t.Fatalf("centroid %v, want %v", cs[0].CentroidMM, want)
		}
	}
	// Smaller ones first by position: x = 12 before x = 14.
	if cs[1].CentroidMM[0] != 12 || cs[2].CentroidMM[0] != 14 {
		t.Fatalf("order %v %v", cs[1].CentroidMM, cs[2].CentroidMM)
	}
}

// TestSubGrid checks that a small target evaluated on a 0.5 mm sub-grid is
// judged on many more points than its voxels, and that for a linear dose
// (exact under trilinear interpolation) shifted along x every sub-grid point
// has the closed-form Γ (TestLinearGradientShift in package gamma), so the
// pass rate is all or nothing.
func TestSubGrid(t *testing.T) {
	const g, s = 0.5, 1.0 // Gy/mm, mm
	target := phantom.Sphere{Centre: [3]float64{0.3, -0.2, 0.1}, Radius: 3}
	ramp := func(p [3]float64) float64 { return 20 + g*p[0] }
	ref := grid(t, [3]int{25, 25, 25}, [3]float64{-12, -12, -12}, 1, ramp)
	eval := grid(t, [3]int{25, 25, 25}, [3]float64{-12, -12, -12}, 1, func(p [3]float64) float64 { return ramp(p) - g*s })
	in := writeCase(t, ref, eval, []structure.ROI{sphereROI(t, "GTV_small", "GTV", 1, target)})
	set := Settings{Criteria: gamma.Criteria{DosePercent: 3, DTA: 2, NormDose: 20, ThresholdPercent: 10}, SubGridROIs: []string{"gtv_small"}, SubGridStep: 0.5}
	out := runCase(t, in, set)
	x := roiByName(t, out.Result, "GTV_small")
	if x.SubGridMM == nil || *x.SubGridMM != 0.5 {
		t.Fatalf("sub-grid not recorded: %v", x.SubGridMM)
	}
	if x.Evaluated < 4*x.Voxels {
		t.Fatalf("%d sub-grid points for %d voxels: want several times more", x.Evaluated, x.Voxels)
	}
	// The sphere's volume 4/3·π·3³ = 113 mm³ at 0.125 mm³ per point.
	if math.Abs(float64(x.Evaluated)-113.1/0.125)/(113.1/0.125) > 0.08 {
		t.Fatalf("%d sub-grid points, want about %.0f", x.Evaluated, 113.1/0.125)
	}
	// The files store doses as 16-bit integers × DoseGridScaling (about
	// 26 Gy/65535 = 4e-4 Gy here), so each dose is off by up to 2e-4 Gy and
	// a difference by up to 4e-4 Gy: on a ramp of 0.5 Gy/mm that is a shift
	// of 8e-4 mm, which moves Γ = s/√(Δd² + (ΔD/g)²) by at most
	// 8e-4/√(4 + 1.44) ≈ 3.4e-4. Tolerance 5e-4.
	want := s / math.Sqrt(4+math.Pow(0.03*20/g, 2))
	if x.GammaMax == nil || math.Abs(*x.GammaMax-want) > 5e-4 || math.Abs(*x.GammaMean-want) > 5e-4 {
		t.Fatalf("sub-grid Γ mean %v max %v, closed form %g", *x.GammaMean, *x.GammaMax, want)
	}
	if !strings.Contains(strings.Join(out.Result.Notes, "\n"), "sub-grid") {
		t.Fatal("the result does not say the sub-grid was used")
	}
}

// TestSubGridSizeCheck: the sub-grid's point count is checked without
// overflow (issue 11, item 9): a step of 1e-12 mm asks for about 10^40
// points, whose int product once wrapped past the limit into Go's fatal
// "out of memory"; a step wider than the ROI leaves one point per axis.
// Both are bad input naming the option and the ROI, given by Prepare,
// before any comparison runs.
func TestSubGridSizeCheck(t *testing.T) {
	ref := grid(t, [3]int{25, 25, 25}, [3]float64{-12, -12, -12}, 1, phantom.Uniform(20))
	in := writeCase(t, ref, ref, []structure.ROI{sphereROI(t, "GTV_small", "GTV", 1, phantom.Sphere{Radius: 3})})
	for _, step := range []float64{1e-12, 1e-300, 1e300} {
		set := Settings{Criteria: gamma.Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10}, SubGridROIs: []string{"GTV_small"}, SubGridStep: step}
		l, err := Load(in)
		if err != nil {
			t.Fatal(err)
		}
		_, err = Prepare(l, set)
		if !errors.Is(err, ErrBadInput) || !strings.Contains(err.Error(), "--subgrid-step") || !strings.Contains(err.Error(), "GTV_small") {
			t.Errorf("step %g: error %v, want bad input naming --subgrid-step and the ROI", step, err)
		}
	}
}

// TestSubGridMemoryBudget: a sub-grid that would take the process beyond
// the soft memory limit its command set (the budget) is refused as bad
// input naming the ROI, the step and --max-memory; under a generous limit
// the same case runs. (A project rule: the sub-grid's need is not in the
// estimate made before the comparison.) The budget is checked when the
// sub-grid is laid out, by Prepare, before the comparison runs, and again
// when its own comparison starts, after the main one.
func TestSubGridMemoryBudget(t *testing.T) {
	ref := grid(t, [3]int{25, 25, 25}, [3]float64{-12, -12, -12}, 1, phantom.Uniform(20))
	in := writeCase(t, ref, ref, []structure.ROI{sphereROI(t, "GTV_small", "GTV", 1, phantom.Sphere{Radius: 3})})
	set := Settings{Criteria: gamma.Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10}, SubGridROIs: []string{"GTV_small"}, SubGridStep: 0.5}
	old := debug.SetMemoryLimit(-1)
	defer debug.SetMemoryLimit(old)
	refused := func(err error) bool {
		return errors.Is(err, ErrBadInput) && strings.Contains(err.Error(), "GTV_small") && strings.Contains(err.Error(), "--max-memory") && strings.Contains(err.Error(), "--subgrid-step 0.5")
	}
	for _, c := range []struct {
		run int64 // the limit while running (none while preparing)
		ok  bool
	}{{1 << 40, true}, {1, false}} {
		p := prepareCase(t, in, set)
		debug.SetMemoryLimit(c.run)
		_, err := p.Run(context.Background(), set)
		debug.SetMemoryLimit(old)
		switch {
		case c.ok && err != nil:
			t.Errorf("limit %d: %v", c.run, err)
		case !c.ok && !refused(err):
			t.Errorf("limit %d while running: error %v, want bad input naming the ROI, the step and --max-memory", c.run, err)
		}
	}
	// Over the budget already when laid out: Prepare refuses.
	l, err := Load(in)
	if err != nil {
		t.Fatal(err)
	}
	debug.SetMemoryLimit(1)
	_, err = Prepare(l, set)
	debug.SetMemoryLimit(old)
	if !refused(err) {
		t.Errorf("limit 1 while preparing: error %v, want bad input naming the ROI, the step and --max-memory", err)
	}
}

// TestPartlyOutsideAndEmpty checks an ROI partly outside the dose grid
// (reported, not crashed), an ROI with no contours and a POINT-only ROI.
func TestPartlyOutsideAndEmpty(t *testing.T) {
	ref := grid(t, [3]int{21, 21, 21}, [3]float64{-10, -10, -10}, 1, phantom.Uniform(5))
	eval := ref.Clone()
	edge := sphereROI(t, "Edge", "ORGAN", 1, phantom.Sphere{Centre: [3]float64{10, 0, 0}, Radius: 4})
	empty := structure.ROI{Number: 2, Name: "Empty", InterpretedType: "ORGAN"}
	point := structure.ROI{Number: 3, Name: "Marker", InterpretedType: "MARKER", Contours: []structure.Contour{{Type: structure.Point, Points: [][3]float64{{0, 0, 0}}}}}
	in := writeCase(t, ref, eval, []structure.ROI{edge, empty, point})
	out := runCase(t, in, Settings{Criteria: gamma.TG218()})
	r := out.Result
	if e := roiByName(t, r, "Edge"); e.Status != "evaluated" || e.PassRate == nil || *e.PassRate != 100 {
		t.Fatalf("Edge: %+v", e)
	}
	if !strings.Contains(strings.Join(r.Warnings, "\n"), `ROI "Edge"`) {
		t.Fatalf("no warning about the part of Edge outside the grid: %v", r.Warnings)
	}
	if e := roiByName(t, r, "Empty"); e.Status != "not evaluated: no contours" || e.PassRate != nil {
		t.Fatalf("Empty: %+v", e)
	}
	if m := roiByName(t, r, "Marker"); !strings.Contains(string(m.Status), "points or open contours only") {
		t.Fatalf("Marker: %+v", m)
	}
}

func TestReadPoints(t *testing.T) {
	good := "x_mm,y_mm,z_mm,dose_gy\n1,2,3,4.5\n-1.5, 0, 2e1, 0\n"
	pts, err := ParsePoints(strings.NewReader(good), "good.csv")
	if err != nil || len(pts) != 2 || pts[1].Pos != [3]float64{-1.5, 0, 20} || pts[0].Dose != 4.5 {
		t.Fatalf("%v %v", pts, err)
	}
	for name, bad := range map[string]string{
		"header":   "x,y,z,d\n1,2,3,4\n",
		"fields":   "x_mm,y_mm,z_mm,dose_gy\n1,2,3\n",
		"number":   "x_mm,y_mm,z_mm,dose_gy\n1,2,abc,4\n",
		"nan":      "x_mm,y_mm,z_mm,dose_gy\n1,2,NaN,4\n",
		"negative": "x_mm,y_mm,z_mm,dose_gy\n1,2,3,-4\n",
		"empty":    "",
		"no rows":  "x_mm,y_mm,z_mm,dose_gy\n",
	} {
		if _, err := ParsePoints(strings.NewReader(bad), "bad.csv"); err == nil || !strings.Contains(err.Error(), "bad.csv") {
			t.Errorf("%s: error %v, want one naming bad.csv", name, err)
		}
	}
}

// TestRawFiguresPerROI checks the figures a noise-corrected comparison
// keeps of its raw comparison (only statistics are kept, its Γ map is
// dropped before the second comparison): the raw overall and each ROI's
// raw statistics, structure-set ROIs, derived ROIs and an isodose region
// alike, equal those of a comparison of the reference against the
// evaluated dose as given, recounted over each region's voxels. The doses:
// a field sloping 0.2 Gy/mm along x, 3 % high in the target sphere, and a
// given σ of 2 %, so that a correction is made.
func TestRawFiguresPerROI(t *testing.T) {
	target := phantom.Sphere{Centre: [3]float64{-6, 0, 0}, Radius: 6}
	oar := phantom.Sphere{Centre: [3]float64{8, 0, 0}, Radius: 3}
	field := func(p [3]float64) float64 { return 10 - 0.2*p[0] }
	in := sphereErrorCase(t, field, target, oar, 1.03)
	s := Settings{
		Criteria:        gamma.Criteria{DosePercent: 2, DTA: 2, NormDose: 10, ThresholdPercent: 10},
		Noise:           NoiseSettings{Handling: NoiseGiven, Percent: 2},
		IsodosePercents: []float64{110},
	}
	p := prepareCase(t, in, s)
	out, err := p.Run(context.Background(), s)
	if err != nil {
		t.Fatal(err)
	}
	n := out.Result.Noise
	if n == nil || !n.Corrected {
		t.Fatalf("no noise correction made: %+v", n)
	}
	// The raw comparison, made here on its own.
	raw, err := gamma.CompareGrids(context.Background(), p.Reference, p.Evaluated, s.Criteria, gamma.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if got, want := n.RawOverall, toGammaStats(raw.Stats); got.Evaluated != want.Evaluated || got.Passed != want.Passed || *got.GammaMean != *want.GammaMean {
		t.Fatalf("raw overall %+v, direct %+v", got, want)
	}
	var names []string
	for _, reg := range out.Regions {
		names = append(names, reg.Name)
	}
	if len(n.ROIs) != len(out.Regions) || len(out.Regions) != 4 || !strings.HasPrefix(names[3], "isodose") {
		t.Fatalf("%d raw ROI entries for the regions %q (want PTV, Cord, all targets, an isodose region)", len(n.ROIs), names)
	}
	// The corrected figures differ from the raw ones (else this test could
	// not tell them apart).
	if *out.Result.Overall.GammaMean == *n.RawOverall.GammaMean {
		t.Fatalf("corrected and raw mean Γ are the same, %v: the case does not tell them apart", *n.RawOverall.GammaMean)
	}
	for i, reg := range out.Regions {
		got, want := n.ROIs[i], toGammaStats(raw.StatsOver(&reg.Centres))
		sameMean := (got.GammaMean == nil) == (want.GammaMean == nil) && (want.GammaMean == nil || *got.GammaMean == *want.GammaMean)
		if got.Name != reg.Name || got.Evaluated != want.Evaluated || got.Passed != want.Passed || !sameMean {
			t.Fatalf("ROI %d %q: raw %+v, direct %+v", i, reg.Name, got, want)
		}
	}
}

// TestDenoisedDoseReleased checks the memory order of a noise-corrected
// comparison: the denoised dose is made after the raw comparison and is
// collected while the second comparison runs (the engine keeps only its
// interpolant), so that it never sits beside the engine's structures; with
// a sub-grid ROI, which compares against it again, it is kept to the end.
// A finalizer on its samples says when it is collected; the engine's
// progress calls collect garbage. Either way the figures are the same.
func TestDenoisedDoseReleased(t *testing.T) {
	target := phantom.Sphere{Centre: [3]float64{-6, 0, 0}, Radius: 6}
	oar := phantom.Sphere{Centre: [3]float64{8, 0, 0}, Radius: 3}
	field := func(p [3]float64) float64 { return 10 - 0.2*p[0] }
	in := sphereErrorCase(t, field, target, oar, 1.03)
	t.Cleanup(func() { denoisedHook = nil })
	var means []float64
	for _, keep := range []bool{false, true} {
		var made, freed, freedDuring atomic.Bool
		denoisedHook = func(g *volume.Grid) {
			made.Store(true)
			runtime.SetFinalizer(&g.Data[0], func(*float32) { freed.Store(true) })
		}
		s := Settings{
			Criteria: gamma.Criteria{DosePercent: 2, DTA: 2, NormDose: 10, ThresholdPercent: 10},
			Noise:    NoiseSettings{Handling: NoiseGiven, Percent: 2},
			Workers:  1,
			Progress: func(done, total int) {
				if !made.Load() {
					return // the raw comparison
				}
				runtime.GC()
				runtime.GC() // one cycle queues the finalizer, the next has run it
				if freed.Load() {
					freedDuring.Store(true)
				}
			},
		}
		if keep {
			s.SubGridROIs = []string{"PTV"}
		}
		out := runCase(t, in, s)
		if !made.Load() || out.Result.Noise == nil || !out.Result.Noise.Corrected {
			t.Fatalf("keep %v: no noise correction made", keep)
		}
		if freedDuring.Load() == keep {
			t.Errorf("keep %v: denoised dose collected during the second comparison: %v", keep, freedDuring.Load())
		}
		means = append(means, *out.Result.Overall.GammaMean)
	}
	if means[0] != means[1] {
		t.Errorf("overall mean Γ %v without a sub-grid ROI, %v with one", means[0], means[1])
	}
}
