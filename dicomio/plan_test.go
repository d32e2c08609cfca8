package dicomio_test

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/fixture"
)

// planScript is the reference reader for RT Plans: "dump PATH..." reads
// plans with pydicom and prints, one JSON line each, every value
// dicomio.ReadPlan reads.
const planScript = `
import json, sys
import pydicom
from pydicom.dataset import Dataset

def num(v):
    return None if v is None or v == "" else float(v)

def intv(v):
    return 0 if v is None or v == "" else int(v)

def dump(path):
    ds = pydicom.dcmread(path, force=True)
    ion = "IonBeamSequence" in ds
    beams = []
    for b in ds.get("IonBeamSequence" if ion else "BeamSequence", []):
        cps = b.get("IonControlPointSequence" if ion else "ControlPointSequence", [])
        cp = cps[0] if len(cps) else Dataset()
        iso = cp.get("IsocenterPosition")
        beams.append({"number": int(b.BeamNumber), "name": str(b.get("BeamName", "")), "description": str(b.get("BeamDescription", "")),
                      "type": str(b.get("BeamType", "")), "radiation": str(b.get("RadiationType", "")),
                      "machine": str(b.get("TreatmentMachineName", "")), "unit": str(b.get("PrimaryDosimeterUnit", "")),
                      "delivery": str(b.get("TreatmentDeliveryType", "")), "cps": intv(b.get("NumberOfControlPoints")),
                      "final": num(b.get("FinalCumulativeMetersetWeight")), "energy": num(cp.get("NominalBeamEnergy")),
                      "gantry": num(cp.get("GantryAngle")), "iso": None if not iso else [float(x) for x in iso]})
    refs = []
    for d in ds.get("DoseReferenceSequence", []):
        refs.append({"number": intv(d.get("DoseReferenceNumber")), "uid": str(d.get("DoseReferenceUID", "")),
                     "structure": str(d.get("DoseReferenceStructureType", "")), "description": str(d.get("DoseReferenceDescription", "")),
                     "type": str(d.get("DoseReferenceType", "")), "roi": intv(d.get("ReferencedROINumber")),
                     "prescription": num(d.get("TargetPrescriptionDose")), "max": num(d.get("DeliveryMaximumDose"))})
    groups = []
    for g in ds.get("FractionGroupSequence", []):
        groups.append({"number": int(g.FractionGroupNumber), "description": str(g.get("FractionGroupDescription", "")),
                       "fractions": intv(g.get("NumberOfFractionsPlanned")), "beams": intv(g.get("NumberOfBeams")),
                       "brachy": intv(g.get("NumberOfBrachyApplicationSetups")),
                       "refs": [{"beam": int(r.ReferencedBeamNumber), "meterset": num(r.get("BeamMeterset")), "dose": num(r.get("BeamDose"))}
                                for r in g.get("ReferencedBeamSequence", [])]})
    rs = ds.get("ReferencedStructureSetSequence")
    print(json.dumps({
        "sop_class": str(ds.get("SOPClassUID", "")), "sop": str(ds.get("SOPInstanceUID", "")), "series": str(ds.get("SeriesInstanceUID", "")),
        "pid": str(ds.get("PatientID", "")), "pname": str(ds.get("PatientName", "")), "study": str(ds.get("StudyInstanceUID", "")),
        "for": str(ds.get("FrameOfReferenceUID", "")),
        "label": str(ds.get("RTPlanLabel", "")), "name": str(ds.get("RTPlanName", "")), "description": str(ds.get("RTPlanDescription", "")),
        "date": str(ds.get("RTPlanDate", "")), "time": str(ds.get("RTPlanTime", "")), "intent": str(ds.get("PlanIntent", "")),
        "geometry": str(ds.get("RTPlanGeometry", "")), "approval": str(ds.get("ApprovalStatus", "")),
        "structure_set": str(rs[0].ReferencedSOPInstanceUID) if rs else "",
        "refs": refs, "groups": groups, "beams": beams}))

for p in sys.argv[2:]:
    dump(p)
`

