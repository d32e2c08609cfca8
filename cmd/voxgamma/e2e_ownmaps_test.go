package main

// voxgamma's own outputs taken as inputs (issue 11, item 6). The gamma and
// difference maps written beside the inputs are RT Dose files; before, they
// said DoseSummationType PLAN, so a folder holding them (the demo's own
// folder) could not be used ("4 RT Dose files could be the plan dose"), and
// a map given by mistake was compared as a dose. Every map is DoseType ERROR
// (PS3.3 C.8.8.3: a difference between doses): never a plan dose, refused
// as either input, and written with a summation and references that
// dciodvfy accepts whatever the reference says about its plan.

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/batchtest"
	"voxgamma/internal/fixture"
)

// dropTopSequence returns data without the top-level sequence element with
// the tag (its header, items and delimiter: everything up to the next
// top-level element).
func dropTopSequence(t *testing.T, data []byte, tag uint32) []byte {
	t.Helper()
	elems := walkDICOM(t, data)
	for i, e := range elems {
		if e.tag != tag || e.depth != 0 || e.vr != "SQ" {
			continue
		}
		for _, n := range elems[i+1:] {
			if n.depth == 0 && n.vr != "" {
				return append(append([]byte(nil), data[:e.hdr]...), data[n.hdr:]...)
			}
		}
	}
	t.Fatalf("no top-level sequence (%04X,%04X)", tag>>16, tag&0xFFFF)
	return nil
}

// TestOwnOutputsAsInputs: the demo's folder, holding its inputs, its maps
// and its results, is an input folder again; a map named as a dose is
// refused with one line naming it.
func TestOwnOutputsAsInputs(t *testing.T) {
	demoDir := filepath.Join(t.TempDir(), "demo")
	vgExit(t, exitPass, "demo", "--out", demoDir, "-q")
	for _, name := range []string{"reference.dcm", "evaluated.dcm", "gamma.dcm", "difference.dcm"} {
		if _, err := os.Stat(filepath.Join(demoDir, name)); err != nil {
			t.Fatal(err)
		}
	}
	// The demo fails its rules (its smallest target): exit 2, evaluated.
	t.Run("folder_for_both", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "r.json")
		r := vgRun(t, "compare", "--reference", demoDir, "--evaluated", demoDir, "--json", out, "-q")
		if r.code != exitRuleFail {
			t.Fatalf("exit %d, want 2 (evaluated, the demo's small target fails)\n%s", r.code, r)
		}
		res := readResultJSON(t, out)
		roles := map[string]string{}
		for _, in := range res.Inputs {
			roles[in.Role] = filepath.Base(in.Path)
		}
		if roles["reference"] != "reference.dcm" || roles["evaluated"] != "evaluated.dcm" || roles["structures"] != "structures.dcm" {
			t.Errorf("inputs chosen %v, want reference.dcm, evaluated.dcm, structures.dcm", roles)
		}
		notes := strings.Join(res.Notes, "\n")
		for _, want := range []string{"ignored gamma.dcm: DoseType (3004,0004) is ERROR", "ignored difference.dcm: DoseType (3004,0004) is ERROR",
			"chose evaluated.dcm as the evaluated dose", "ignored evaluated.dcm: given as the evaluated dose", "chose dose reference.dcm"} {
			if !strings.Contains(notes, want) {
				t.Errorf("notes do not say %q:\n%s", want, notes)
			}
		}
	})
	t.Run("folder_and_file", func(t *testing.T) {
		// The file given for one dose is never the folder's choice for the
		// other. (With the reference as a file the folder's structure set
		// is not used: the exit status is not the point here.)
		for _, args := range [][2]string{{demoDir, filepath.Join(demoDir, "evaluated.dcm")}, {filepath.Join(demoDir, "reference.dcm"), demoDir}} {
			out := filepath.Join(t.TempDir(), "r.json")
			r := vgRun(t, "compare", "--reference", args[0], "--evaluated", args[1], "--json", out, "-q")
			if r.code != exitPass && r.code != exitRuleFail {
				t.Fatalf("exit %d, want an evaluation\n%s", r.code, r)
			}
			for _, in := range readResultJSON(t, out).Inputs {
				if want := map[string]string{"reference": "reference.dcm", "evaluated": "evaluated.dcm"}[in.Role]; want != "" && filepath.Base(in.Path) != want {
					t.Errorf("%v: %s is %s, want %s", args, in.Role, in.Path, want)
				}
			}
		}
	})
	for _, tc := range []struct{ flag, file, other string }{
		{"--reference", "gamma.dcm", "evaluated.dcm"},
		{"--reference", "difference.dcm", "evaluated.dcm"},
		{"--evaluated", "gamma.dcm", "reference.dcm"},
		{"--evaluated", "difference.dcm", "reference.dcm"},
	} {
		t.Run(strings.TrimPrefix(tc.flag, "--")+"_is_"+strings.TrimSuffix(tc.file, ".dcm"), func(t *testing.T) {
			m := filepath.Join(demoDir, tc.file)
			o := filepath.Join(demoDir, tc.other)
			args := compareArgs(m, o, "")
			if tc.flag == "--evaluated" {
				args = compareArgs(o, m, "")
			}
			refused(t, args, m, "DoseType (3004,0004) is ERROR", "voxgamma wrote")
		})
	}
	t.Run("inspect", func(t *testing.T) {
		r := vgExit(t, exitPass, "inspect", demoDir)
		for _, want := range []string{"would use as the reference", "chose dose reference.dcm", "would use as the evaluated dose", "chose dose evaluated.dcm"} {
			if !strings.Contains(r.stdout, want) {
				t.Errorf("inspect does not say %q:\n%s", want, r.stdout)
			}
		}
	})
}

