package main

// End-to-end tests of the RT Plan's uses (issue 18, item 2) through the
// real command: the beams of summed doses checked against its beam list,
// normalisation to its prescription, a per-fraction dose scaled by its
// number of fractions, a watched case waiting for a beam it lacks.
// Invented data only.

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/phantom"
)

func fptr(v float64) *float64 { return &v }

// writeTestPlan writes an invented RT Plan named label whose SOP instance
// is ids.ReferencedRTPlanUID (so the doses written with ids name it):
// beams 1..n named ARC<i> (and a SETUP beam n+1 when setup), one fraction
// group of the given fractions, prescription rx Gy (none when 0).
func writeTestPlan(t *testing.T, path, label string, ids dicomio.Identifiers, n int, setup bool, fractions int, rx float64) *dicomio.Plan {
	t.Helper()
	p := &dicomio.Plan{Label: label, Intent: "CURATIVE"}
	if rx > 0 {
		p.DoseReferences = []dicomio.DoseReference{{Number: 1, Type: "TARGET", Description: "PTV", TargetPrescriptionGy: fptr(rx)}}
	}
	fg := dicomio.FractionGroup{Number: 1, FractionsPlanned: fractions}
	for b := 1; b <= n; b++ {
		p.Beams = append(p.Beams, dicomio.Beam{Number: b, Name: "ARC" + string(rune('0'+b)), NominalEnergy: fptr(6), GantryAngleDeg: fptr(float64(120 * b))})
		fg.Beams = append(fg.Beams, dicomio.ReferencedBeam{BeamNumber: b, Meterset: fptr(150 + float64(b))})
	}
	if setup {
		p.Beams = append(p.Beams, dicomio.Beam{Number: n + 1, Name: "SETUP", DeliveryType: "SETUP", NominalEnergy: fptr(6), GantryAngleDeg: fptr(0)})
	}
	p.FractionGroups = []dicomio.FractionGroup{fg}
	written, err := dicomio.WritePlan(path, p, ids)
	if err != nil {
		t.Fatal(err)
	}
	return written
}

// The beams in the reference folder are checked against the plan found
// there: all three treatment beams (the setup beam need not have a dose)
// make the plan's dose, compared with the plan dose without the warning of
// an unchecked sum; with beam 2 missing the set is refused naming it.
// Closed form as TestSummedBeamsThroughCompare: Γ = 0.667.
func TestSummedBeamsCheckedAgainstPlan(t *testing.T) {
	c := newBeamCase(t, 1.02)
	writeTestPlan(t, filepath.Join(c.beams, "RP.dcm"), "VG_BEAMS", c.ids, 3, true, 30, 2)
	out := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitPass, "compare", "--reference", c.beams, "--evaluated", c.eval, "--no-structures", "--json", out)
	if strings.Contains(r.stderr, "checked only against") {
		t.Errorf("warning of an unchecked sum with the plan there:\n%s", r.stderr)
	}
	res := readResultJSON(t, out)
	if len(res.DoseSums) != 1 || res.DoseSums[0].PlanCheck != `every treatment beam of RT Plan "VG_BEAMS" (beams 1, 2, 3)` {
		t.Fatalf("dose_sums %+v", res.DoseSums)
	}
	if res.Plan == nil || res.Plan.Label != "VG_BEAMS" || res.Plan.Source != "reference folder" || len(res.Plan.Beams) != 4 {
		t.Errorf("plan %+v", res.Plan)
	}
	mustContain(t, "notes", strings.Join(res.Notes, "\n"), "taken as a PLAN dose")
	checkGammaStats(t, "overall", res.Overall, repeat(0.02/0.03, 12*12*8), 1e-3)

	// Beam 2 missing: refused, naming it.
	os.Remove(c.parts[1])
	outDir := t.TempDir()
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.beams, "--evaluated", c.eval, "--no-structures", "--json", filepath.Join(outDir, "r.json")),
		`beam 2 "ARC2" of RT Plan "VG_BEAMS" has no dose among the 2 files summed (beams 1, 3)`)
	if names := testDirNames(t, outDir); len(names) != 0 {
		t.Errorf("outputs written: %v", names)
	}
}

