package main

// Shared helpers of the end-to-end tests of the command: in-process runs,
// synthetic input files (dicomio's writer, invented phantom data only),
// result decoding and the closed-form truths the tests check against.

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/reftool"
	"voxgamma/phantom"
	"voxgamma/result"
	"voxgamma/structure"
	"voxgamma/volume"
)

// invocation is the outcome of one run of the command.
type invocation struct {
	args           []string
	code           int
	stdout, stderr string
}

func (r invocation) String() string {
	return fmt.Sprintf("voxgamma %s\nexit %d\n--- stdout:\n%s--- stderr:\n%s", strings.Join(r.args, " "), r.code, r.stdout, r.stderr)
}

// vgRun runs the command in-process through run, the testable entry point of
// main.
func vgRun(t *testing.T, args ...string) invocation {
	t.Helper()
	var o, e bytes.Buffer
	code := run(args, &o, &e)
	captureJSON(t, args)
	return invocation{args: args, code: code, stdout: o.String(), stderr: e.String()}
}

// vgExit runs the command in-process and fails the test unless it exits with
// want.
func vgExit(t *testing.T, want int, args ...string) invocation {
	t.Helper()
	r := vgRun(t, args...)
	if r.code != want {
		t.Fatalf("exit %d, want %d\n%s", r.code, want, r)
	}
	return r
}

// phantomIDs returns identifiers of an invented phantom (no real patient).
func phantomIDs() dicomio.Identifiers {
	return dicomio.PhantomIdentifiers("PHANTOM^TEST", "VG-TEST-001")
}

