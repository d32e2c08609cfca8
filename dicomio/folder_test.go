package dicomio_test

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/structure"
)

func writeDoseKind(t *testing.T, path string, ids dicomio.Identifiers, sum string) {
	t.Helper()
	g := testGrid(t, orientations[0], frameSets["uniform"])
	opt := dicomio.DoseOptions("test dose " + sum)
	opt.DoseSummationType = sum
	if sum == "BEAM" || sum == "FRACTION" {
		opt.ReferencedFractionGroupNumber = 1
	}
	if sum == "BEAM" {
		opt.ReferencedBeamNumber = 2
	}
	if _, err := dicomio.WriteDose(path, g, ids, opt); err != nil {
		t.Fatal(err)
	}
}

func hasLine(lines []string, prefix string) bool {
	for _, l := range lines {
		if strings.HasPrefix(l, prefix) {
			return true
		}
	}
	return false
}

func TestScanFolderChoose(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	other := dicomio.PhantomIdentifiers("PHANTOM^OTHER", "VG-DEMO-002")
	writeDoseKind(t, filepath.Join(dir, "plan.dcm"), ids, "PLAN")
	writeDoseKind(t, filepath.Join(dir, "rtdose_beam2.dcm"), ids, "BEAM")
	writeDoseKind(t, filepath.Join(dir, "fraction.dcm"), ids, "FRACTION")
	if _, err := dicomio.WriteStructureSet(filepath.Join(dir, "rs.dcm"), demoSet(), ids); err != nil {
		t.Fatal(err)
	}
	if _, err := dicomio.WriteStructureSet(filepath.Join(dir, "rs_other.dcm"), demoSet(), other); err != nil {
		t.Fatal(err)
	}
	os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("plan notes\n"), 0o644)
	os.WriteFile(filepath.Join(dir, "ct.dcm"), encodeFile(with(baseDose(), str(tModality, "CS", "CT")), explicitLE, true), 0o644)
	os.WriteFile(filepath.Join(dir, "bad_dose.dcm"), encodeFile(without(baseDose(), tPS), explicitLE, true), 0o644)
	os.Mkdir(filepath.Join(dir, "subdir"), 0o755)

	fo, err := dicomio.ScanFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(fo.Doses) != 3 || len(fo.StructureSets) != 2 || len(fo.Ignored) != 4 {
		t.Fatalf("found %d doses, %d structure sets, %d ignored: %+v", len(fo.Doses), len(fo.StructureSets), len(fo.Ignored), fo.Ignored)
	}
	c, err := fo.Choose()
	if err != nil {
		t.Fatal(err)
	}
	if filepath.Base(c.Dose.Path) != "plan.dcm" || c.StructureSet == nil || filepath.Base(c.StructureSet.Path) != "rs.dcm" {
		t.Fatalf("chose %s and %v", c.Dose.Path, c.StructureSet)
	}
	for _, want := range []string{
		"chose dose plan.dcm: DoseSummationType PLAN, DoseUnits GY, 5×4×5 grid, frame of reference " + ids.FrameOfReferenceUID,
		"ignored rtdose_beam2.dcm: DoseSummationType BEAM",
		"ignored fraction.dcm: DoseSummationType FRACTION",
		"chose structure set rs.dcm: label \"DEMO\", 5 ROIs, same frame of reference as the dose",
		"ignored rs_other.dcm: frame of reference " + other.FrameOfReferenceUID + " is not the dose's " + ids.FrameOfReferenceUID,
		"ignored notes.txt: not a DICOM file",
		"ignored ct.dcm: Modality CT (not RTDOSE, RTSTRUCT or RTPLAN)",
		"ignored bad_dose.dcm: unreadable RT Dose: PixelSpacing (0028,0030): missing",
		"ignored subdir: directory",
	} {
		if !hasLine(c.Account, want) {
			t.Errorf("account lacks %q:\n%s", want, c.Report())
		}
	}
	if c.Dose.Info.DoseSummationType != "PLAN" || c.Dose.Info.Path != c.Dose.Path {
		t.Errorf("dose info %+v", c.Dose.Info)
	}
	for _, d := range fo.Doses {
		// The beam dose references fraction group 1, beam 2 of the plan.
		if d.Info.DoseSummationType == "BEAM" && (d.Info.ReferencedFractionGroupNumber != 1 || d.Info.ReferencedBeamNumber != 2 || d.Info.ReferencedRTPlanUID != ids.ReferencedRTPlanUID) {
			t.Errorf("beam dose references %+v", d.Info)
		}
	}

	// A second plan dose: the choice is the user's.
	writeDoseKind(t, filepath.Join(dir, "plan2.dcm"), ids, "PLAN")
	fo, _ = dicomio.ScanFolder(dir)
	if _, err := fo.Choose(); err == nil || !strings.Contains(err.Error(), "2 RT Dose files") ||
		!strings.Contains(err.Error(), "plan.dcm (DoseSummationType PLAN), plan2.dcm (DoseSummationType PLAN); name the file to use") {
		t.Errorf("two plan doses: %v", err)
	}
}

