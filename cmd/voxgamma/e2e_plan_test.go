package main

// --plan and the RT Plan found in a reference folder, through the command:
// the plan written by pydicom, its values in the JSON result compared with
// pydicom's reading of the same file.

import (
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/fixture"
)

// pydicomPlanReader prints what pydicom reads from an RT Plan (argv: its
// path): the label and name, the TARGET prescriptions, the fractions per
// group and each beam's number, name, fraction group and meterset.
const pydicomPlanReader = `
import json, sys
import pydicom

back = pydicom.dcmread(sys.argv[1])
ms = {}
for g in back.FractionGroupSequence:
    for r in g.ReferencedBeamSequence:
        ms[int(r.ReferencedBeamNumber)] = (int(g.FractionGroupNumber), float(r.BeamMeterset))
print(json.dumps({
    "label": str(back.RTPlanLabel), "name": str(back.RTPlanName),
    "prescriptions": [[str(d.DoseReferenceDescription), float(d.TargetPrescriptionDose)] for d in back.DoseReferenceSequence if d.DoseReferenceType == "TARGET"],
    "fractions": [int(g.NumberOfFractionsPlanned) for g in back.FractionGroupSequence],
    "beams": [[int(b.BeamNumber), str(b.BeamName), ms.get(int(b.BeamNumber), [0, None])[0], ms.get(int(b.BeamNumber), [0, None])[1]] for b in back.BeamSequence],
}))
`

type pydicomPlanRef struct {
	Label, Name   string
	Prescriptions [][2]any
	Fractions     []int
	Beams         [][4]any
}

func readPydicomPlan(t *testing.T, path string) pydicomPlanRef {
	t.Helper()
	py := requirePydicom(t)
	out, err := exec.Command(py, "-c", pydicomPlanReader, path).CombinedOutput()
	if err != nil {
		t.Fatalf("pydicom: %v\n%s", err, out)
	}
	var ref pydicomPlanRef
	if err := json.Unmarshal(out, &ref); err != nil {
		t.Fatalf("%v: %s", err, out)
	}
	return ref
}

// Source: the uniform case's RT Plan, which pydicom wrote
// (testdata/dicom/uniform/RP.dcm: two TARGET prescriptions, an organ-at-risk
// reference, two fraction groups, three beams and a setup beam) and reads
// back here; the result's plan object must hold the same values (the
// highest TARGET prescription, the fractions summed over the groups, each
// beam's meterset from its group).
func TestComparePlanWrittenByPydicom(t *testing.T) {
	c := fixture.LoadCase(t, "uniform")
	rp := c.File(t, "RP.dcm")
	ref := readPydicomPlan(t, rp)
	out := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, 0, "compare", "--reference", c.File(t, "RD_reference.dcm"), "--evaluated", c.File(t, "RD_evaluated.dcm"), "--plan", rp, "--json", out, "--no-structures", "-q")
	r := readResultJSON(t, out)
	p := r.Plan
	if p == nil {
		t.Fatal("no plan in the result")
	}
	if p.Label != ref.Label || p.Name != ref.Name || p.Source != "--plan" || p.ReferenceDose != "names this plan" {
		t.Errorf("plan %q %q source %q reference dose %q; pydicom %q %q", p.Label, p.Name, p.Source, p.ReferenceDose, ref.Label, ref.Name)
	}
	best := 0.0
	for i, rx := range ref.Prescriptions {
		d := rx[1].(float64)
		best = max(best, d)
		if i >= len(p.Prescriptions) || p.Prescriptions[i].Description != rx[0].(string) || p.Prescriptions[i].DoseGy != d {
			t.Errorf("prescription %d: %+v, pydicom %v", i, p.Prescriptions, rx)
		}
	}
	if p.PrescriptionGy == nil || *p.PrescriptionGy != best {
		t.Errorf("prescription_gy %v, pydicom's highest TARGET prescription %g", p.PrescriptionGy, best)
	}
	total := 0
	for _, n := range ref.Fractions {
		total += n
	}
	if p.FractionsPlanned == nil || *p.FractionsPlanned != total {
		t.Errorf("fractions_planned %v, pydicom's groups sum to %d", p.FractionsPlanned, total)
	}
	if len(p.Beams) != len(ref.Beams) {
		t.Fatalf("%d beams, pydicom %d", len(p.Beams), len(ref.Beams))
	}
	for i, b := range ref.Beams {
		got := p.Beams[i]
		var want *float64
		if b[3] != nil {
			v := b[3].(float64)
			want = &v
		}
		if got.Number != int(b[0].(float64)) || got.Name != b[1].(string) || got.FractionGroup != int(b[2].(float64)) ||
			(got.Meterset == nil) != (want == nil) || (want != nil && *got.Meterset != *want) {
			t.Errorf("beam %d: %+v, pydicom %v", i, got, b)
		}
	}
	found := false
	for _, in := range r.Inputs {
		if in.Role == "plan" && in.Path == rp && in.Modality == "RTPLAN" && len(in.SHA256) == 64 {
			found = true
		}
	}
	if !found {
		t.Errorf("the plan is not among the inputs: %+v", r.Inputs)
	}
}

