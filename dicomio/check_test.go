package dicomio_test

import (
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/structure"
	"voxgamma/volume"
)

// A reference dose 20×20×20 at 2 mm with a high-dose cube where
// 10 ≤ i, j, k < 16 (2 Gy; 0.5 Gy elsewhere).
func checkGrids(t *testing.T) (*volume.Grid, *dicomio.DoseInfo) {
	t.Helper()
	g, err := volume.NewUniform([3]int{20, 20, 20}, [3]float64{0, 0, 0}, [3]float64{2, 2, 2}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		i, j, k := g.IJK(n)
		g.Data[n] = 0.5
		if i >= 10 && i < 16 && j >= 10 && j < 16 && k >= 10 && k < 16 {
			g.Data[n] = 2
		}
	}
	info := &dicomio.DoseInfo{Path: "/data/ref.dcm", DoseUnits: "GY", DoseType: "PHYSICAL", DoseSummationType: "PLAN"}
	info.FrameOfReferenceUID = "2.25.1"
	info.PatientID = "VG-DEMO-001"
	return g, info
}

func evalGrid(t *testing.T, origin [3]float64, n int) *volume.Grid {
	t.Helper()
	return evalBox(t, origin, [3]int{n, n, n})
}

func evalBox(t *testing.T, origin [3]float64, dims [3]int) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform(dims, origin, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func contains(list []string, sub string) bool {
	for _, s := range list {
		if strings.Contains(s, sub) {
			return true
		}
	}
	return false
}

func TestCheckConsistency(t *testing.T) {
	ref, rinfo := checkGrids(t)
	full := evalGrid(t, [3]float64{0, 0, 0}, 39)
	same := func() *dicomio.DoseInfo { c := *rinfo; c.Path = "/data/eval.dcm"; return &c }

	f := dicomio.CheckConsistency(rinfo, ref, same(), full, nil, false)
	if len(f.Errors)+len(f.Warnings) != 0 || f.Err() != nil {
		t.Errorf("consistent inputs: %+v", f)
	}

	e := same()
	e.FrameOfReferenceUID = "2.25.2"
	f = dicomio.CheckConsistency(rinfo, ref, e, full, nil, false)
	if !contains(f.Errors, "different frames of reference (2.25.1, 2.25.2)") || f.Err() == nil {
		t.Errorf("frames differ: %+v", f)
	}
	f = dicomio.CheckConsistency(rinfo, ref, e, full, nil, true)
	if len(f.Errors) != 0 || !contains(f.Warnings, "compared as if their coordinates agreed") {
		t.Errorf("frames differ, allowed: %+v", f)
	}

	e = same()
	e.DoseUnits = "RELATIVE"
	f = dicomio.CheckConsistency(rinfo, ref, e, full, nil, false)
	if !contains(f.Errors, "dose units differ: reference (ref.dcm) GY, evaluated (eval.dcm) RELATIVE") {
		t.Errorf("units differ: %+v", f)
	}

	e = same()
	e.DoseSummationType = "BEAM"
	f = dicomio.CheckConsistency(rinfo, ref, e, full, nil, false)
	if len(f.Errors) != 0 || !contains(f.Warnings, "reference (ref.dcm) PLAN, evaluated (eval.dcm) BEAM: comparing a beam, fraction-group or session dose with a plan dose is a classic mistake") {
		t.Errorf("summation differs: %+v", f)
	}

	e = same()
	e.PatientID = "VG-DEMO-002"
	f = dicomio.CheckConsistency(rinfo, ref, e, full, nil, false)
	if !contains(f.Warnings, "patient IDs differ") {
		t.Errorf("patients differ: %+v", f)
	}

	set := &structure.Set{Label: "RS", FrameOfReferenceUID: "2.25.3"}
	f = dicomio.CheckConsistency(rinfo, ref, same(), full, set, false)
	if !contains(f.Errors, "the reference dose (ref.dcm) and the structure set \"RS\" are in different frames of reference") {
		t.Errorf("structure set frame: %+v", f)
	}

	// Partial coverage: the high-dose cube spans x = 20..30 mm (6 voxel
	// planes at 20, 22, ..., 30); an evaluated grid ending at x = 25 mm
	// (and reaching far in y and z) covers the planes 20, 22, 24: half of
	// the 216 voxels are outside.
	part := evalBox(t, [3]float64{0, 0, 0}, [3]int{26, 39, 39})
	f = dicomio.CheckConsistency(rinfo, ref, same(), part, nil, false)
	if len(f.Errors) != 0 || !contains(f.Warnings, "50.0 % (108 voxels) of the reference high-dose region (216 voxels at ≥ 50 % of the reference maximum 2 Gy) lies outside the evaluated grid") {
		t.Errorf("partial coverage: %+v", f)
	}
	// None covered.
	away := evalGrid(t, [3]float64{-100, -100, -100}, 10)
	f = dicomio.CheckConsistency(rinfo, ref, same(), away, nil, false)
	if !contains(f.Errors, "the evaluated grid covers none of the reference high-dose region") {
		t.Errorf("no coverage: %+v", f)
	}
	// Rounding tolerance: a grid whose last plane is at x = 30 mm covers
	// the whole cube.
	edge := evalGrid(t, [3]float64{0, 0, 0}, 31)
	if f = dicomio.CheckConsistency(rinfo, ref, same(), edge, nil, false); len(f.Warnings)+len(f.Errors) != 0 {
		t.Errorf("edge coverage: %+v", f)
	}
	zero := ref.EmptyLike()
	f = dicomio.CheckConsistency(rinfo, zero, same(), full, nil, false)
	if !contains(f.Errors, "no positive value") {
		t.Errorf("zero reference: %+v", f)
	}
}

// TestCheckDoseMeaning: the checks of issue 11, item 11 on what PS3.3
// C.8.8.3 says the values are (DoseType, DoseUnits, DoseSummationType and
// its references).
func TestCheckDoseMeaning(t *testing.T) {
	ref, rinfo := checkGrids(t)
	full := evalGrid(t, [3]float64{0, 0, 0}, 39)
	same := func() *dicomio.DoseInfo { c := *rinfo; c.Path = "/data/eval.dcm"; return &c }

	e := same()
	e.DoseType = "EFFECTIVE"
	if m := dicomio.DoseTypeMismatch(rinfo, e); !strings.Contains(m, "dose types differ: reference (ref.dcm) PHYSICAL, evaluated (eval.dcm) EFFECTIVE") {
		t.Errorf("PHYSICAL against EFFECTIVE: %q", m)
	}
	if m := dicomio.DoseTypeMismatch(rinfo, same()); m != "" {
		t.Errorf("same types: %q", m)
	}
	e.DoseType = ""
	if m := dicomio.DoseTypeMismatch(rinfo, e); m != "" {
		t.Errorf("one type missing is not a mismatch: %q", m)
	}
	if f := dicomio.CheckConsistency(rinfo, ref, e, full, nil, false); !contains(f.Warnings, "DoseType (3004,0004) missing (reference PHYSICAL, evaluated (none given))") {
		t.Errorf("type missing: %+v", f)
	}

	r, e := same(), same()
	r.Path = "/data/ref.dcm"
	r.DoseUnits, e.DoseUnits = "RELATIVE", "RELATIVE"
	if f := dicomio.CheckConsistency(r, ref, e, full, nil, false); len(f.Errors) != 0 || !contains(f.Warnings, "both doses are RELATIVE") {
		t.Errorf("both relative: %+v", f)
	}

	r, e = same(), same()
	r.ReferencedRTPlanUID, e.ReferencedRTPlanUID = "2.25.10", "2.25.11"
	if f := dicomio.CheckConsistency(r, ref, e, full, nil, false); !contains(f.Warnings, "different RT Plans (ReferencedRTPlanSequence (300C,0002): reference 2.25.10, evaluated 2.25.11)") {
		t.Errorf("plans differ: %+v", f)
	}

	r, e = same(), same()
	r.DoseSummationType, e.DoseSummationType = "BEAM", "BEAM"
	r.ReferencedFractionGroupNumber, e.ReferencedFractionGroupNumber = 1, 1
	r.ReferencedBeamNumber, e.ReferencedBeamNumber = 1, 2
	if f := dicomio.CheckConsistency(r, ref, e, full, nil, false); !contains(f.Warnings, "both doses are BEAM doses but of different parts of the plan") {
		t.Errorf("different beams: %+v", f)
	}
	e.ReferencedBeamNumber = 1
	if f := dicomio.CheckConsistency(r, ref, e, full, nil, false); len(f.Warnings) != 0 {
		t.Errorf("the same beam: %+v", f)
	}
}