func TestChooseOnlyBeamDose(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	writeDoseKind(t, filepath.Join(dir, "beam.dcm"), ids, "BEAM")
	fo, err := dicomio.ScanFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	c, err := fo.Choose()
	if err != nil {
		t.Fatal(err)
	}
	if !hasLine(c.Account, "warning: beam.dcm is not a whole-plan dose (DoseSummationType BEAM): comparing a beam, fraction-group or session dose with a plan dose is a classic mistake") ||
		!hasLine(c.Account, "no RT Structure Set in the folder") || c.StructureSet != nil {
		t.Errorf("account:\n%s", c.Report())
	}
	// Two beam doses and no plan dose: the parts of one dose, to sum
	// (whether they belong together is ReadDoseSet's to check).
	writeDoseKind(t, filepath.Join(dir, "beam2.dcm"), ids, "BEAM")
	fo, _ = dicomio.ScanFolder(dir)
	c, err = fo.Choose()
	if err != nil {
		t.Fatalf("two beam doses: %v", err)
	}
	if len(c.Doses) != 2 || filepath.Base(c.Doses[0].Path) != "beam.dcm" || filepath.Base(c.Doses[1].Path) != "beam2.dcm" || c.Dose.Path != c.Doses[0].Path ||
		!hasLine(c.Account, "chose 2 doses to sum, the folder holding no whole-plan dose: beam.dcm (DoseSummationType BEAM), beam2.dcm (DoseSummationType BEAM)") {
		t.Errorf("two beam doses: %+v\n%s", c.Doses, c.Report())
	}
	// A plan dose beside them is the dose; the beams are set aside.
	writeDoseKind(t, filepath.Join(dir, "plan.dcm"), ids, "PLAN")
	fo, _ = dicomio.ScanFolder(dir)
	if c, err = fo.Choose(); err != nil || c.Doses != nil || filepath.Base(c.Dose.Path) != "plan.dcm" || !hasLine(c.Account, "ignored beam2.dcm: DoseSummationType BEAM") {
		t.Errorf("plan dose beside beams: %v\n%v", err, c)
	}
}

