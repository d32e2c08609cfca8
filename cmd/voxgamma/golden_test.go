package main

// Golden results: the JSON of the closed-form cases on the shared fixtures
// (testdata/dicom, written by pydicom) is checked in under testdata/golden,
// and every run must write it again byte for byte, apart from the run
// object (start time, durations, workers: what may differ between runs on
// the same inputs, result.Run), whose values are zeroed on both sides. The
// tests that produce them also check their figures against the closed form,
// so a golden file is never its own reference. After a change that is
// meant to change a result (a new field, another rounding), rewrite them:
//
//	VOXGAMMA_UPDATE_GOLDEN=1 go test -run 'Golden|PydicomLinearGradient' ./cmd/voxgamma/
//
// and review the difference before committing it.

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"testing"

	"voxgamma/internal/fixture"
	"voxgamma/result"
)

// runObject is the run object of a result as report.EncodeJSON writes it:
// the last top-level member, indented by two spaces.
var runObject = regexp.MustCompile(`(?s)\n  "run": \{\n.*?\n  \}\n\}\n$`)

// zeroRun is what runObject becomes in a golden file.
const zeroRun = "\n  \"run\": {\n    \"started\": \"\",\n    \"seconds\": 0,\n    \"gamma_seconds\": 0,\n    \"workers\": 0\n  }\n}\n"

// goldenJSON returns the JSON result with its run object zeroed.
func goldenJSON(t *testing.T, b []byte) []byte {
	t.Helper()
	if !runObject.Match(b) {
		t.Fatalf("the result does not end with its run object:\n%s", b)
	}
	return runObject.ReplaceAll(b, []byte(zeroRun))
}

// goldenRun runs compare from the testdata folder (so that the result names
// the fixtures by their paths under testdata, the same on every machine)
// with args and --json, checks the exit status, and compares the JSON
// with testdata/golden/NAME.json (or writes it when VOXGAMMA_UPDATE_GOLDEN
// is set). It returns the result for the closed-form checks.
func goldenRun(t *testing.T, name string, wantExit int, args ...string) *result.Result {
	t.Helper()
	t.Chdir(fixture.Dir())
	out := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, wantExit, append(append([]string{"compare"}, args...), "--json", out, "--quiet")...)
	got := goldenJSON(t, mustReadFile(t, out))
	golden := filepath.Join(fixture.Dir(), "golden", name+".json")
	if os.Getenv("VOXGAMMA_UPDATE_GOLDEN") != "" {
		if err := os.MkdirAll(filepath.Dir(golden), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(golden, got, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("wrote %s", golden)
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (VOXGAMMA_UPDATE_GOLDEN=1 writes it)", err)
	}
	if !bytes.Equal(got, want) {
		at, line := 0, 1
		for at < len(got) && at < len(want) && got[at] == want[at] {
			if got[at] == '\n' {
				line++
			}
			at++
		}
		t.Errorf("the result differs from testdata/golden/%s.json at line %d (byte %d); if the change is meant, rewrite it with VOXGAMMA_UPDATE_GOLDEN=1 and review the difference", name, line, at)
	}
	return readResultJSON(t, out)
}

// TestGoldenUniform: the uniform case (testdata/dicom/uniform): a flat 2 Gy
// reference inside a flat evaluated dose k·2 Gy, PTV_1 a sphere of radius
// 5 mm. With global 3 % of the reference maximum, Γ = |k − 1|/0.03 at
// every point (domain notes, closed form): k = 1.02 gives 2/3 and a pass
// (exit 0), k = 0.95 gives 5/3, no point passing, and a fail (exit 2).
// Tolerance: the files' quantisation as numpy measured it (case.json) plus
// float32 reading, over ΔD = 0.06 Gy, and the engine's.
func TestGoldenUniform(t *testing.T) {
	c := fixture.LoadCase(t, "uniform")
	for _, tc := range []struct {
		name string
		eval *fixture.Dose
		exit int
	}{
		{"uniform-pass", &c.Evaluated, exitPass},
		{"uniform-fail", c.EvaluatedFail, exitRuleFail},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := goldenRun(t, tc.name, tc.exit, "--reference", "dicom/uniform/RD_reference.dcm",
				"--evaluated", "dicom/uniform/"+tc.eval.File, "--structures", "dicom/uniform/RS.dcm")
			want := math.Abs(tc.eval.K-1) / 0.03
			tol := (c.Reference.ReadBound()+tc.eval.ReadBound())/0.06 + engineTol
			for _, s := range []struct {
				what string
				v    *float64
			}{{"Γ mean", r.Overall.GammaMean}, {"Γ max", r.Overall.GammaMax}, {"Γ median", r.Overall.GammaMedian}} {
				checkNear(t, "overall "+s.what, s.v, want, tol)
			}
			n := 12 * 12 * 8
			passed := 0
			if want <= 1 {
				passed = n
			}
			if r.Overall.Evaluated != n || r.Overall.Passed != passed {
				t.Errorf("evaluated %d passed %d, want %d and %d", r.Overall.Evaluated, r.Overall.Passed, n, passed)
			}
			ptv := resultROI(t, r, "PTV_1")
			checkNear(t, "PTV_1 Γ mean", ptv.GammaMean, want, tol)
			if ptv.Kind != "target" {
				t.Errorf("PTV_1 kind %q, want target (RTROIInterpretedType PTV)", ptv.Kind)
			}
		})
	}
}
