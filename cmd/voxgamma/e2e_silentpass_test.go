package main

// Ways a pass could be wrong (docs/bad-input.md, "Ways a pass could be
// wrong"): each test runs the real command on a case where voxgamma used to
// say "pass" with exit 0 although a physicist, told the facts, would not
// sign, and checks that the verdict now fails or is refused, with the reason
// in every output. The truths are closed forms on uniform and piecewise
// constant invented doses, derived beside each case.

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
	"voxgamma/phantom"
	"voxgamma/result"
)

// ruleOutcomes returns the rule outcomes of r whose rule text contains
// what, in order.
func ruleOutcomes(r *result.Result, what string) []result.RuleOutcome {
	var out []result.RuleOutcome
	for _, o := range r.Rules {
		if strings.Contains(o.Rule, what) {
			out = append(out, o)
		}
	}
	return out
}

func mustContain(t *testing.T, what, text string, wants ...string) {
	t.Helper()
	for _, w := range wants {
		if !strings.Contains(text, w) {
			t.Errorf("%s does not contain %q:\n%s", what, w, text)
		}
	}
}

// TestSilentPassCoverage: an evaluated grid cropped to half the reference's
// frames. Flat doses 2 Gy and 2.04 Gy give Γ = |k − 1|/δ = 0.02/0.03 = 0.667
// wherever the grids overlap (TestCompareUniformScale's closed form), so
// every compared point passes; but half the reference points above the
// threshold were never compared. Coverage is a rule of every preset (≥ 99.5
// %, this tool's choice), and a target partly outside a grid is not judged
// on its covered part.
func TestSilentPassCoverage(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	ref := filepath.Join(dir, "ref.dcm")
	writeTestDose(t, ref, [3]int{20, 20, 20}, [3]float64{-19, -19, -19}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
	full := filepath.Join(dir, "eval_full.dcm")
	writeTestDose(t, full, [3]int{24, 24, 24}, [3]float64{-23, -23, -23}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids)
	// Frames z = −23 … −1 mm: the reference frames z ≤ −1 (10 of 20).
	crop := filepath.Join(dir, "eval_cropped.dcm")
	writeTestDose(t, crop, [3]int{24, 24, 12}, [3]float64{-23, -23, -23}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids)
	rs := filepath.Join(dir, "RS.dcm")
	writeTestStructures(t, rs, ids,
		// Inside both grids when the evaluated grid is whole; cut in half
		// by the cropped one.
		sphereROI(t, "PTV_mid", "PTV", 1, phantom.Sphere{Centre: [3]float64{0, 0, 0}, Radius: 6}, ids.FrameOfReferenceUID),
		// Reaches z = 23 mm, beyond the reference grid (its voxels end at
		// z = 20 mm): partly outside whatever the evaluated grid.
		sphereROI(t, "PTV_edge", "PTV", 2, phantom.Sphere{Centre: [3]float64{-8, -8, 16}, Radius: 7}, ids.FrameOfReferenceUID))

	// Control: the same structures inside the whole grids... except
	// PTV_edge, which sticks out of the reference grid: not met.
	out := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitRuleFail, "compare", "--reference", ref, "--evaluated", full, "--structures", rs, "--json", out, "--quiet")
	res := readResultJSON(t, out)
	if c := res.Overall.CoveragePercent; c == nil || *c != 100 {
		t.Errorf("whole grids: coverage %v, want 100", c)
	}
	mid, edge := resultROI(t, res, "PTV_mid"), resultROI(t, res, "PTV_edge")
	if mid.CoveredPercent == nil || *mid.CoveredPercent != 100 || edge.CoveredPercent == nil || *edge.CoveredPercent >= 99 {
		t.Fatalf("covered: PTV_mid %v, PTV_edge %v", mid.CoveredPercent, edge.CoveredPercent)
	}
	for _, o := range ruleOutcomes(res, "each target") {
		switch o.Subject {
		case "PTV_mid":
			if o.Outcome != result.Met {
				t.Errorf("PTV_mid, wholly covered, Γ 0.667: %+v", o)
			}
		case "PTV_edge":
			if o.Outcome != result.NotMet || *o.Value != 100 || !strings.Contains(o.Reason, "lies inside both dose grids") {
				t.Errorf("PTV_edge passes 100 %% of its covered part only: %+v", o)
			}
		}
	}

	// Cropped: 100 % of the compared points pass, but half were never
	// compared.
	out = filepath.Join(t.TempDir(), "r.json")
	csv := filepath.Join(filepath.Dir(out), "r.csv")
	r := vgExit(t, exitRuleFail, "compare", "--reference", ref, "--evaluated", crop, "--no-structures", "--json", out, "--csv", csv)
	res = readResultJSON(t, out)
	o := res.Overall
	if *o.PassRate != 100 || o.OutsideEvaluated == 0 {
		t.Fatalf("cropped: pass rate %v, %d outside", *o.PassRate, o.OutsideEvaluated)
	}
	want := 100 * float64(o.Evaluated) / float64(o.Evaluated+o.OutsideEvaluated)
	if math.Abs(want-50) > 1e-9 || o.CoveragePercent == nil || *o.CoveragePercent != want {
		t.Errorf("coverage %v, want %v (10 of 20 frames)", o.CoveragePercent, want)
	}
	cov := ruleOutcomes(res, "coverage")
	if len(cov) != 1 || cov[0].Outcome != result.NotMet || cov[0].ValueText != "50.00" || res.Verdict != "fail" {
		t.Fatalf("coverage rule %+v, verdict %s", cov, res.Verdict)
	}
	mustContain(t, "stdout", r.stdout, "[NOT MET       ] overall: coverage ≥ 99.5 % (overall): 50.00", "50.00 % of the points above the threshold compared")
	mustContain(t, "CSV", string(mustReadFile(t, csv)), "coverage_percent", ",50.00,")

	// A protocol may judge ROIs on their covered part, as it says.
	rsMid := filepath.Join(dir, "RS_mid.dcm")
	writeTestStructures(t, rsMid, ids, sphereROI(t, "PTV_mid", "PTV", 1, phantom.Sphere{Centre: [3]float64{0, 0, 0}, Radius: 6}, ids.FrameOfReferenceUID))
	proto := filepath.Join(dir, "partial.yaml")
	writeText(t, proto, "name: partial-rois\ncriteria: {criteria: 3%/2mm}\ncoverage: {overall_percent: 40, roi_percent: 0}\n"+
		"rules:\n  - {subject: targets, metric: pass_rate, op: \">=\", limit: 95}\n")
	out = filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, "compare", "--reference", ref, "--evaluated", crop, "--structures", rsMid, "--protocol", proto, "--json", out, "--quiet")
	res = readResultJSON(t, out)
	if m := resultROI(t, res, "PTV_mid"); m.CoveredPercent == nil || *m.CoveredPercent > 60 || *m.CoveredPercent < 40 {
		t.Errorf("PTV_mid cut in half: covered %v", m.CoveredPercent)
	}
}