// refPlan is what pydicom read from an RT Plan.
type refPlan struct {
	SOPClass     string `json:"sop_class"`
	SOP          string
	Series       string
	PID, PName   string
	Study        string
	FoR          string `json:"for"`
	Label, Name  string
	Description  string
	Date, Time   string
	Intent       string
	Geometry     string
	Approval     string
	StructureSet string `json:"structure_set"`
	Refs         []struct {
		Number            int
		UID, Structure    string
		Description, Type string
		ROI               int
		Prescription, Max *float64
	}
	Groups []struct {
		Number      int
		Description string
		Fractions   int
		Beams       int
		Brachy      int
		Refs        []struct {
			Beam     int
			Meterset *float64
			Dose     *float64
		}
	}
	Beams []struct {
		Number                   int
		Name, Description, Type  string
		Radiation, Machine, Unit string
		Delivery                 string
		CPs                      int `json:"cps"`
		Final, Energy, Gantry    *float64
		Iso                      []float64
	}
}

func planPython(t *testing.T, args ...string) []byte {
	t.Helper()
	py := requirePython(t)
	script := filepath.Join(t.TempDir(), "plan.py")
	if err := os.WriteFile(script, []byte(planScript), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(py, append([]string{script}, args...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("pydicom plan script %v: %v\n%s", args, err, out)
	}
	return out
}

// pydicomPlans reads plans with pydicom.
func pydicomPlans(t *testing.T, paths ...string) []refPlan {
	t.Helper()
	out := planPython(t, append([]string{"dump"}, paths...)...)
	lines := strings.Split(strings.TrimSpace(string(out)), "\n")
	if len(lines) != len(paths) {
		t.Fatalf("pydicom dumped %d plans, want %d:\n%s", len(lines), len(paths), out)
	}
	refs := make([]refPlan, len(paths))
	for i, l := range lines {
		if err := json.Unmarshal([]byte(l), &refs[i]); err != nil {
			t.Fatalf("%v: %s", err, l)
		}
	}
	return refs
}

// eqPtr compares an optional number read by dicomio with pydicom's.
func eqPtr(a, b *float64) bool {
	if a == nil || b == nil {
		return a == nil && b == nil
	}
	return *a == *b
}

func fmtPtr(p *float64) string {
	if p == nil {
		return "absent"
	}
	return strings.TrimSpace(strings.Replace(jsonNum(*p), "\n", "", -1))
}

func jsonNum(v float64) string { b, _ := json.Marshal(v); return string(b) }

// comparePlan checks every value ReadPlan read against pydicom's reading.
func comparePlan(t *testing.T, ref refPlan, p *dicomio.Plan) {
	t.Helper()
	for _, c := range []struct{ what, got, want string }{
		{"SOPClassUID", p.SOPClassUID, ref.SOPClass},
		{"SOPInstanceUID", p.SOPInstanceUID, ref.SOP},
		{"SeriesInstanceUID", p.SeriesInstanceUID, ref.Series},
		{"PatientID", p.PatientID, ref.PID},
		{"PatientName", p.PatientName, ref.PName},
		{"StudyInstanceUID", p.StudyInstanceUID, ref.Study},
		{"FrameOfReferenceUID", p.FrameOfReferenceUID, ref.FoR},
		{"RTPlanLabel", p.Label, ref.Label},
		{"RTPlanName", p.Name, ref.Name},
		{"RTPlanDescription", p.Description, ref.Description},
		{"RTPlanDate", p.Date, ref.Date},
		{"RTPlanTime", p.Time, ref.Time},
		{"PlanIntent", p.Intent, ref.Intent},
		{"RTPlanGeometry", p.Geometry, ref.Geometry},
		{"ApprovalStatus", p.ApprovalStatus, ref.Approval},
		{"referenced structure set", p.ReferencedStructureSetUID, ref.StructureSet},
	} {
		if c.got != c.want {
			t.Errorf("%s %q, pydicom %q", c.what, c.got, c.want)
		}
	}
	if len(p.DoseReferences) != len(ref.Refs) {
		t.Fatalf("%d dose references, pydicom %d", len(p.DoseReferences), len(ref.Refs))
	}
	for i, w := range ref.Refs {
		g := p.DoseReferences[i]
		if g.Number != w.Number || g.UID != w.UID || g.StructureType != w.Structure || g.Description != w.Description ||
			g.Type != w.Type || g.ReferencedROINumber != w.ROI {
			t.Errorf("dose reference %d: %+v, pydicom %+v", i+1, g, w)
		}
		if !eqPtr(g.TargetPrescriptionGy, w.Prescription) || !eqPtr(g.DeliveryMaximumGy, w.Max) {
			t.Errorf("dose reference %d: prescription %s max %s, pydicom %s %s", i+1,
				fmtPtr(g.TargetPrescriptionGy), fmtPtr(g.DeliveryMaximumGy), fmtPtr(w.Prescription), fmtPtr(w.Max))
		}
	}
	if len(p.FractionGroups) != len(ref.Groups) {
		t.Fatalf("%d fraction groups, pydicom %d", len(p.FractionGroups), len(ref.Groups))
	}
	for i, w := range ref.Groups {
		g := p.FractionGroups[i]
		if g.Number != w.Number || g.Description != w.Description || g.FractionsPlanned != w.Fractions ||
			g.NumberOfBeams != w.Beams || g.NumberOfBrachySetups != w.Brachy || len(g.Beams) != len(w.Refs) {
			t.Errorf("fraction group %d: %+v, pydicom %+v", i+1, g, w)
			continue
		}
		for j, wr := range w.Refs {
			gr := g.Beams[j]
			if gr.BeamNumber != wr.Beam || !eqPtr(gr.Meterset, wr.Meterset) || !eqPtr(gr.DoseGy, wr.Dose) {
				t.Errorf("fraction group %d beam %d: %d %s %s, pydicom %d %s %s", g.Number, j+1,
					gr.BeamNumber, fmtPtr(gr.Meterset), fmtPtr(gr.DoseGy), wr.Beam, fmtPtr(wr.Meterset), fmtPtr(wr.Dose))
			}
		}
	}
	if len(p.Beams) != len(ref.Beams) {
		t.Fatalf("%d beams, pydicom %d", len(p.Beams), len(ref.Beams))
	}
	for i, w := range ref.Beams {
		g := p.Beams[i]
		if g.Number != w.Number || g.Name != w.Name || g.Description != w.Description || g.Type != w.Type ||
			g.RadiationType != w.Radiation || g.MachineName != w.Machine || g.DosimeterUnit != w.Unit ||
			g.DeliveryType != w.Delivery || g.ControlPoints != w.CPs {
			t.Errorf("beam %d: %+v, pydicom %+v", i+1, g, w)
		}
		if !eqPtr(g.FinalCumulativeMetersetWeight, w.Final) || !eqPtr(g.NominalEnergy, w.Energy) || !eqPtr(g.GantryAngleDeg, w.Gantry) {
			t.Errorf("beam %d: final weight %s energy %s gantry %s, pydicom %s %s %s", g.Number,
				fmtPtr(g.FinalCumulativeMetersetWeight), fmtPtr(g.NominalEnergy), fmtPtr(g.GantryAngleDeg),
				fmtPtr(w.Final), fmtPtr(w.Energy), fmtPtr(w.Gantry))
		}
		switch {
		case (g.Isocenter == nil) != (w.Iso == nil):
			t.Errorf("beam %d: isocentre %v, pydicom %v", g.Number, g.Isocenter, w.Iso)
		case g.Isocenter != nil && (g.Isocenter[0] != w.Iso[0] || g.Isocenter[1] != w.Iso[1] || g.Isocenter[2] != w.Iso[2]):
			t.Errorf("beam %d: isocentre %v, pydicom %v", g.Number, *g.Isocenter, w.Iso)
		}
	}
}

// Source: the pydicom project's rtplan.dcm (implicit VR little endian, one
// static photon beam, two dose references, 30 fractions), read by pydicom.
func TestReadPlanPydicomTestFile(t *testing.T) {
	path := pydicomTestFile(t, "rtplan.dcm")
	p, err := dicomio.ReadPlan(path)
	if err != nil {
		t.Fatal(err)
	}
	comparePlan(t, pydicomPlans(t, path)[0], p)
	// The helpers on the same file: its one TARGET reference prescribes
	// 30.826203 Gy (TargetPrescriptionDose as written), its one fraction
	// group 30 fractions, beam 1 116.0036697 MU per fraction.
	if rx, ok := p.PrescriptionGy(); !ok || rx != 30.826203 {
		t.Errorf("PrescriptionGy %v %v, the file's TargetPrescriptionDose is 30.826203", rx, ok)
	}
	if ms, ok := p.FractionGroups[0].Meterset(1); !ok || ms != 116.0036697 {
		t.Errorf("meterset of beam 1: %v %v, the file's BeamMeterset is 116.0036697", ms, ok)
	}
	if b := p.Beam(1); b == nil || b.Name != "Field 1" || !b.IsTreatment() {
		t.Errorf("Beam(1) = %+v", b)
	}
}

// Source: plans written by pydicom (testdata/dicom/plans, from
// testdata/generate.py: a photon plan with two prescription levels, two
// fraction groups and a setup beam; an RT Ion Plan), read back by pydicom.
func TestReadPlanWrittenByPydicom(t *testing.T) {
	paths := []string{fixture.Path(t, "dicom/plans/RP_photon.dcm"), fixture.Path(t, "dicom/plans/RP_ion.dcm")}
	refs := pydicomPlans(t, paths...)
	for i, path := range paths {
		p, err := dicomio.ReadPlan(path)
		if err != nil {
			t.Fatal(err)
		}
		comparePlan(t, refs[i], p)
	}
	// What the script wrote, by hand: the highest of the two TARGET
	// prescriptions (70 and 56 Gy), the boost group's 5 fractions.
	p, _ := dicomio.ReadPlan(paths[0])
	if rx, ok := p.PrescriptionGy(); !ok || rx != 70 {
		t.Errorf("PrescriptionGy %v %v, want 70 (the higher of 70 and 56)", rx, ok)
	}
	if n := len(p.Prescriptions()); n != 2 {
		t.Errorf("%d prescriptions, want 2 (the organ-at-risk reference is not one)", n)
	}
	if p.FractionGroups[1].FractionsPlanned != 5 {
		t.Errorf("group 2: %d fractions, want 5", p.FractionGroups[1].FractionsPlanned)
	}
	if b := p.Beam(99); b == nil || b.IsTreatment() {
		t.Errorf("the setup beam %+v must not count as treatment", b)
	}
	ion, _ := dicomio.ReadPlan(paths[1])
	if ion.SOPClassUID != dicomio.RTIonPlanStorage || len(ion.Beams) != 2 || !ion.Beams[0].Ion {
		t.Errorf("ion plan read as %+v", ion)
	}
}

func ptr(v float64) *float64 { return &v }

// testPlan is an invented plan with every field WritePlan writes.
func testPlan() *dicomio.Plan {
	return &dicomio.Plan{
		Label: "SRS_3MET", Name: "Three metastases", Description: "invented for tests", Intent: "CURATIVE",
		ReferencedStructureSetUID: "2.25.777",
		DoseReferences: []dicomio.DoseReference{
			{Number: 1, Type: "TARGET", Description: "PTV_Left", ReferencedROINumber: 2, TargetPrescriptionGy: ptr(20), DeliveryMaximumGy: ptr(25)},
			{Number: 2, Type: "ORGAN_AT_RISK", Description: "Brainstem", DeliveryMaximumGy: ptr(12.5)},
		},
		Beams: []dicomio.Beam{
			{Number: 1, Name: "Arc 1", MachineName: "LINAC_A", NominalEnergy: ptr(6), GantryAngleDeg: ptr(181), Isocenter: &[3]float64{5.5, -10.25, 30}},
			{Number: 2, Name: "Arc 2", MachineName: "LINAC_A", NominalEnergy: ptr(6), GantryAngleDeg: ptr(179)},
		},
		FractionGroups: []dicomio.FractionGroup{{Number: 1, FractionsPlanned: 1, Beams: []dicomio.ReferencedBeam{
			{BeamNumber: 1, Meterset: ptr(2412.75), DoseGy: ptr(10)}, {BeamNumber: 2, Meterset: ptr(2390.5)}}}},
	}
}

// Source: pydicom reads the plan WritePlan wrote with the values given;
// dcmtk's dcmftest and dicom3tools' dciodvfy check the file against PS3.10
// and the RT Plan IOD.
func TestWritePlan(t *testing.T) {
	path := filepath.Join(t.TempDir(), "rp.dcm")
	written, err := dicomio.WritePlan(path, testPlan(), dicomio.PhantomIdentifiers("PHANTOM^HEAD", "VG-DEMO-001"))
	if err != nil {
		t.Fatal(err)
	}
	back, err := dicomio.ReadPlan(path)
	if err != nil {
		t.Fatal(err)
	}
	comparePlan(t, pydicomPlans(t, path)[0], back)
	if back.SOPInstanceUID != written.SOPInstanceUID || back.Geometry != "PATIENT" || back.ApprovalStatus != "UNAPPROVED" {
		t.Errorf("read back %+v, written %+v", back, written)
	}
	if rx, ok := back.PrescriptionGy(); !ok || rx != 20 {
		t.Errorf("prescription %v %v, want 20", rx, ok)
	}
	if ms, ok := back.FractionGroups[0].Meterset(2); !ok || ms != 2390.5 {
		t.Errorf("meterset %v %v, want 2390.5", ms, ok)
	}
	t.Run("dcmftest", func(t *testing.T) {
		out, err := exec.Command(requireTool(t, "dcmftest"), path).CombinedOutput()
		if err != nil || !strings.HasPrefix(string(out), "yes:") {
			t.Errorf("dcmftest: %v %s", err, out)
		}
	})
	t.Run("dciodvfy", func(t *testing.T) {
		dciodvfyAccepts(t, requireTool(t, "dciodvfy"), path, "RTPlan")
	})
}

func TestWritePlanRefuses(t *testing.T) {
	ids := dicomio.PhantomIdentifiers("", "")
	for name, mod := range map[string]func(p *dicomio.Plan){
		"unknown beam":       func(p *dicomio.Plan) { p.FractionGroups[0].Beams[0].BeamNumber = 7 },
		"duplicate beam":     func(p *dicomio.Plan) { p.Beams[1].Number = 1 },
		"ion beam":           func(p *dicomio.Plan) { p.Beams[0].Ion = true },
		"bad reference type": func(p *dicomio.Plan) { p.DoseReferences[0].Type = "PTV" },
		"long label":         func(p *dicomio.Plan) { p.Label = "SEVENTEEN_CHARS_X" },
		"infinite dose":      func(p *dicomio.Plan) { p.DoseReferences[0].TargetPrescriptionGy = ptr(math.Inf(1)) },
	} {
		p := testPlan()
		mod(p)
		if _, err := dicomio.WritePlan(filepath.Join(t.TempDir(), "rp.dcm"), p, ids); err == nil {
			t.Errorf("%s: written", name)
		}
	}
}

// baseRTPlan is a hand-built RT Plan: one TARGET reference of 60 Gy, one
// fraction group of 30 fractions, one beam.
func baseRTPlan(repl ...el) []el {
	beam := []el{str(0x300A00C0, "IS", "1"), str(0x300A00C2, "LO", "F1"), str(0x300A00C4, "CS", "STATIC")}
	group := []el{str(0x300A0071, "IS", "1"), str(0x300A0078, "IS", "30"), str(0x300A0080, "IS", "1"),
		seq(0x300C0004, []el{str(0x300A0086, "DS", "250.5"), str(0x300C0006, "IS", "1")})}
	ref := []el{str(0x300A0012, "IS", "1"), str(0x300A0014, "CS", "SITE"), str(0x300A0020, "CS", "TARGET"), str(0x300A0026, "DS", "60")}
	elems := []el{
		str(tSOPClass, "UI", dicomio.RTPlanStorage),
		str(tSOPInstance, "UI", "2.25.3001"),
		str(tModality, "CS", "RTPLAN"),
		str(tPatientID, "LO", "VG-TEST-001"),
		str(0x300A0002, "SH", "HANDBUILT"),
		str(0x300A000C, "CS", "TREATMENT_DEVICE"),
		seq(0x300A0010, ref),
		seq(0x300A0070, group),
		seq(0x300A00B0, beam),
	}
	return with(elems, repl...)
}

// Source: the hand-built plan above; each case breaks one value and the
// error must name its tag.
func TestReadPlanBadInput(t *testing.T) {
	good, err := dicomio.ReadPlan(writeTemp(t, "rp.dcm", encodeFile(baseRTPlan(), explicitLE, true)))
	if err != nil {
		t.Fatal(err)
	}
	if rx, ok := good.PrescriptionGy(); !ok || rx != 60 || good.FractionGroups[0].FractionsPlanned != 30 {
		t.Fatalf("hand-built plan read as %+v", good)
	}
	beam := func(num string) []el {
		return []el{str(0x300A00C0, "IS", num), str(0x300A00C4, "CS", "STATIC")}
	}
	group := func(fx, beamRef, ms string) el {
		return seq(0x300A0070, []el{str(0x300A0071, "IS", "1"), str(0x300A0078, "IS", fx), str(0x300A0080, "IS", "1"),
			seq(0x300C0004, []el{str(0x300A0086, "DS", ms), str(0x300C0006, "IS", beamRef)})})
	}
	ref := func(rx string) el {
		return seq(0x300A0010, []el{str(0x300A0012, "IS", "1"), str(0x300A0020, "CS", "TARGET"), str(0x300A0026, "DS", rx)})
	}
	for _, c := range []struct {
		name  string
		elems []el
		want  string
	}{
		{"a dose, not a plan", with(baseRTPlan(), str(tModality, "CS", "RTDOSE")), "Modality (0008,0060): is RTDOSE, want RTPLAN"},
		{"prescription not a number", with(baseRTPlan(), ref("sixty")), "TargetPrescriptionDose (300A,0026)"},
		{"prescription negative", with(baseRTPlan(), ref("-60")), "TargetPrescriptionDose (300A,0026): is -60 Gy"},
		{"prescription infinite", with(baseRTPlan(), ref("inf")), "TargetPrescriptionDose (300A,0026)"},
		{"fractions negative", with(baseRTPlan(), group("-3", "1", "250")), "NumberOfFractionsPlanned (300A,0078): is -3"},
		{"fractions not an integer", with(baseRTPlan(), group("3.5", "1", "250")), "NumberOfFractionsPlanned (300A,0078)"},
		{"meterset negative", with(baseRTPlan(), group("30", "1", "-1")), "BeamMeterset (300A,0086)"},
		{"unknown beam", with(baseRTPlan(), group("30", "2", "250")), "ReferencedBeamNumber (300C,0006): 2 names no beam of the plan (beams: [1])"},
		{"duplicate beam", with(baseRTPlan(), seq(0x300A00B0, beam("1"), beam("1"))), "BeamNumber (300A,00C0): 1 is used twice"},
		{"beam without number", with(baseRTPlan(), seq(0x300A00B0, []el{str(0x300A00C2, "LO", "F1")})), "BeamNumber (300A,00C0): missing"},
	} {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "rp.dcm", encodeFile(c.elems, explicitLE, true))
			_, err := dicomio.ReadPlan(path)
			if err == nil {
				t.Fatal("read without error")
			}
			if !errors.Is(err, dicomio.ErrInvalid) || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), path) {
				t.Errorf("error %q: want ErrInvalid naming %q and the file", err, c.want)
			}
		})
	}
}