// --norm-dose prescription normalises to the RT Plan's prescription, here
// 1.9 Gy against a 2 Gy reference (within the plausibility band). Closed
// form: Γ = |2.04 − 2|/(0.03 × 1.9) = 0.7018 everywhere. The band applies
// to a prescription too, and the refusals name what is missing.
func TestNormDosePrescription(t *testing.T) {
	c := newUniformCase(t, 2, 1.02)
	rp := filepath.Join(c.dir, "RP.dcm")
	writeTestPlan(t, rp, "VG_RX", c.ids, 2, false, 20, 1.9)
	base := []string{"compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--plan", rp}
	out := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitPass, append(base, "--norm-dose", "prescription", "--json", out)...)
	res := readResultJSON(t, out)
	if res.Criteria.NormDoseGy != 1.9 || res.Criteria.NormDoseSource != "prescription" {
		t.Errorf("criteria %+v", res.Criteria)
	}
	mustContain(t, "stdout", r.stdout, "normalisation dose 1.9 Gy (prescription)")
	checkGammaStats(t, "overall", res.Overall, repeat(0.04/(0.03*1.9), 12*12*8), 1e-3)
	for _, o := range res.Rules {
		if !strings.Contains(strings.Join(o.Conditions, "; "), "the RT Plan's prescription from --norm-dose prescription") {
			t.Errorf("rule %q does not show the prescription normalisation: %v", o.Rule, o.Conditions)
		}
	}
	// From a protocol: the same numbers, no override; a number given on
	// the command line overrides it.
	proto := filepath.Join(c.dir, "p.yaml")
	writeText(t, proto, "name: rx\ncriteria: {criteria: 3%/2mm, norm_dose_from: prescription}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n")
	out = filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, append(base, "--protocol", proto, "--json", out)...)
	if res := readResultJSON(t, out); res.Criteria.NormDoseGy != 1.9 || len(res.Choices.Overrides) != 0 {
		t.Errorf("protocol prescription: criteria %+v, overrides %v", res.Criteria, res.Choices.Overrides)
	}
	out = filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, append(base, "--protocol", proto, "--norm-dose", "2", "--json", out)...)
	if res := readResultJSON(t, out); res.Criteria.NormDoseGy != 2 || !strings.Contains(strings.Join(res.Choices.Overrides, ";"), "protocol: the RT Plan's prescription") {
		t.Errorf("--norm-dose over a protocol prescription: %+v %v", res.Criteria, res.Choices.Overrides)
	}
	writeText(t, proto, "name: rx\ncriteria: {criteria: 3%/2mm, norm_dose_from: prescription, norm_dose_gy: 2}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n")
	oneErrorLine(t, vgExit(t, exitError, append(base, "--protocol", proto)...), "norm_dose_from", "leave norm_dose_gy out")

	// No plan; a plan without a prescription; a course prescription
	// against a per-fraction reference (the band, naming the plan's
	// fractions); a plan the reference was not computed for.
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--norm-dose", "prescription"),
		"--norm-dose prescription (or the protocol's norm_dose_from: prescription) needs the RT Plan")
	noRx := filepath.Join(c.dir, "RP_norx.dcm")
	writeTestPlan(t, noRx, "VG_NORX", c.ids, 2, false, 20, 0)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--plan", noRx, "--norm-dose", "prescription"),
		`RT Plan "VG_NORX"`, "states no prescription", "TargetPrescriptionDose (300A,0026)")
	course := filepath.Join(c.dir, "RP_course.dcm")
	writeTestPlan(t, course, "VG_COURSE", c.ids, 2, false, 20, 40)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--plan", course, "--norm-dose", "prescription"),
		"the normalisation dose, the RT Plan's prescription 40 Gy, is 20 × the reference maximum 2 Gy", `(20 fractions: the RT Plan "VG_COURSE" plans 20 fractions)`,
		"check that the RT Plan is this dose's", "--accept-norm-dose")
	other := c.ids
	other.ReferencedRTPlanUID = dicomio.NewUID()
	otherRP := filepath.Join(c.dir, "RP_other.dcm")
	writeTestPlan(t, otherRP, "VG_OTHER", other, 2, false, 20, 1.9)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--plan", otherRP, "--norm-dose", "prescription"),
		"the reference dose was computed for RT Plan "+c.ids.ReferencedRTPlanUID, `not for RT Plan "VG_OTHER"`)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--norm-dose", "prescriptions"),
		"--norm-dose", "want a dose in Gy, or prescription")
}