func writeText(t *testing.T, path, text string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestSilentPassNoStructures: without a structure set the default
// protocol's per-target rule has nothing to check. It is not met, and says
// so; run deliberately without structures it is not applicable, shown as
// such (never as met) in the console, the JSON and the report; batch reads
// the manifest word "none" the same way.
func TestSilentPassNoStructures(t *testing.T) {
	c := newUniformCase(t, 2, 1.02) // Γ = 0.667 everywhere
	out := t.TempDir()
	r := vgExit(t, exitRuleFail, "compare", "--reference", c.ref, "--evaluated", c.eval, "--json", filepath.Join(out, "a.json"))
	mustContain(t, "stdout", r.stdout, "[NOT MET       ] each target: pass rate ≥ 95 % (targets): n/a: no target ROI in this comparison: nothing to check")
	oneErrorLine(t, withoutWarnings(r), "verdict fail: 1 of 4 rule checks not met (exit 2)")
	res := readResultJSON(t, filepath.Join(out, "a.json"))
	if o := ruleOutcomes(res, "each target"); len(o) != 1 || o[0].Outcome != result.NotMet || o[0].Met {
		t.Errorf("targets rule without structures: %+v", o)
	}

	report := filepath.Join(out, "b.html")
	r = vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--json", filepath.Join(out, "b.json"), "--report", report)
	mustContain(t, "stdout", r.stdout, "[not applicable] each target: pass rate ≥ 95 % (targets): n/a: run without a structure set (--no-structures)")
	oneErrorLine(t, withoutWarnings(r), "verdict pass: 3 of 4 rule checks met, 1 not applicable (exit 0)")
	res = readResultJSON(t, filepath.Join(out, "b.json"))
	o := ruleOutcomes(res, "each target")
	if len(o) != 1 || o[0].Outcome != result.NotApplicable || o[0].Met || !res.Choices.NoStructures {
		t.Errorf("targets rule with --no-structures: %+v, choices %+v", o, res.Choices)
	}
	page := string(mustReadFile(t, report))
	mustContain(t, "report", page, "– not applicable", "3 of 4 protocol rule checks met, 1 not applicable")

	// --no-structures with --structures is a contradiction.
	rs := filepath.Join(out, "RS.dcm")
	writeTestStructures(t, rs, c.ids, sphereROI(t, "PTV_1", "PTV", 1, phantom.Sphere{Radius: 5}, c.ids.FrameOfReferenceUID))
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", rs, "--no-structures"), "--no-structures")

	// batch: an empty structures cell is a case without structures whose
	// per-target rule is not met; "none" says it is deliberate.
	dir := t.TempDir()
	var m strings.Builder
	m.WriteString("id,reference,evaluated,structures,protocol\n")
	for _, row := range []struct{ id, rs string }{{"empty", ""}, {"none", "none"}} {
		f, err := batchtest.Write(filepath.Join(dir, row.id), batchtest.Spec{NoStructures: true})
		if err != nil {
			t.Fatal(err)
		}
		fmt.Fprintf(&m, "%s,%s,%s,%s,\n", row.id, f.Reference, f.Evaluated, row.rs)
	}
	manifest := filepath.Join(dir, "cases.csv")
	writeText(t, manifest, m.String())
	r = vgExit(t, exitRuleFail, "batch", manifest, "--out", filepath.Join(dir, "out"), "--max-memory", "512MiB")
	for id, want := range map[string]string{"empty": batch.VerdictFail, "none": batch.VerdictPass} {
		st, err := batch.ReadStatus(filepath.Join(dir, "out", "cases", id))
		if err != nil || st.Verdict != want {
			t.Errorf("batch case %s: %v %v, want %s", id, st, err, want)
		}
	}
}

// TestSilentPassProtocolDefaults: a protocol file without threshold_percent
// takes the documented 10 % (AAPM TG-218, Miften et al., Med Phys 45 (2018)
// e53), not Go's zero. The reference is 20 Gy in a sphere of radius 8 mm and
// 0.4 Gy (2 % of the maximum) elsewhere; the evaluated dose is 25 % low
// everywhere. With a 0 % threshold the low-dose bath passes (|0.3 − 0.4| =
// 0.1 Gy < ΔD = 0.6 Gy) and outnumbers the sphere; with 10 % only the
// sphere is evaluated, where the evaluated dose never exceeds 15 Gy: every
// point is 5 Gy (Γ ≥ 8.3) from any match, so the plan fails. (That holds for
// an interpolation that stays within its samples, here trilinear: the cubic
// B-spline rings on this step from 15 to 0.3 Gy between neighbouring
// samples, up to about 20 Gy at the corners of the voxelised sphere.)
func TestSilentPassProtocolDefaults(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	sphere := phantom.Sphere{Radius: 8}
	ref := filepath.Join(dir, "ref.dcm")
	writeTestDose(t, ref, [3]int{30, 30, 30}, [3]float64{-29, -29, -29}, [3]float64{2, 2, 2}, phantom.InsideDose(sphere, 20, 0.4), ids)
	eval := filepath.Join(dir, "eval.dcm")
	writeTestDose(t, eval, [3]int{30, 30, 30}, [3]float64{-29, -29, -29}, [3]float64{2, 2, 2}, phantom.InsideDose(sphere, 15, 0.3), ids)
	proto := filepath.Join(dir, "clinic.yaml")
	writeText(t, proto, "name: clinic\ncriteria: {criteria: 3%/2mm, normalisation: global}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n")
	out := filepath.Join(dir, "r.json")
	vgExit(t, exitRuleFail, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--protocol", proto, "--json", out, "--quiet", "--interpolation", "trilinear")
	res := readResultJSON(t, out)
	if res.Criteria.ThresholdPercent != 10 || *res.Overall.PassRate > 5 {
		t.Errorf("threshold %v, pass rate %v: want 10 %% and a failing plan", res.Criteria.ThresholdPercent, *res.Overall.PassRate)
	}
	// The result shows the protocol resolved: every default written out.
	p, ok := res.Protocol.(map[string]any)
	if !ok {
		t.Fatalf("protocol %T", res.Protocol)
	}
	crit := p["criteria"].(map[string]any)
	if crit["threshold_percent"] != 10.0 || crit["search_mm"] != 6.0 || crit["norm_dose_from"] != "reference maximum" {
		t.Errorf("resolved criteria %v", crit)
	}
	if cov := p["coverage"].(map[string]any); cov["overall_percent"] != 99.5 || cov["roi_percent"] != 100.0 {
		t.Errorf("resolved coverage %v", cov)
	}
	if rules := p["rules"].([]any); rules[0].(map[string]any)["when_missing"] != "fail" {
		t.Errorf("resolved rule %v", rules[0])
	}
	// A pass-rate limit written as a fraction is refused, with a hint.
	writeText(t, proto, "name: clinic\ncriteria: {criteria: 3%/2mm}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 0.95}\n")
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--protocol", proto),
		"rules[0].limit: 0.95: looks like a fraction", "write 95 for 95 %")
	// A rule without its limit is refused, not read as 0.
	writeText(t, proto, "name: clinic\ncriteria: {criteria: 3%/2mm}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\"}\n")
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--protocol", proto),
		"rules[0].limit: missing")
}