// TestOwnMapsValid: the maps of a comparison whose reference names no RT
// Plan (ReferencedRTPlanSequence removed from a valid file), names one, or
// is a fraction dose, checked with dicom3tools' dciodvfy (the RT Dose IOD,
// PS3.3 A.18, and the conditions of C.8.8.3) and read with pydicom. Before,
// the first gave "Missing attribute Type 1C ReferencedRTPlanSequence".
func TestOwnMapsValid(t *testing.T) {
	dciodvfy := reftoolProgram(t, "dciodvfy")
	py := requirePydicom(t)
	f := newBadFixture(t)
	// The uniform reference naming no plan, and as the dose of the plan's
	// fraction group 1 (DoseSummationType FRACTION), from testdata.
	noPlan := fixture.Path(t, "dicom/uniform/RD_reference_no_plan.dcm")
	if info, err := dicomio.ReadDoseInfo(noPlan); err != nil || info.ReferencedRTPlanUID != "" || info.DoseSummationType != "PLAN" {
		t.Fatalf("test file: %+v %v", info, err)
	}
	frac := fixture.Path(t, "dicom/uniform/RD_reference_fraction.dcm")
	for _, tc := range []struct {
		name, ref, sum string
		plan           bool
	}{
		{"reference_without_plan", noPlan, dicomio.MapSummationType, false},
		{"reference_with_plan", f.ref, "PLAN", true},
		{"fraction_reference", frac, "FRACTION", true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			gm, dm := filepath.Join(dir, "gamma.dcm"), filepath.Join(dir, "difference.dcm")
			vgExit(t, exitPass, "compare", "--reference", tc.ref, "--evaluated", f.eval, "--gamma-map", gm, "--difference-map", dm, "--no-structures", "-q")
			for _, p := range []string{gm, dm} {
				out, _ := exec.Command(dciodvfy, p).CombinedOutput()
				for _, line := range strings.Split(string(out), "\n") {
					// PS3.3 C.8.8.3 allows two's complement for DoseType
					// ERROR; Debian's dciodvfy (2022) knows only 0 (as in
					// dicomio's TestWriteDoseRoundTrip).
					if strings.HasPrefix(line, "Error") && !strings.Contains(line, "<Pixel Representation>") {
						t.Errorf("dciodvfy %s: %s", filepath.Base(p), line)
					}
				}
			}
			script := `import sys, pydicom
for p in sys.argv[1:]:
    ds = pydicom.dcmread(p)
    print(ds.DoseType, ds.DoseSummationType, "ReferencedRTPlanSequence" in ds)`
			out, err := exec.Command(py, "-c", script, gm, dm).CombinedOutput()
			if err != nil {
				t.Fatalf("pydicom: %v\n%s", err, out)
			}
			want := "ERROR " + tc.sum + " " + map[bool]string{true: "True", false: "False"}[tc.plan]
			for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
				if line != want {
					t.Errorf("pydicom reads %q, want %q", line, want)
				}
			}
		})
	}
}

// TestOwnMapsWatched: a watched case whose folder also holds a gamma map
// named like an evaluated dose ("eval_gamma.dcm" matches the default rule
// eval*): the map is not a second evaluated dose (before: "2 evaluated
// doses", the case moved aside).
func TestOwnMapsWatched(t *testing.T) {
	watched := t.TempDir()
	cf, err := batchtest.Write(filepath.Join(watched, "case1"), batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	vgExit(t, exitPass, "compare", "--reference", cf.Reference, "--evaluated", cf.Evaluated, "--gamma-map", filepath.Join(cf.Dir, "eval_gamma.dcm"), "--no-structures", "-q")
	out := t.TempDir()
	r := vgRun(t, "watch", watched, "--out", out, "--once", "--settle", "1ms", "--poll", "1ms")
	if r.code != exitPass {
		t.Fatalf("exit %d, want 0\n%s", r.code, r)
	}
	if _, err := os.Stat(filepath.Join(out, "case1", "result.json")); err != nil {
		t.Errorf("case not evaluated: %v\n%s", err, r)
	}
}