// The plan in the reference folder is found; a plan of another patient and
// a plan the dose does not name are warned about; a broken plan given with
// --plan is one error line, exit 1.
func TestComparePlanFolderAndMismatch(t *testing.T) {
	c := newUniformCase(t, 2, 1.01)
	refDir := filepath.Join(c.dir, "plan")
	if err := os.Mkdir(refDir, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(c.ref, filepath.Join(refDir, "RD.dcm")); err != nil {
		t.Fatal(err)
	}
	p := &dicomio.Plan{Label: "FOUND", FractionGroups: []dicomio.FractionGroup{{Number: 1, FractionsPlanned: 3}}}
	if _, err := dicomio.WritePlan(filepath.Join(refDir, "RP.dcm"), p, c.ids); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(c.dir, "r.json")
	vgExit(t, 0, "compare", "--reference", refDir, "--evaluated", c.eval, "--json", out, "--no-structures", "-q")
	r := readResultJSON(t, out)
	if r.Plan == nil || r.Plan.Label != "FOUND" || r.Plan.Source != "reference folder" || r.Plan.ReferenceDose != "names this plan" ||
		r.Plan.FractionsPlanned == nil || *r.Plan.FractionsPlanned != 3 || r.Plan.PrescriptionGy != nil {
		t.Errorf("plan found in the folder: %+v", r.Plan)
	}

	other := dicomio.PhantomIdentifiers("PHANTOM^OTHER", "VG-OTHER-9")
	rp := filepath.Join(c.dir, "other.dcm")
	if _, err := dicomio.WritePlan(rp, p, other); err != nil {
		t.Fatal(err)
	}
	out2 := filepath.Join(c.dir, "r2.json")
	vgExit(t, 0, "compare", "--reference", refDir, "--evaluated", c.eval, "--plan", rp, "--json", out2, "--no-structures", "-q")
	r = readResultJSON(t, out2)
	var warned []string
	for _, w := range r.Warnings {
		if strings.Contains(w, rp) {
			warned = append(warned, w)
		}
	}
	joined := strings.Join(warned, "\n")
	for _, want := range []string{"the reference dose was computed for plan " + c.ids.ReferencedRTPlanUID, "patient ID VG-OTHER-9", "frame of reference " + other.FrameOfReferenceUID} {
		if !strings.Contains(joined, want) {
			t.Errorf("warnings lack %q:\n%s", want, joined)
		}
	}
	if r.Plan == nil || r.Plan.Source != "--plan" || r.Plan.ReferenceDose != "names another plan" {
		t.Errorf("plan given: %+v", r.Plan)
	}

	bad := filepath.Join(c.dir, "bad.dcm")
	if err := os.WriteFile(bad, []byte("not a plan"), 0o644); err != nil {
		t.Fatal(err)
	}
	res := vgExit(t, 1, "compare", "--reference", refDir, "--evaluated", c.eval, "--plan", bad, "--no-structures", "-q")
	oneErrorLine(t, res, bad)
}