// TestSilentPassNormDose: a normalisation dose far from the reference
// maximum makes every ΔD that many times too wide or narrow. Reference 20
// Gy flat, evaluated 18 Gy: with the maximum as D_norm, Γ = 2/(0.03·20) =
// 3.3 (fail); with --norm-dose 100 it would be 2/3 = 0.67 (a false pass).
func TestSilentPassNormDose(t *testing.T) {
	c := newUniformCase(t, 20, 0.9)
	base := []string{"compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures"}
	vgExit(t, exitRuleFail, append(base, "--quiet")...)
	oneErrorLine(t, vgExit(t, exitError, append(base, "--norm-dose", "100")...),
		"--norm-dose", "100 Gy is 5 × the reference maximum 20 Gy", "per-fraction", "--accept-norm-dose")
	oneErrorLine(t, vgExit(t, exitError, append(base, "--norm-dose", "2000")...),
		"cGy", "did you mean 20 Gy?")
	oneErrorLine(t, vgExit(t, exitError, append(base, "--norm-dose", "4")...),
		"the maximum is about 5 × it", "per-fraction dose against a plan-total reference")
	// Within the band: as asked, no condition.
	out := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitRuleFail, append(base, "--norm-dose", "22", "--json", out, "--quiet")...)
	// Accepted explicitly: computed, and every rule says it was.
	out = filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitPass, append(base, "--norm-dose", "100", "--accept-norm-dose", "--json", out)...)
	res := readResultJSON(t, out)
	if !res.Choices.UnusualNormDose {
		t.Errorf("choices %+v", res.Choices)
	}
	for _, o := range res.Rules {
		if !strings.Contains(strings.Join(o.Conditions, "; "), "normalisation dose 100 Gy accepted outside the plausible band") {
			t.Errorf("rule %q does not show the accepted normalisation dose: %v", o.Rule, o.Conditions)
		}
	}
	mustContain(t, "stdout", r.stdout, "under: normalisation dose 100 Gy accepted outside the plausible band (--accept-norm-dose)")
	// From a protocol file too.
	proto := filepath.Join(c.dir, "p.yaml")
	writeText(t, proto, "name: p\ncriteria: {criteria: 3%/2mm, norm_dose_gy: 100}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n")
	oneErrorLine(t, vgExit(t, exitError, append(base, "--protocol", proto)...), "norm_dose_gy")
}

