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
)

// pydicomPlanWriter writes an RT Plan with pydicom (argv: path, JSON of the
// SOPInstanceUID, FrameOfReferenceUID, PatientID to use) with two TARGET
// prescriptions (60 and 50 Gy), an organ-at-risk reference, two fraction
// groups (25 and 5 fractions) and three beams plus a setup beam, then
// prints what pydicom reads back: the prescriptions, the fractions per
// group and each beam's name and meterset from its fraction group.
const pydicomPlanWriter = `
import json, sys
import pydicom
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import ExplicitVRLittleEndian

path, spec = sys.argv[1], json.loads(sys.argv[2])
def item(**kw):
    d = Dataset()
    for k, v in kw.items():
        setattr(d, k, v)
    return d
ds = Dataset()
ds.file_meta = FileMetaDataset()
ds.file_meta.MediaStorageSOPClassUID = "1.2.840.10008.5.1.4.1.1.481.5"
ds.file_meta.MediaStorageSOPInstanceUID = spec["sop"]
ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
ds.SOPClassUID = ds.file_meta.MediaStorageSOPClassUID
ds.SOPInstanceUID = spec["sop"]
ds.Modality = "RTPLAN"
ds.PatientName = "PHANTOM^TEST"
ds.PatientID = spec["pid"]
ds.StudyInstanceUID = "2.25.99"
ds.SeriesInstanceUID = "2.25.98"
ds.FrameOfReferenceUID = spec["for"]
ds.RTPlanLabel = "H&N_SIB"
ds.RTPlanName = "Head and neck, two levels"
ds.RTPlanGeometry = "TREATMENT_DEVICE"
ds.ApprovalStatus = "APPROVED"
ds.DoseReferenceSequence = Sequence([
    item(DoseReferenceNumber=1, DoseReferenceStructureType="SITE", DoseReferenceDescription="PTV_60", DoseReferenceType="TARGET", TargetPrescriptionDose="60"),
    item(DoseReferenceNumber=2, DoseReferenceStructureType="SITE", DoseReferenceDescription="PTV_50", DoseReferenceType="TARGET", TargetPrescriptionDose="50.4"),
    item(DoseReferenceNumber=3, DoseReferenceStructureType="SITE", DoseReferenceDescription="Cord", DoseReferenceType="ORGAN_AT_RISK", DeliveryMaximumDose="45"),
])
beams = []
for num, name, gantry in [(1, "VMAT 1", 181.0), (2, "VMAT 2", 179.0), (3, "Boost", 90.0), (9, "CBCT", 0.0)]:
    cp = item(ControlPointIndex=0, NominalBeamEnergy=6.0, GantryAngle=gantry, CumulativeMetersetWeight=0.0)
    beams.append(item(BeamNumber=num, BeamName=name, BeamType="DYNAMIC", RadiationType="PHOTON", TreatmentMachineName="LINAC_T",
                      PrimaryDosimeterUnit="MU", TreatmentDeliveryType="SETUP" if num == 9 else "TREATMENT",
                      NumberOfControlPoints=1, ControlPointSequence=Sequence([cp])))
ds.BeamSequence = Sequence(beams)
ds.FractionGroupSequence = Sequence([
    item(FractionGroupNumber=1, NumberOfFractionsPlanned=25, NumberOfBeams=2, NumberOfBrachyApplicationSetups=0,
         ReferencedBeamSequence=Sequence([item(ReferencedBeamNumber=1, BeamMeterset="301.25"), item(ReferencedBeamNumber=2, BeamMeterset="288.5")])),
    item(FractionGroupNumber=2, NumberOfFractionsPlanned=5, NumberOfBeams=1, NumberOfBrachyApplicationSetups=0,
         ReferencedBeamSequence=Sequence([item(ReferencedBeamNumber=3, BeamMeterset="150.75")])),
])
try:
    pydicom.dcmwrite(path, ds, enforce_file_format=True)
except TypeError:
    ds.is_little_endian, ds.is_implicit_VR = True, False
    pydicom.dcmwrite(path, ds, write_like_original=False)

back = pydicom.dcmread(path)
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

func writePydicomPlan(t *testing.T, path, sop, frame, pid string) pydicomPlanRef {
	t.Helper()
	py := requirePydicom(t)
	spec, _ := json.Marshal(map[string]string{"sop": sop, "for": frame, "pid": pid})
	script := filepath.Join(t.TempDir(), "plan.py")
	if err := os.WriteFile(script, []byte(pydicomPlanWriter), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(py, script, path, string(spec)).CombinedOutput()
	if err != nil {
		t.Fatalf("pydicom: %v\n%s", err, out)
	}
	var ref pydicomPlanRef
	if err := json.Unmarshal(out, &ref); err != nil {
		t.Fatalf("%v: %s", err, out)
	}
	return ref
}

// Source: pydicom writes the plan and reads it back; the result's plan
// object must hold the same values (the highest TARGET prescription, the
// fractions summed over the groups, each beam's meterset from its group).
func TestComparePlanWrittenByPydicom(t *testing.T) {
	c := newUniformCase(t, 2, 1.01)
	rp := filepath.Join(c.dir, "rp.dcm")
	ref := writePydicomPlan(t, rp, c.ids.ReferencedRTPlanUID, c.ids.FrameOfReferenceUID, c.ids.PatientID)
	out := filepath.Join(c.dir, "r.json")
	vgExit(t, 0, "compare", "--reference", c.ref, "--evaluated", c.eval, "--plan", rp, "--json", out, "--no-structures", "-q")
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
