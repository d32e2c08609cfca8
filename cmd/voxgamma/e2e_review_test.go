package main

// The review outputs through the command: --report and --report-pdf of
// compare, and of batch. The PDF's numbers are read back with
// poppler-utils' pdftotext and compared with the JSON result written by
// the same run.

import (
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"voxgamma/demo"
	"voxgamma/dicomio"
	"voxgamma/internal/reftool"
	"voxgamma/result"
)

// pdfToText extracts a PDF's text, layout kept, with poppler-utils.
func pdfToText(t *testing.T, path string) string {
	t.Helper()
	out, err := exec.Command(reftool.Program(t, "pdftotext", "apt-get install poppler-utils"), "-layout", "-enc", "UTF-8", path, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext %s: %v", path, err)
	}
	return string(out)
}

// checkPDFAgainstJSON checks the PDF's text against the JSON result of the
// same run: the verdict, every input's SHA-256, every rule's measured value
// as the JSON states it (value_text), every ROI's pass rate and evaluated
// points on its row, and the plan's label.
func checkPDFAgainstJSON(t *testing.T, pdf string, r *result.Result) {
	t.Helper()
	text := pdfToText(t, pdf)
	flat := strings.Join(strings.Fields(text), " ")
	if !strings.Contains(flat, "Verdict: "+strings.ToUpper(r.Verdict)) {
		t.Errorf("the PDF does not state the verdict %q", r.Verdict)
	}
	for _, in := range r.Inputs {
		if !strings.Contains(text, in.SHA256) {
			t.Errorf("input %s: SHA-256 missing from the PDF", in.Role)
		}
	}
	for _, o := range r.Rules {
		want := o.ValueText
		if o.Value == nil {
			want = "not measured"
		}
		re := regexp.MustCompile(`(?m)^.*[ \t]+` + regexp.QuoteMeta(o.Level) + `[ \t]+` + regexp.QuoteMeta(o.Subject) + `[ \t]+` + regexp.QuoteMeta(want) + `\b`)
		if !re.MatchString(text) {
			t.Errorf("rule %q on %s: its row in the PDF does not show %q", o.Rule, o.Subject, want)
		}
	}
	for _, roi := range r.ROIs {
		if roi.Source == "derived" && roi.Name == "body" {
			continue // shown in BODY's row
		}
		re := regexp.MustCompile(`(?m)^[ \t]*` + regexp.QuoteMeta(roi.Name) + `[ \t]+.*?[ \t]` + regexp.QuoteMeta(strconv.Itoa(roi.Evaluated)) + `[ \t]+` + regexp.QuoteMeta(roi.PassRateText) + `[ \t]`)
		if !re.MatchString(text) {
			t.Errorf("ROI %s: no row with %d evaluated points and pass rate %s", roi.Name, roi.Evaluated, roi.PassRateText)
		}
	}
	if r.Plan != nil && !strings.Contains(flat, r.Plan.Label) {
		t.Errorf("the plan %s is not in the PDF", r.Plan.Label)
	}
}

// TestCompareReportPDF: compare on the demo's files with --report and
// --report-pdf; both written, the PDF's numbers equal the JSON's.
func TestCompareReportPDF(t *testing.T) {
	dir := t.TempDir()
	files, err := demo.Write(filepath.Join(dir, "case"))
	if err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "out")
	if err := os.Mkdir(out, 0o755); err != nil {
		t.Fatal(err)
	}
	js, html, pdf := filepath.Join(out, "r.json"), filepath.Join(out, "r.html"), filepath.Join(out, "r.pdf")
	vgExit(t, exitRuleFail, "compare", "--reference", files.Reference, "--evaluated", files.Evaluated, "--structures", files.Structures,
		"--plan", files.Plan, "--json", js, "--report", html, "--report-pdf", pdf, "--quiet")
	for _, p := range []string{html, pdf} {
		if st, err := os.Stat(p); err != nil || st.Size() == 0 {
			t.Fatalf("%s: %v", p, err)
		}
	}
	checkPDFAgainstJSON(t, pdf, readResultJSON(t, js))
}