// stereoCase is a small stereotactic-like case: a 20 Gy sphere (the target)
// in a 0.5 Gy bath (2.5 % of the maximum, below a 10 % threshold) holding
// an organ at risk, with an identical evaluated dose on a larger grid.
type stereoCase struct{ ref, eval, rs string }

func newStereoCase(t *testing.T, oarType string) stereoCase {
	t.Helper()
	dir := t.TempDir()
	ids := phantomIDs()
	ptv := phantom.Sphere{Radius: 6}
	dose := phantom.InsideDose(ptv, 20, 0.5)
	c := stereoCase{ref: filepath.Join(dir, "ref.dcm"), eval: filepath.Join(dir, "eval.dcm"), rs: filepath.Join(dir, "RS.dcm")}
	writeTestDose(t, c.ref, [3]int{24, 24, 24}, [3]float64{-23, -23, -23}, [3]float64{2, 2, 2}, dose, ids)
	writeTestDose(t, c.eval, [3]int{28, 28, 28}, [3]float64{-27, -27, -27}, [3]float64{2, 2, 2}, dose, ids)
	writeTestStructures(t, c.rs, ids,
		sphereROI(t, "PTV", "PTV", 1, ptv, ids.FrameOfReferenceUID),
		sphereROI(t, "Lens", oarType, 2, phantom.Sphere{Centre: [3]float64{12, 12, 12}, Radius: 4}, ids.FrameOfReferenceUID),
		// No interpreted type, inside the target's high dose.
		sphereROI(t, "Blob", "", 3, phantom.Sphere{Radius: 3}, ids.FrameOfReferenceUID))
	return c
}

