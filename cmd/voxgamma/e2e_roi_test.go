package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/phantom"
	"voxgamma/volume"
)

// roiCase is a reference with a flat 10 Gy core and a fall-off, a target
// sphere inside the core where the evaluated dose is 10 % high, and an
// organ at risk far out in low dose.
//
//   - Grid: 30×30×20 voxels of 2 mm, centres at odd mm from −29 to 29
//     (x, y) and −19 to 19 (z), the same for both doses.
//   - Reference: D = 10 Gy within r = |x − c| ≤ 16 mm of c = (−10, 0, 0),
//     10·exp(−(r − 16)²/50) Gy beyond.
//   - Evaluated: 1.1 × the reference at voxels with r ≤ 12 mm, the
//     reference elsewhere.
//   - PTV_Met (PTV): sphere of radius 6 mm at c. Brainstem (ORGAN): sphere
//     of radius 4 mm at (21, 9, 0), 32.3 mm from c.
type roiCase struct {
	dir, ref, eval, rs string
	refFile            testDose
	target, oar        phantom.Sphere
}

var roiCentre = [3]float64{-10, 0, 0}

func roiRefDose(p [3]float64) float64 {
	r := math.Sqrt((p[0]-roiCentre[0])*(p[0]-roiCentre[0]) + (p[1]-roiCentre[1])*(p[1]-roiCentre[1]) + (p[2]-roiCentre[2])*(p[2]-roiCentre[2]))
	if r <= 16 {
		return 10
	}
	return 10 * math.Exp(-(r-16)*(r-16)/50)
}

func newROICase(t *testing.T) roiCase {
	t.Helper()
	dir := t.TempDir()
	ids := phantomIDs()
	c := roiCase{dir: dir, ref: filepath.Join(dir, "RD_ref.dcm"), eval: filepath.Join(dir, "RD_eval.dcm"), rs: filepath.Join(dir, "RS.dcm"),
		target: phantom.Sphere{Centre: roiCentre, Radius: 6}, oar: phantom.Sphere{Centre: [3]float64{21, 9, 0}, Radius: 4}}
	dims, origin, sp := [3]int{30, 30, 20}, [3]float64{-29, -29, -19}, [3]float64{2, 2, 2}
	c.refFile = writeTestDose(t, c.ref, dims, origin, sp, roiRefDose, ids)
	writeTestDose(t, c.eval, dims, origin, sp, func(p [3]float64) float64 {
		d := roiRefDose(p)
		if (phantom.Sphere{Centre: roiCentre, Radius: 12}).Inside(p) {
			d *= 1.1
		}
		return d
	}, ids)
	writeTestStructures(t, c.rs, ids,
		sphereROI(t, "PTV_Met", "PTV", 1, c.target, ids.FrameOfReferenceUID),
		sphereROI(t, "Brainstem", "ORGAN", 2, c.oar, ids.FrameOfReferenceUID))
	return c
}

