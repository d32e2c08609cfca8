package main

// DICOM meaning that was silently ignored (issue 11, item 11). The RT Dose
// module (PS3.3 C.8.8.3) says what the values are: DoseUnits (GY or
// RELATIVE), DoseType (PHYSICAL; EFFECTIVE, a physical dose corrected for
// biological effect by a model; ERROR, a difference between doses) and
// DoseSummationType (the plan, a fraction, a beam, ...); DoseGridScaling
// alone turns stored values into dose (the RT Dose IOD, A.18.3, has no
// Modality LUT module). Each difference is refused or warned as it matters:
//
//   - DoseType PHYSICAL against EFFECTIVE: refused by default (the two
//     differ by a biological model whatever the delivery); a protocol may
//     compare them with a warning (inputs: dose_type_mismatch: warn).
//   - DoseType ERROR in either role: refused (not a dose at all).
//   - DoseUnits GY against RELATIVE: refused (before this issue too); both
//     RELATIVE: a warning (their normalisations must agree).
//   - DoseSummationType different: a warning (before too); the same partial
//     type of different beams, doses of different RT Plans: warnings.
//   - RescaleSlope/RescaleIntercept, a Modality LUT, a Real World Value
//     Mapping that disagree with DoseGridScaling: refused (before: a
//     RescaleSlope of 2 was ignored); the same scaling written twice, or an
//     identity: read, with a note, values as pydicom's stored ×
//     DoseGridScaling.