// TestDelimiterLengths: an Item Delimitation Item or a Sequence
// Delimitation Item whose value length is not 0 (DICOM PS3.5 section 7.5
// requires 0) is refused as invalid, in both little-endian encodings,
// quickly and without a large allocation. FuzzReadPlan found a 1.9 kB plan
// with a sequence delimiter of length 5 that made the DICOM library read
// the following bytes out of step and allocate 4 GiB for a misread
// element before failing.
func TestDelimiterLengths(t *testing.T) {
	for _, enc := range []struct {
		name     string
		ts       string
		explicit bool
	}{{"explicit VR", explicitLE, true}, {"implicit VR", implicitLE, false}} {
		good := encodeFile(baseRTPlan(), enc.ts, enc.explicit)
		for _, d := range []struct {
			name  string
			bytes []byte
		}{
			{"item delimitation", []byte{0xFE, 0xFF, 0x0D, 0xE0, 0, 0, 0, 0}},
			{"sequence delimitation", []byte{0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0}},
		} {
			t.Run(enc.name+"/"+d.name, func(t *testing.T) {
				at := bytes.Index(good, d.bytes)
				if at < 0 {
					t.Fatalf("the encoded plan has no %s item", d.name)
				}
				bad := bytes.Clone(good)
				bad[at+4] = 5
				path := filepath.Join(t.TempDir(), "RP.dcm")
				if err := os.WriteFile(path, bad, 0o644); err != nil {
					t.Fatal(err)
				}
				var m0, m1 runtime.MemStats
				runtime.ReadMemStats(&m0)
				_, err := dicomio.ReadPlan(path)
				runtime.ReadMemStats(&m1)
				if !errors.Is(err, dicomio.ErrInvalid) || !strings.Contains(err.Error(), "value length 5") || !strings.Contains(err.Error(), path) {
					t.Fatalf("error %v, want ErrInvalid naming the file and the length", err)
				}
				if a := m1.TotalAlloc - m0.TotalAlloc; a > 16<<20 {
					t.Fatalf("refusing a %d-byte file allocated %d MB", len(bad), a>>20)
				}
				// The file as written reads.
				if err := os.WriteFile(path, good, 0o644); err != nil {
					t.Fatal(err)
				}
				if _, err := dicomio.ReadPlan(path); err != nil {
					t.Fatalf("the unaltered plan: %v", err)
				}
			})
		}
	}
}