func TestChooseStructureSets(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	writeDoseKind(t, filepath.Join(dir, "plan.dcm"), ids, "PLAN")
	for _, n := range []string{"rs1.dcm", "rs2.dcm"} {
		if _, err := dicomio.WriteStructureSet(filepath.Join(dir, n), &structure.Set{Label: n}, ids); err != nil {
			t.Fatal(err)
		}
	}
	fo, _ := dicomio.ScanFolder(dir)
	if _, err := fo.Choose(); err == nil || !strings.Contains(err.Error(), "2 RT Structure Set files") || !strings.Contains(err.Error(), "rs1.dcm, rs2.dcm; name the file to use") {
		t.Errorf("two structure sets: %v", err)
	}
	empty := t.TempDir()
	os.WriteFile(filepath.Join(empty, "readme.txt"), []byte("nothing here"), 0o644)
	fo, _ = dicomio.ScanFolder(empty)
	if _, err := fo.Choose(); err == nil || !strings.Contains(err.Error(), "no usable RT Dose file in "+empty) || !strings.Contains(err.Error(), "ignored readme.txt: not a DICOM file") {
		t.Errorf("no dose: %v", err)
	}
	if _, err := dicomio.ScanFolder(filepath.Join(empty, "missing")); err == nil {
		t.Error("scanning a missing folder succeeded")
	}
}

// The plan a dose names is chosen with it; other plans are set aside with
// the reason; a dose that names no plan takes the folder's only plan.
func TestChoosePlan(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	writeDoseKind(t, filepath.Join(dir, "dose.dcm"), ids, "PLAN")
	if _, err := dicomio.WritePlan(filepath.Join(dir, "rp.dcm"), testPlan(), ids); err != nil {
		t.Fatal(err)
	}
	other := testPlan()
	other.Label = "OLD"
	old, err := dicomio.WritePlan(filepath.Join(dir, "rp_old.dcm"), other, dicomio.PhantomIdentifiers("", ""))
	if err != nil {
		t.Fatal(err)
	}
	fo, err := dicomio.ScanFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(fo.Plans) != 2 {
		t.Fatalf("%d plans found: %+v", len(fo.Plans), fo.Ignored)
	}
	c, err := fo.Choose()
	if err != nil {
		t.Fatal(err)
	}
	if c.Plan == nil || filepath.Base(c.Plan.Path) != "rp.dcm" || c.Plan.Plan.SOPInstanceUID != ids.ReferencedRTPlanUID {
		t.Fatalf("chose plan %+v", c.Plan)
	}
	for _, want := range []string{
		`chose plan rp.dcm: label "SRS_3MET", the plan the dose names`,
		"ignored rp_old.dcm: the dose was computed for plan " + ids.ReferencedRTPlanUID + ", not this plan's " + old.SOPInstanceUID,
	} {
		if !hasLine(c.Account, want) {
			t.Errorf("account lacks %q:\n%s", want, c.Report())
		}
	}
	// A dose naming no plan (hand-built: voxgamma's writer refuses a PLAN
	// dose without its plan), alone with one plan in its frame: that plan.
	dir2 := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir2, "dose.dcm"), encodeFile(with(baseDose(), str(tFoR, "UI", ids.FrameOfReferenceUID)), explicitLE, true), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := dicomio.WritePlan(filepath.Join(dir2, "rp.dcm"), testPlan(), ids); err != nil {
		t.Fatal(err)
	}
	fo, _ = dicomio.ScanFolder(dir2)
	c, err = fo.Choose()
	if err != nil || c.Plan == nil || !hasLine(c.Account, `chose plan rp.dcm: label "SRS_3MET", the folder's only RT Plan (the dose names no plan)`) {
		t.Errorf("only plan: %v %+v\n%s", err, c.Plan, c.Report())
	}
	// The same, but the plan is in another frame of reference: none.
	os.Remove(filepath.Join(dir2, "rp.dcm"))
	if _, err := dicomio.WritePlan(filepath.Join(dir2, "rp.dcm"), testPlan(), dicomio.PhantomIdentifiers("", "")); err != nil {
		t.Fatal(err)
	}
	fo, _ = dicomio.ScanFolder(dir2)
	if c, err = fo.Choose(); err != nil || c.Plan != nil || !hasLine(c.Account, "ignored rp.dcm: frame of reference ") {
		t.Errorf("plan of another frame: %v %+v\n%s", err, c.Plan, c.Report())
	}
}