// TestSilentPassStereotacticOAR: the stereotactic preset says an organ at
// risk wholly below the threshold is not a failure; its statuses are typed
// values, so the rule reads the status analysis writes. The doses are
// identical (Γ = 0 where evaluated), so every rule is met.
func TestSilentPassStereotacticOAR(t *testing.T) {
	c := newStereoCase(t, "ORGAN")
	out := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs, "--protocol", "stereotactic", "--json", out, "--quiet")
	res := readResultJSON(t, out)
	lens := resultROI(t, res, "Lens")
	if lens.Status != result.StatusBelowThreshold {
		t.Fatalf("Lens status %q", lens.Status)
	}
	o := ruleOutcomes(res, "each organ at risk")
	if len(o) != 1 || o[0].Subject != "Lens" || o[0].Outcome != result.Met || o[0].Value != nil {
		t.Errorf("OAR below threshold under the stereotactic preset: %+v", o)
	}
}

// TestSilentPassRounding: one rounding rule for every displayed pass rate.
// A flat 2 Gy reference of 70×70×60 voxels with 14 voxels at 2.2 Gy against
// a flat 2 Gy evaluated dose: the 14 differ by 0.2 Gy = 3.03 ΔD from every
// evaluated value (Γ capped, fail), the others match (Γ = 0). The pass rate
// is 100 · 293 986 / 294 000 = 99.9952…: rounded down it reads 99.9 with one
// decimal and 99.99 with two; rounded to nearest, "100.00".
func TestSilentPassRounding(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	spikes := map[[3]float64]bool{}
	for i := 0; i < 14; i++ {
		spikes[[3]float64{float64(-69 + 10*i), float64(-69 + 8*i), float64(-59 + 8*i)}] = true
	}
	ref := filepath.Join(dir, "ref.dcm")
	writeTestDose(t, ref, [3]int{70, 70, 60}, [3]float64{-69, -69, -59}, [3]float64{2, 2, 2}, func(p [3]float64) float64 {
		if spikes[p] {
			return 2.2
		}
		return 2
	}, ids)
	eval := filepath.Join(dir, "eval.dcm")
	writeTestDose(t, eval, [3]int{70, 70, 60}, [3]float64{-69, -69, -59}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
	out := t.TempDir()
	r := vgExit(t, exitPass, withOutputs([]string{"compare", "--reference", ref, "--evaluated", eval, "--no-structures"}, out)...)
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	if res.Overall.Evaluated != 294000 || res.Overall.Passed != 294000-14 {
		t.Fatalf("evaluated %d passed %d", res.Overall.Evaluated, res.Overall.Passed)
	}
	if res.Overall.PassRateText != "99.9" {
		t.Errorf("pass_rate_text %q", res.Overall.PassRateText)
	}
	for _, o := range ruleOutcomes(res, "overall: pass rate") {
		if o.ValueText != "99.99" {
			t.Errorf("rule %q value text %q, want 99.99", o.Rule, o.ValueText)
		}
	}
	mustContain(t, "stdout", r.stdout, "overall: 99.9 % of 294000 points pass", "(overall): 99.99\n")
	if strings.Contains(r.stdout, "100.00") && !strings.Contains(r.stdout, "coverage ≥ 99.5 % (overall): 100.00") {
		t.Errorf("stdout shows 100.00 for a pass rate below 100:\n%s", r.stdout)
	}
	mustContain(t, "CSV", string(mustReadFile(t, filepath.Join(out, "r.csv"))), "overall,,,,,294000,293986,99.99,")
	page := string(mustReadFile(t, filepath.Join(out, "report.html")))
	mustContain(t, "report", page, ">99.99<")
	if strings.Count(page, ">100.00<") > 1 { // the coverage rule's value is 100.00, and only it
		t.Errorf("the report shows 100.00 for a pass rate below 100")
	}
}

// TestSilentPassQuiet: -q prints nothing but one outcome line on stderr,
// whatever the outcome (the root command's help promises the verdict line).
func TestSilentPassQuiet(t *testing.T) {
	pass := newUniformCase(t, 2, 1.02)
	failEval := filepath.Join(pass.dir, "eval_low.dcm")
	writeTestDose(t, failEval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(1.9), pass.ids)
	for _, tc := range []struct {
		eval string
		code int
		line string
	}{
		{pass.eval, exitPass, "voxgamma: verdict pass: 3 of 4 rule checks met, 1 not applicable (exit 0)\n"},
		{failEval, exitRuleFail, "voxgamma: verdict fail: 2 of 4 rule checks not met, 1 not applicable (exit 2)\n"},
	} {
		r := vgExit(t, tc.code, "compare", "--reference", pass.ref, "--evaluated", tc.eval, "--no-structures", "-q")
		if r.stdout != "" || r.stderr != tc.line {
			t.Errorf("-q: stdout %q stderr %q, want only %q", r.stdout, r.stderr, tc.line)
		}
	}
	r := vgExit(t, exitPass, "demo", "--out", filepath.Join(t.TempDir(), "demo"), "-q")
	if r.stdout != "" || !strings.HasPrefix(r.stderr, "voxgamma: demo: verdict fail: 1 of 6 rule checks not met") || strings.Count(r.stderr, "\n") != 1 {
		t.Errorf("demo -q: stdout %q stderr %q", r.stdout, r.stderr)
	}
}

// TestSilentPassChoicesShown: an option that changes how a rule's ROI was
// sampled or judged is shown beside that rule in the console, the JSON and
// the report.
func TestSilentPassChoicesShown(t *testing.T) {
	c := newStereoCase(t, "ORGAN")
	out := t.TempDir()
	report := filepath.Join(out, "r.html")
	r := vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs,
		"--subgrid", "PTV", "--criteria", "3%/3mm", "--kind", "Blob=target", "--json", filepath.Join(out, "r.json"), "--report", report)
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	if b := resultROI(t, res, "Blob"); b.Kind != "target" || b.KindSource != "command-line rule Blob=target" {
		t.Errorf("Blob kind %q from %q", b.Kind, b.KindSource)
	}
	if res.Choices.SubGridStepMM != 0.5 || len(res.Choices.SubGridROIs) != 1 || len(res.Choices.Overrides) != 1 {
		t.Errorf("choices %+v", res.Choices)
	}
	criteria := "criteria 3%/3mm from --criteria (protocol: 3%/2mm)"
	for _, o := range res.Rules {
		conds := strings.Join(o.Conditions, "; ")
		if !strings.Contains(conds, criteria) {
			t.Errorf("rule %q (%s) lacks %q: %q", o.Rule, o.Subject, criteria, conds)
		}
		if got := strings.Contains(conds, "sub-grid"); got != (o.Subject == "PTV") {
			t.Errorf("rule %q (%s): sub-grid condition %v: %q", o.Rule, o.Subject, got, conds)
		}
		if got := strings.Contains(conds, "command-line rule Blob=target (--kind)"); got != (o.Subject == "Blob") {
			t.Errorf("rule %q (%s): kind condition %v: %q", o.Rule, o.Subject, got, conds)
		}
	}
	mustContain(t, "stdout", r.stdout, "(PTV): 100.00\n    under: "+criteria+"\n    under: sampled on a 0.5 mm sub-grid of reference points")
	mustContain(t, "report", string(mustReadFile(t, report)), "under: sampled on a 0.5 mm sub-grid", "under: kind target from the command-line rule Blob=target (--kind)")
}