// TestPerROI: the target fails entirely and the organ at risk is not
// evaluated, so TG-218's per-target limit fails: verdict "fail", exit 2.
//
// Target, Γ > 1 at every voxel (from the definition, Low et al. 1998, with
// 3 %/2 mm global and D_norm = the 10 Gy maximum, ΔD = 0.3 Gy): a target
// voxel centre r_r lies within 6 mm of c (the contours are inscribed in
// the sphere). An evaluated point r_e with |r_e − r_r| ≤ Δd = 2 mm lies
// within 8 mm of c; the trilinear value there comes from the 8 corners of
// its cell, each within a cell diagonal (2√3 = 3.46 mm) of r_e, hence
// within 11.5 mm < 12 mm of c, where the evaluated dose is 11 Gy. So the
// dose term is (11 − 10)/0.3 = 3.3 > 1 wherever the spatial term is ≤ 1,
// and the spatial term is > 1 elsewhere: Γ > 1, pass rate 0.
//
// Organ at risk: its voxels lie ≥ 32.3 − 4 = 28.3 mm from c, where the
// reference is at most 10·exp(−12.3²/50) = 0.49 Gy, below the 10 %
// threshold (1 Gy): "not evaluated: all below threshold", pass rate null.
//
// The failing target voxels are the voxel centres inside the contours, a
// set symmetric about c (c lies midway between voxel centres on every
// axis, contour planes at z = ±1, ±3, ±5 mm, 64-gons symmetric in x and
// y), so their centroid is c and their volume is 8 mm³ each.
func TestPerROI(t *testing.T) {
	c := newROICase(t)
	out := filepath.Join(c.dir, "r.json")
	r := vgExit(t, exitRuleFail, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs, "--json", out)
	lines := strings.Split(strings.TrimSpace(r.stderr), "\n")
	if last := lines[len(lines)-1]; !strings.HasPrefix(last, "voxgamma: verdict fail") {
		t.Errorf("last line on stderr %q, want the verdict", last)
	}
	res := readResultJSON(t, out)
	if res.Verdict != "fail" {
		t.Errorf("verdict %q, want fail", res.Verdict)
	}

	ptv := resultROI(t, res, "PTV_Met")
	if ptv.Kind != "target" || ptv.Source != "structure set" || ptv.Status != "evaluated" || ptv.Number != 1 {
		t.Errorf("PTV_Met: kind %q source %q status %q number %d", ptv.Kind, ptv.Source, ptv.Status, ptv.Number)
	}
	if ptv.Evaluated == 0 || ptv.Evaluated != ptv.Voxels || ptv.Passed != 0 {
		t.Errorf("PTV_Met: %d voxels, %d evaluated, %d passed; want all evaluated, none passed", ptv.Voxels, ptv.Evaluated, ptv.Passed)
	}
	checkNear(t, "PTV_Met pass_rate", ptv.PassRate, 0, 0)
	if ptv.PassRateText != "0.0" {
		t.Errorf("PTV_Met pass_rate_text %q, want 0.0", ptv.PassRateText)
	}
	if g := jsonNum(ptv.GammaMax); !(jsonNum(ptv.GammaMean) > 1) || !(g > 1) {
		t.Errorf("PTV_Met Γ mean %v max %v: every voxel has Γ > 1", jsonNum(ptv.GammaMean), g)
	}
	if w := ptv.WorstCentroidMM; w == nil || math.Abs(w[0]-roiCentre[0]) > 0.011 || math.Abs(w[1]-roiCentre[1]) > 0.011 || math.Abs(w[2]-roiCentre[2]) > 0.011 {
		t.Errorf("PTV_Met failing centroid %v, want c = %v (symmetric failing set)", ptv.WorstCentroidMM, roiCentre)
	}
	if want := float64(ptv.Voxels) * 8 / 1000; math.Abs(ptv.FailingVolumeCC-want) > 1e-9 {
		t.Errorf("PTV_Met failing volume %g cc, want %d voxels × 8 mm³ = %g cc", ptv.FailingVolumeCC, ptv.Voxels, want)
	}
	if want := centresInside(t, c.refFile.grid, c.target); ptv.Voxels != want {
		t.Errorf("PTV_Met has %d voxel centres inside, want %d", ptv.Voxels, want)
	}

	oar := resultROI(t, res, "Brainstem")
	if oar.Kind != "oar" || oar.Status != "not evaluated: all below threshold" || oar.PassRate != nil || oar.Evaluated != 0 ||
		oar.PassRateText != "n/a" || oar.BelowThreshold != oar.Voxels || oar.Voxels == 0 {
		t.Errorf("Brainstem: kind %q status %q pass_rate %v text %q evaluated %d below threshold %d of %d voxels; want an OAR not evaluated, all below threshold, pass rate null",
			oar.Kind, oar.Status, oar.PassRate, oar.PassRateText, oar.Evaluated, oar.BelowThreshold, oar.Voxels)
	}

	if want := centresInside(t, c.refFile.grid, c.oar); oar.Voxels != want {
		t.Errorf("Brainstem has %d voxel centres inside, want %d", oar.Voxels, want)
	}

	failedTarget := false
	for _, o := range res.Rules {
		if o.Subject == "PTV_Met" && !o.Met {
			failedTarget = true
		}
		if o.Subject == "Brainstem" && !o.Met {
			t.Errorf("rule %q not met for the OAR below threshold: %s", o.Rule, o.Reason)
		}
	}
	if !failedTarget {
		t.Errorf("no rule on PTV_Met was not met: %+v", res.Rules)
	}
	if len(res.Clusters) == 0 || !hasName(res.Clusters[0].ROIs, "PTV_Met") {
		t.Errorf("the largest failing cluster does not touch PTV_Met: %+v", res.Clusters)
	}
}

