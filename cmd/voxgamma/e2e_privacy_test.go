package main

import (
	"bytes"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"voxgamma/dicomio"
	"voxgamma/phantom"
)

// TestDeidentify: --deidentify "replace[s] patient names and IDs with a
// hash and leave[s] dates out of every output" (compare --help; README:
// inputs' patient ID and name hashed). The evaluated dose carries another
// patient ID than the reference (a mismatch voxgamma warns about), so the
// identifiers could also reach the outputs through a warning. Every output
// is searched for the invented names and IDs, and the DICOM map for
// today's date.
func TestDeidentify(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	other := ids
	other.PatientID = "VG-TEST-002"
	ref, eval := filepath.Join(dir, "ref.dcm"), filepath.Join(dir, "eval.dcm")
	writeTestDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
	writeTestDose(t, eval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), other)
	out := t.TempDir()
	files := map[string]string{"--json": "r.json", "--csv": "r.csv", "--report": "r.html", "--gamma-map": "g.dcm", "--difference-map": "d.mha"}
	args := []string{"compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--deidentify", "--quiet"}
	for flag, name := range files {
		args = append(args, flag, filepath.Join(out, name))
	}
	today := time.Now().Format("20060102")
	vgExit(t, exitPass, args...)
	for _, name := range files {
		b := mustReadFile(t, filepath.Join(out, name))
		for _, id := range []string{ids.PatientName, ids.PatientID, other.PatientID} {
			if bytes.Contains(b, []byte(id)) {
				t.Errorf("%s holds the patient identifier %q despite --deidentify", name, id)
			}
		}
		if strings.HasSuffix(name, ".dcm") && bytes.Contains(b, []byte(today)) {
			t.Errorf("%s holds today's date %s despite --deidentify", name, today)
		}
	}
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	if res.Run.Started != "" {
		t.Errorf("run.started %q: dates are left out with --deidentify", res.Run.Started)
	}
	for _, in := range res.Inputs {
		if in.PatientID == "" || in.PatientName == "" {
			t.Errorf("input %s: patient ID %q name %q, want hashes in place of the originals", in.Role, in.PatientID, in.PatientName)
		}
	}
	_, info, err := dicomio.ReadDose(filepath.Join(out, "g.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	if info.PatientName == ids.PatientName || info.PatientID == ids.PatientID || info.FrameOfReferenceUID == ids.FrameOfReferenceUID || info.StudyInstanceUID == ids.StudyInstanceUID {
		t.Errorf("gamma map keeps the original identifiers: %+v", info.Identifiers)
	}
	// The map says it was de-identified: PatientIdentityRemoved (0012,0062)
	// YES and a DeidentificationMethod (0012,0063) of at most 64 characters
	// (LO), as the Patient module defines them (PS3.3 C.7.1.1), read back
	// by pydicom.
	py := requirePydicom(t)
	o, err := exec.Command(py, "-c", "import sys, pydicom\nds = pydicom.dcmread(sys.argv[1])\nprint(ds.PatientIdentityRemoved, len(ds.DeidentificationMethod) <= 64)", filepath.Join(out, "g.dcm")).CombinedOutput()
	if err != nil || strings.TrimSpace(string(o)) != "YES True" {
		t.Errorf("pydicom on the de-identified gamma map: %v %s", err, o)
	}
}