// TestBatchReportPDF: batch --report --report-pdf writes both for every
// evaluated case, and each PDF agrees with its case's result.json.
func TestBatchReportPDF(t *testing.T) {
	dir := t.TempDir()
	files, err := demo.Write(filepath.Join(dir, "case"))
	if err != nil {
		t.Fatal(err)
	}
	manifest := filepath.Join(dir, "cases.csv")
	if err := os.WriteFile(manifest, []byte("id,reference,evaluated,structures,protocol\nc1,"+files.Reference+","+files.Evaluated+","+files.Structures+",tg218\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "results")
	vgExit(t, exitRuleFail, "batch", manifest, "--out", out, "--report", "--report-pdf", "--quiet")
	caseDir := filepath.Join(out, "cases", "c1")
	for _, name := range []string{"report.html", "report.pdf", "result.json"} {
		if st, err := os.Stat(filepath.Join(caseDir, name)); err != nil || st.Size() == 0 {
			t.Fatalf("%s: %v", name, err)
		}
	}
	checkPDFAgainstJSON(t, filepath.Join(caseDir, "report.pdf"), readResultJSON(t, filepath.Join(caseDir, "result.json")))
}

// TestDeidentifyPlan: with --deidentify and --plan, nothing the plan
// identifies reaches an output: not the patient's name or ID written in the
// plan, not its label, name or description (free text a planner may put a
// name in), not its SOP instance UID; the PDF is searched through its text
// (pdftotext), its streams being compressed.
func TestDeidentifyPlan(t *testing.T) {
	in := t.TempDir()
	f := plantCase(t, in, 0.97)
	ids, err := dicomio.ReadDoseInfo(f.Reference)
	if err != nil {
		t.Fatal(err)
	}
	rx := 30.0
	plan := &dicomio.Plan{Label: "PL_" + plantFamily, Name: "for " + plantGiven, Description: plantDesc,
		DoseReferences: []dicomio.DoseReference{{Number: 1, Type: "TARGET", Description: "PTV_" + plantFamily, TargetPrescriptionGy: &rx}},
		Beams:          []dicomio.Beam{{Number: 1, Name: "Arc " + plantGiven}},
		FractionGroups: []dicomio.FractionGroup{{Number: 1, FractionsPlanned: 5, Beams: []dicomio.ReferencedBeam{{BeamNumber: 1}}}}}
	rp := filepath.Join(filepath.Dir(f.Reference), "rp_"+plantFile+".dcm")
	written, err := dicomio.WritePlan(rp, plan, ids.Identifiers)
	if err != nil {
		t.Fatal(err)
	}
	vals := append(planted(t, f.Reference, f.Evaluated, f.Structures), written.SOPInstanceUID, "PL_"+plantFamily)
	out := t.TempDir()
	pdf := filepath.Join(out, "r.pdf")
	r := vgRun(t, "compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures, "--plan", rp, "--deidentify",
		"--json", filepath.Join(out, "r.json"), "--report", filepath.Join(out, "r.html"), "--report-pdf", pdf)
	if r.code == exitError {
		t.Fatalf("compare: %s", r)
	}
	grepWritten(t, "compare --plan", vals, r, out)
	text := pdfToText(t, pdf)
	for _, v := range vals {
		if v != "" && strings.Contains(strings.ToLower(text), strings.ToLower(v)) {
			t.Errorf("the PDF's text holds the planted value %q", v)
		}
	}
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	if res.Plan == nil || res.Plan.FractionsPlanned == nil || *res.Plan.FractionsPlanned != 5 || res.Plan.PrescriptionGy == nil || *res.Plan.PrescriptionGy != 30 {
		t.Errorf("the de-identified plan keeps its numbers: %+v", res.Plan)
	}
}