// centresInside counts the voxel centres of g inside the contours of
// sphere s as sphereROI draws them: on each contour plane (odd z, strictly
// inside the sphere, through voxel centres) a 64-gon inscribed in the
// circle of radius R = √(r² − Δz²). A centre at in-plane distance ρ is
// inside when ρ ≤ R·cos(π/64) (the polygon's inradius) and outside when
// ρ > R; a centre between the two would depend on its angle and is
// refused as a test set-up error.
func centresInside(t *testing.T, g *volume.Grid, s phantom.Sphere) int {
	t.Helper()
	n := 0
	for m := range g.Data {
		i, j, k := g.IJK(m)
		p := g.WorldOf(i, j, k)
		dz := p[2] - s.Centre[2]
		r2 := s.Radius*s.Radius - dz*dz
		if !(r2 > 0) {
			continue
		}
		R := math.Sqrt(r2)
		rho := math.Hypot(p[0]-s.Centre[0], p[1]-s.Centre[1])
		switch {
		case rho <= R*math.Cos(math.Pi/64):
			n++
		case rho <= R:
			t.Fatalf("voxel centre %v lies between the inscribed polygon and the circle of its plane", p)
		}
	}
	return n
}

func hasName(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// withoutRun decodes a JSON result, removes "run" (what may vary between
// runs, README) and re-encodes it; numbers keep their text.
func withoutRun(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.UseNumber()
	var m map[string]any
	if err := dec.Decode(&m); err != nil {
		t.Fatal(err)
	}
	if _, ok := m["run"]; !ok {
		t.Errorf("%s has no \"run\" object", path)
	}
	delete(m, "run")
	out, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// TestDeterministicWorkers: README "Everything except run is byte-identical
// for the same inputs, whatever the worker count": the JSON (without run)
// and the CSV byte for byte; the gamma and difference maps (RT Dose, whose
// UIDs and dates differ) decoded and compared value by value, and the
// MetaImage gamma map byte for byte.
func TestDeterministicWorkers(t *testing.T) {
	c := newROICase(t)
	type outs struct{ json, csv, gdcm, gmha, ddcm string }
	runWith := func(workers string) outs {
		d := filepath.Join(c.dir, "w"+workers)
		if err := os.Mkdir(d, 0o755); err != nil {
			t.Fatal(err)
		}
		o := outs{filepath.Join(d, "r.json"), filepath.Join(d, "r.csv"), filepath.Join(d, "gamma.dcm"), filepath.Join(d, "gamma.mha"), filepath.Join(d, "diff.dcm")}
		vgExit(t, exitRuleFail, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs, "--workers", workers,
			"--isodose", "50", "--json", o.json, "--csv", o.csv, "--gamma-map", o.gdcm, "--difference-map", o.ddcm, "--quiet")
		// A second run for the MetaImage map (one --gamma-map per run).
		vgExit(t, exitRuleFail, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs, "--workers", workers,
			"--gamma-map", o.gmha, "--quiet")
		return o
	}
	a, b := runWith("1"), runWith("3")
	if ja, jb := withoutRun(t, a.json), withoutRun(t, b.json); !bytes.Equal(ja, jb) {
		t.Errorf("JSON without run differs between 1 and 3 workers:\n%s\n%s", ja, jb)
	}
	if ra, rb := readResultJSON(t, a.json), readResultJSON(t, b.json); ra.Run.Workers != 1 || rb.Run.Workers != 3 {
		t.Errorf("run.workers %d and %d, want 1 and 3", ra.Run.Workers, rb.Run.Workers)
	}
	for _, p := range [][2]string{{a.csv, b.csv}, {a.gmha, b.gmha}} {
		if !bytes.Equal(mustReadFile(t, p[0]), mustReadFile(t, p[1])) {
			t.Errorf("%s and %s differ", p[0], p[1])
		}
	}
	for _, p := range [][2]string{{a.gdcm, b.gdcm}, {a.ddcm, b.ddcm}} {
		ga, ia, err := dicomio.ReadDose(p[0])
		if err != nil {
			t.Fatal(err)
		}
		gb, ib, err := dicomio.ReadDose(p[1])
		if err != nil {
			t.Fatal(err)
		}
		if !ga.SameGeometry(gb) || ia.DoseGridScaling != ib.DoseGridScaling || ia.SeriesDescription != ib.SeriesDescription {
			t.Errorf("%s and %s: geometry, scaling or description differ", p[0], p[1])
			continue
		}
		diff := 0
		for n := range ga.Data {
			if math.Float32bits(ga.Data[n]) != math.Float32bits(gb.Data[n]) {
				diff++
			}
		}
		if diff > 0 {
			t.Errorf("%s and %s: %d of %d values differ", p[0], p[1], diff, len(ga.Data))
		}
		if ia.SOPInstanceUID == ib.SOPInstanceUID {
			t.Errorf("two map files share the SOP instance UID %s", ia.SOPInstanceUID)
		}
	}
}

func mustReadFile(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