func testGrid(t *testing.T, dims [3]int, origin, spacing [3]float64) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform(dims, origin, spacing, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// testDose is a synthetic RT Dose written with dicomio.WriteDose.
type testDose struct {
	path string
	grid *volume.Grid // the values as given to the writer (float32)
	info *dicomio.DoseInfo
	max  float64 // largest value written, Gy
}

// writeTestDose fills a grid with f and writes it as a 16-bit unsigned RT Dose.
func writeTestDose(t *testing.T, path string, dims [3]int, origin, spacing [3]float64, f phantom.DoseFunc, ids dicomio.Identifiers) testDose {
	t.Helper()
	g := testGrid(t, dims, origin, spacing)
	if err := phantom.Fill(g, f); err != nil {
		t.Fatal(err)
	}
	info, err := dicomio.WriteDose(path, g, ids, dicomio.DoseOptions("synthetic test dose, Gy"))
	if err != nil {
		t.Fatal(err)
	}
	mx, _ := g.Max()
	return testDose{path: path, grid: g, info: info, max: float64(mx)}
}

// quantBound is the largest difference between a dose value read back from
// a file written by dicomio.WriteDose and the analytic value it was made
// from. Derivation: phantom.Fill rounds the value to float32 (at most
// 2^-24 relative); WriteDose stores round(v/s) with s = DoseGridScaling
// chosen ≥ max/65535 (so no code is clipped), i.e. within s/2 of v (PS3.3
// C.8.8.3: dose = stored value × DoseGridScaling); ReadDose rounds
// code × s to float32 (2^-24 relative again).
func (d testDose) quantBound() float64 {
	return d.info.DoseGridScaling/2 + 2*math.Ldexp(d.max, -24)
}

// engineTol is the agreement of the engine with closed forms on exact
// float32 grids, as used by gamma/gamma_test.go (TestLinearGradientShift).
const engineTol = 2e-5

// readResultJSON decodes a JSON result written by --json.
func readResultJSON(t *testing.T, path string) *result.Result {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var r result.Result
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if r.SchemaVersion != result.SchemaVersion {
		t.Errorf("%s: schema_version %q, want %q", path, r.SchemaVersion, result.SchemaVersion)
	}
	return &r
}

func jsonNum(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// checkNear fails the test when got (a JSON number, possibly null) is not
// within tol of want.
func checkNear(t *testing.T, what string, got *float64, want, tol float64) {
	t.Helper()
	if got == nil {
		t.Errorf("%s is null, want %.7g", what, want)
		return
	}
	if math.Abs(*got-want) > tol {
		t.Errorf("%s = %.7g, want %.7g ± %.2g", what, *got, want, tol)
	}
}

// resultROI returns the ROI of that name in the result.
func resultROI(t *testing.T, r *result.Result, name string) *result.ROI {
	t.Helper()
	for i := range r.ROIs {
		if r.ROIs[i].Name == name {
			return &r.ROIs[i]
		}
	}
	t.Fatalf("no ROI %q in the result (%d ROIs)", name, len(r.ROIs))
	return nil
}

// oneErrorLine checks the contract for a command that could not evaluate:
// exactly one line on stderr, starting "voxgamma: ", naming the cause.
func oneErrorLine(t *testing.T, r invocation, wants ...string) {
	t.Helper()
	line := strings.TrimSuffix(r.stderr, "\n")
	if line == "" || strings.Contains(line, "\n") || !strings.HasSuffix(r.stderr, "\n") {
		t.Errorf("stderr is not exactly one line:\n%s", r)
		return
	}
	if !strings.HasPrefix(line, "voxgamma: ") {
		t.Errorf("stderr %q does not start with \"voxgamma: \"", line)
	}
	for _, w := range wants {
		if !strings.Contains(line, w) {
			t.Errorf("stderr %q does not name %q", line, w)
		}
	}
}

// testDirNames lists the names in dir, sorted.
func testDirNames(t *testing.T, dir string) []string {
	t.Helper()
	es, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range es {
		names = append(names, e.Name())
	}
	sort.Strings(names)
	return names
}

func dot3(a, b [3]float64) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }

// The linear-gradient field used by several tests: D(x) = a + g·(n·x)
// along the oblique unit direction n = (2, −1, 2)/3. On a 2 mm grid n·x
// changes by 4/3, 2/3 and 4/3 mm per index step, so the reference doses
// fall on a lattice of (2/3 mm)·g: the pass boundaries chosen below lie
// midway between two lattice values, well clear of every voxel.
const (
	rampA = 10.0 // Gy at the patient origin
	rampG = 0.1  // Gy/mm
	// Criteria of the closed-form tests: 3 %/2 mm, --norm-dose 10 Gy, so
	// the global ΔD = 0.3 Gy and ΔD/g = 3 mm.
	cfDelta = 0.03
	cfDTA   = 2.0
	cfNorm  = 10.0
)

var rampN = [3]float64{2.0 / 3, -1.0 / 3, 2.0 / 3}

func rampDose(p [3]float64) float64 { return rampA + rampG*dot3(rampN, p) }

// shiftGamma is the closed form of Γ for the linear field shifted by s
// along n (derivation from the definition of Low et al., Med Phys 25
// (1998) 656, in gamma/gamma_test.go TestLinearGradientShift):
// Γ² = s²/(Δd² + (ΔD/g)²).
func shiftGamma(s, dta, dd, g float64) float64 {
	return s / math.Sqrt(dta*dta+(dd/g)*(dd/g))
}

// scaledRampGamma is the closed form of Γ at a reference point of dose
// D_r = a + g·u on the linear field when the evaluated dose is k times
// the field, D_e = k·(a + g·u).
//
// Derivation (from the definition of Low et al. 1998): write
// r_e = r_r + t·n + p with p ⊥ n. D_e(r_e) − D_r = (k−1)·D_r + k·g·t does
// not depend on p and |r_e − r_r|² = t² + |p|², so p = 0 at the minimum
// and, with c = (k−1)·D_r and G = k·g,
//
//	Γ²(t) = t²/Δd² + (c + G·t)²/ΔD².
//
// dΓ²/dt = 0 gives t = −c·G·Δd²/(ΔD² + G²Δd²), and substituting,
//
//	Γ² = c²/(ΔD² + G²·Δd²),
//
// the shift closed form with an offset c in place of g·s.
func scaledRampGamma(k, dr, dta, dd, g float64) float64 {
	c := (k - 1) * dr
	G := k * g
	return math.Abs(c) / math.Sqrt(dd*dd+G*G*dta*dta)
}

// percentileDef7 is numpy's default percentile of sorted values (linear
// interpolation between order statistics: Hyndman and Fan, Am Stat 50
// (1996) 361, definition 7), the definition the README's Γ percentiles use.
func percentileDef7(sorted []float64, p float64) float64 {
	h := (float64(len(sorted)) - 1) * p / 100
	lo := math.Floor(h)
	hi := math.Min(lo+1, float64(len(sorted)-1))
	return sorted[int(lo)] + (h-lo)*(sorted[int(hi)]-sorted[int(lo)])
}

// checkGammaStats compares the JSON's Γ statistics with those of the closed
// form values want (one per evaluated point). Every statistic is a mean,
// an order statistic or a convex combination of two: each moves by at most
// the per-point tolerance tol.
func checkGammaStats(t *testing.T, what string, got result.GammaStats, want []float64, tol float64) {
	t.Helper()
	w := append([]float64(nil), want...)
	sort.Float64s(w)
	passed, sum := 0, 0.0
	for _, v := range w {
		if v <= 1 {
			passed++
		}
		sum += v
	}
	if got.Evaluated != len(w) || got.Passed != passed {
		t.Errorf("%s: evaluated %d passed %d, closed form %d and %d", what, got.Evaluated, got.Passed, len(w), passed)
	}
	checkNear(t, what+" pass_rate", got.PassRate, 100*float64(passed)/float64(len(w)), 1e-9)
	checkNear(t, what+" gamma_mean", got.GammaMean, sum/float64(len(w)), tol)
	checkNear(t, what+" gamma_median", got.GammaMedian, percentileDef7(w, 50), tol)
	checkNear(t, what+" gamma_p95", got.GammaP95, percentileDef7(w, 95), tol)
	checkNear(t, what+" gamma_max", got.GammaMax, w[len(w)-1], tol)
	if got.Capped != 0 || got.OutsideEvaluated != 0 || got.BelowThreshold != 0 {
		t.Errorf("%s: capped %d, outside %d, below threshold %d: want 0 (every point interior and above the threshold)", what, got.Capped, got.OutsideEvaluated, got.BelowThreshold)
	}
}

// boundaryClear fails the test (the parameters are wrong, not the
// program) when a closed-form Γ lies within tol of the pass limit 1, where
// the quantisation of the files could decide the outcome.
func boundaryClear(t *testing.T, gammas, tols []float64) {
	t.Helper()
	for i, g := range gammas {
		if math.Abs(g-1) <= tols[i] {
			t.Fatalf("test parameters put point %d on the pass boundary: closed-form Γ %.6f ± %.2g", i, g, tols[i])
		}
	}
}

// sphereROI contours a sphere on axial planes 2 mm apart at odd z (the
// voxel-centre planes of the test grids).
func sphereROI(t *testing.T, name, typ string, number int, s phantom.Sphere, frame string) structure.ROI {
	t.Helper()
	r, err := phantom.NewROI(s, phantom.ROISpec{Name: name, Number: number, InterpretedType: typ,
		Color: [3]uint8{200, 50, 50}, FrameOfReferenceUID: frame, PlaneSpacing: 2, PlanePhase: 1})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func writeTestStructures(t *testing.T, path string, ids dicomio.Identifiers, rois ...structure.ROI) {
	t.Helper()
	set := &structure.Set{Label: "TEST_RS", FrameOfReferenceUID: ids.FrameOfReferenceUID, ROIs: rois}
	if _, err := dicomio.WriteStructureSet(path, set, ids); err != nil {
		t.Fatal(err)
	}
}

// uniformCase is a flat reference dose d0 on a small grid inside a larger
// evaluated grid holding k·d0: the cheap input of the option and exit
// status tests.
type uniformCase struct {
	dir, ref, eval string
	refFile        testDose
	evalFile       testDose
	ids            dicomio.Identifiers
}

func newUniformCase(t *testing.T, d0, k float64) uniformCase {
	t.Helper()
	dir := t.TempDir()
	ids := phantomIDs()
	c := uniformCase{dir: dir, ref: filepath.Join(dir, "ref.dcm"), eval: filepath.Join(dir, "eval.dcm"), ids: ids}
	c.refFile = writeTestDose(t, c.ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(d0), ids)
	c.evalFile = writeTestDose(t, c.eval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(k*d0), ids)
	return c
}

// requirePydicom returns a python3 that imports pydicom and numpy, or fails
// (CI) or skips the test.
func requirePydicom(t *testing.T) string {
	t.Helper()
	return reftool.Python(t, "apt-get install python3-pydicom python3-numpy", "pydicom", "numpy")
}

// reftoolProgram returns the path of an external reference program (dcmtk,
// dicom3tools), or fails (CI) or skips the test.
func reftoolProgram(t *testing.T, name string) string {
	t.Helper()
	return reftool.Program(t, name, "apt-get install dcmtk dicom3tools")
}

// captureJSON copies every JSON file an in-process invocation wrote (a
// --json FILE, or the *.json under a folder it was given, such as batch's
// and watch's --out) under $VOXGAMMA_E2E_JSON/<test>/<invocation>/, when
// that variable is set. scripts/e2e-json-diff compares two such captures
// (ignoring the run timing object and the temporary paths): a refactoring
// that changes no behaviour leaves every one byte-identical. t may be nil
// (the invocation is filed under "untitled").
func captureJSON(t testing.TB, args []string) {
	root := os.Getenv("VOXGAMMA_E2E_JSON")
	if root == "" {
		return
	}
	name := "untitled"
	if t != nil {
		name = t.Name()
	}
	captureMu.Lock()
	captureN[name]++
	n := captureN[name]
	captureMu.Unlock()
	dir := filepath.Join(root, strings.NewReplacer("/", "__", " ", "_").Replace(name), fmt.Sprintf("%03d", n))
	copyOne := func(src, rel string) {
		b, err := os.ReadFile(src)
		if err != nil {
			return
		}
		dst := filepath.Join(dir, strings.ReplaceAll(rel, string(filepath.Separator), "__"))
		if os.MkdirAll(dir, 0o755) == nil {
			_ = os.WriteFile(dst, b, 0o644)
		}
	}
	for i, a := range args {
		st, err := os.Stat(a)
		switch {
		case err != nil:
		case st.Mode().IsRegular() && strings.HasSuffix(a, ".json") && i > 0 && strings.HasPrefix(args[i-1], "--"):
			copyOne(a, fmt.Sprintf("arg%02d_%s", i, filepath.Base(a)))
		case st.IsDir():
			_ = filepath.WalkDir(a, func(p string, d os.DirEntry, err error) error {
				if err == nil && d.Type().IsRegular() && strings.HasSuffix(p, ".json") {
					rel, _ := filepath.Rel(a, p)
					copyOne(p, fmt.Sprintf("arg%02d_%s", i, rel))
				}
				return nil
			})
		}
	}
}

var (
	captureMu sync.Mutex
	captureN  = map[string]int{}
)