import (
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// near reports whether the decimal text s is within tol (relative) of v.
func near(v float64, s string, tol float64) bool {
	x, err := strconv.ParseFloat(s, 64)
	return err == nil && math.Abs(x-v) <= tol*math.Max(1, math.Abs(x))
}

// TestDoseMeaning feeds each difference of meaning through compare.
func TestDoseMeaning(t *testing.T) {
	f := newBadFixture(t)
	strictWarn := filepath.Join(t.TempDir(), "effective-ok.yaml")
	if err := os.WriteFile(strictWarn, []byte(`name: effective-ok
criteria: {criteria: 3%/2mm, threshold_percent: 10}
inputs: {dose_type_mismatch: warn}
rules:
  - {subject: overall, metric: pass_rate, op: ">=", limit: 95}
`), 0o644); err != nil {
		t.Fatal(err)
	}
	// The uniform case's doses with DoseType changed (testdata/bad-input).
	effective := corpus(t, "DoseType_EFFECTIVE_evaluated.dcm")
	refEffective := corpus(t, "DoseType_EFFECTIVE_reference.dcm")
	// An ERROR dose another system wrote (not voxgamma's own map).
	errorDose := corpus(t, "DoseType_ERROR_other_system.dcm")

	// Refused: one line naming the file(s) and the tag.
	for _, tc := range []struct {
		name  string
		args  []string
		cause []string
	}{
		{"PHYSICAL_against_EFFECTIVE", compareArgs(f.ref, effective, f.rs), []string{"DoseType (3004,0004)", filepath.Base(f.ref), "PHYSICAL", filepath.Base(effective), "EFFECTIVE"}},
		{"EFFECTIVE_against_PHYSICAL", compareArgs(refEffective, f.eval, f.rs), []string{"DoseType (3004,0004)", filepath.Base(refEffective), "EFFECTIVE", "PHYSICAL"}},
		{"evaluated_ERROR", compareArgs(f.ref, errorDose, f.rs), []string{errorDose, "DoseType (3004,0004) is ERROR"}},
		{"reference_ERROR", compareArgs(errorDose, f.eval, f.rs), []string{errorDose, "DoseType (3004,0004) is ERROR"}},
		{"RescaleSlope_2", compareArgs(corpus(t, "RescaleSlope_2.dcm"), f.eval, f.rs),
			[]string{"RescaleSlope_2.dcm", "RescaleSlope (0028,1053) 2", "DoseGridScaling (3004,000E)"}},
		{"RescaleIntercept_0.5", compareArgs(f.ref, corpus(t, "RescaleIntercept_0.5.dcm"), f.rs),
			[]string{"RescaleIntercept_0.5.dcm", "RescaleIntercept (0028,1052) 0.5"}},
	} {
		t.Run(tc.name, func(t *testing.T) { refused(t, tc.args, tc.cause...) })
	}

	// Allowed by the protocol: evaluated, with the warning.
	t.Run("EFFECTIVE_allowed_by_protocol", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitPass, "compare", "--reference", f.ref, "--evaluated", effective, "--protocol", strictWarn, "--json", out, "-q")
		if w := strings.Join(readResultJSON(t, out).Warnings, "\n"); !strings.Contains(w, "dose types differ") || !strings.Contains(w, "dose_type_mismatch: warn") {
			t.Errorf("warnings %q do not say the dose types differ", w)
		}
	})

	// Warned: evaluated, the warning in the result.
	relRef, relEval := corpus(t, "RELATIVE_reference.dcm"), corpus(t, "RELATIVE_evaluated.dcm")
	// The evaluated dose of the same frame and study, naming another plan.
	planB := corpus(t, "different_RT_Plan_evaluated.dcm")
	for _, tc := range []struct {
		name, ref, eval, want string
	}{
		{"both_RELATIVE", relRef, relEval, "both doses are RELATIVE"},
		{"different_plans", f.ref, planB, "the doses reference different RT Plans"},
		{"no_DoseType", corpus(t, "DoseType_missing.dcm"), f.eval, "DoseType (3004,0004) missing"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "r.json")
			r := vgRun(t, "compare", "--reference", tc.ref, "--evaluated", tc.eval, "--json", out, "--no-structures", "-q")
			if r.code != exitPass {
				t.Fatalf("exit %d, want 0\n%s", r.code, r)
			}
			if w := strings.Join(readResultJSON(t, out).Warnings, "\n"); !strings.Contains(w, tc.want) {
				t.Errorf("warnings %q lack %q", w, tc.want)
			}
		})
	}

	// The same scaling written twice (RescaleSlope = DoseGridScaling) and an
	// identity rescale: read once, as pydicom reads the RT convention
	// (stored × DoseGridScaling); the note says so.
	t.Run("RescaleSlope_equals_DoseGridScaling", func(t *testing.T) {
		py := requirePydicom(t)
		twice := corpus(t, "RescaleSlope_equals_DoseGridScaling.dcm") // RescaleSlope = DoseGridScaling, RescaleIntercept 0
		identity := corpus(t, "RescaleSlope_identity.dcm")
		for _, p := range []string{twice, identity} {
			out := filepath.Join(t.TempDir(), "r.json")
			vgExit(t, exitPass, "compare", "--reference", p, "--evaluated", f.eval, "--json", out, "--no-structures", "-q")
			res := readResultJSON(t, out)
			notes := strings.Join(res.Notes, "\n")
			if !strings.Contains(notes, "applied once") && !strings.Contains(notes, "an identity, no effect") {
				t.Errorf("%s: notes do not say how the rescale was read:\n%s", filepath.Base(p), notes)
			}
			var max float64
			for _, in := range res.Inputs {
				if in.Role == "reference" && in.Grid != nil {
					max = in.Grid.MaxDoseGy
				}
			}
			o, err := exec.Command(py, "-c", "import sys, pydicom\nds = pydicom.dcmread(sys.argv[1])\nprint(float(ds.pixel_array.max()) * float(ds.DoseGridScaling))", p).CombinedOutput()
			if err != nil {
				t.Fatalf("pydicom: %v\n%s", err, o)
			}
			if got := strings.TrimSpace(string(o)); !near(max, got, 1e-6) {
				t.Errorf("%s: reference maximum %g Gy, pydicom stored × DoseGridScaling %s", filepath.Base(p), max, got)
			}
		}
	})
}