// --scale-evaluated fractions takes the plan's NumberOfFractionsPlanned
// (30) for a per-fraction evaluated dose; the refusal without it names the
// plan's number as the likely factor. Closed form: 30 × 2.04 = 61.2 Gy
// against 60 Gy, Γ = 1.2/(0.03 × 60) = 0.667.
func TestScaleEvaluatedFractionsFromPlan(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	ref, fx, rp := filepath.Join(dir, "RD_plan.dcm"), filepath.Join(dir, "RD_mc_fraction.dcm"), filepath.Join(dir, "RP.dcm")
	writePartDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(60), ids, "PLAN", 0, 0, nil)
	writePartDose(t, fx, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids, "FRACTION_SESSION", 1, 0, nil)
	writeTestPlan(t, rp, "VG_30FX", ids, 2, false, 30, 60)
	base := []string{"compare", "--reference", ref, "--evaluated", fx, "--no-structures", "--plan", rp}
	oneErrorLine(t, vgExit(t, exitError, base...), "the reference is 29.41 × the evaluated dose", `The likely factor is 30 (the RT Plan "VG_30FX" plans 30 fractions)`, "--scale-evaluated 30")
	out := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitPass, append(base, "--scale-evaluated", "fractions", "--json", out)...)
	res := readResultJSON(t, out)
	want := `--scale-evaluated fractions: 30 fractions planned (NumberOfFractionsPlanned of fraction group 1 of RT Plan "VG_30FX")`
	if res.Choices.EvaluatedScale == nil || *res.Choices.EvaluatedScale != 30 || res.Choices.EvaluatedScaleSource != want {
		t.Errorf("choices %+v", res.Choices)
	}
	mustContain(t, "stdout", r.stdout, "under: evaluated dose multiplied by 30 ("+want+")")
	checkGammaStats(t, "overall", res.Overall, repeat(1.2/(0.03*60), 12*12*8), 1e-3)
	// A plan without the number, and a plan of other doses.
	noFx := filepath.Join(dir, "RP_nofx.dcm")
	writeTestPlan(t, noFx, "VG_NOFX", ids, 2, false, 0, 60)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", ref, "--evaluated", fx, "--no-structures", "--plan", noFx, "--scale-evaluated", "fractions"),
		"fraction group 1 of", "states no NumberOfFractionsPlanned (300A,0078)")
	other := ids
	other.ReferencedRTPlanUID = dicomio.NewUID()
	otherRP := filepath.Join(dir, "RP_other.dcm")
	writeTestPlan(t, otherRP, "VG_OTHER", other, 2, false, 30, 60)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", ref, "--evaluated", fx, "--no-structures", "--plan", otherRP, "--scale-evaluated", "fractions"),
		"--scale-evaluated fractions: the reference dose was computed for RT Plan")
}

// A watched case whose beam doses arrive one by one waits, with its RT
// Plan there, for the beam it lacks instead of being compared (or moved
// aside) half-summed; once the beam is there it is compared (closed form
// Γ = 0.667, pass) and the plan is in the result.
func TestWatchWaitsForPlanBeams(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "results")
	c := newBeamCase(t, 1.02)
	caseDir := filepath.Join(dir, "case1")
	os.Mkdir(caseDir, 0o755)
	copyTo := func(src, name string) {
		data, err := os.ReadFile(src)
		if err != nil {
			t.Fatal(err)
		}
		writeBytes(t, filepath.Join(caseDir, name), data)
	}
	copyTo(c.parts[0], "ref_beam1.dcm")
	copyTo(c.parts[2], "ref_beam3.dcm")
	copyTo(c.eval, "eval_mc.dcm")
	writeTestPlan(t, filepath.Join(caseDir, "RP.dcm"), "VG_WATCH", c.ids, 3, false, 30, 2)
	backdateTree(t, dir)
	args := []string{"watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms", "--no-structures", "-v"}
	r := vgRun(t, args...)
	if r.code != exitPass || !strings.Contains(r.stderr, "waits for beams 2 of the reference (RT Plan") {
		t.Fatalf("with beam 2 missing: %s", r)
	}
	if _, err := os.Stat(filepath.Join(out, "case1")); err == nil {
		t.Fatalf("the incomplete case was compared")
	}
	if _, err := os.Stat(filepath.Join(dir, ".failed")); err == nil {
		t.Fatalf("the incomplete case was moved aside")
	}
	copyTo(c.parts[1], "ref_beam2.dcm")
	backdateTree(t, dir)
	vgExit(t, exitPass, args...)
	res := readResultJSON(t, filepath.Join(out, "case1", "result.json"))
	if res.Verdict != "pass" || res.Plan == nil || res.Plan.Label != "VG_WATCH" || len(res.DoseSums) != 1 || !strings.Contains(res.DoseSums[0].PlanCheck, "every treatment beam") {
		t.Errorf("verdict %s, plan %+v, dose_sums %+v", res.Verdict, res.Plan, res.DoseSums)
	}
	checkGammaStats(t, "overall", res.Overall, repeat(0.02/0.03, 12*12*8), 1e-3)
}
