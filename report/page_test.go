package report

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"voxgamma/internal/browsercheck"
	"voxgamma/result"
)

var smallCase = synthOptions{Dims: [3]int{48, 44, 40}, Spacing: [3]float64{3, 3, 3}, Fail: true}

func render(t *testing.T, p Page) ([]byte, *browsercheck.Node) {
	t.Helper()
	var buf bytes.Buffer
	if err := RenderHTML(&buf, p); err != nil {
		t.Fatal(err)
	}
	doc, err := browsercheck.Parse(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	return buf.Bytes(), doc
}

// cells returns a table row's cells by their data-col attribute.
func cells(tr *browsercheck.Node) map[string]string {
	out := map[string]string{}
	for _, td := range tr.Elements("td") {
		if c := td.Attr["data-col"]; c != "" {
			out[c] = strings.TrimSpace(td.TextContent())
		}
	}
	return out
}

// near checks that a number shown with some decimals is the result's
// value rounded: within half a unit of the last decimal shown.
func near(t *testing.T, what, shown string, want *float64) {
	t.Helper()
	if want == nil {
		if shown != "n/a" {
			t.Errorf("%s: shown %q, want n/a (null in the result)", what, shown)
		}
		return
	}
	v, err := strconv.ParseFloat(shown, 64)
	if err != nil {
		t.Errorf("%s: shown %q, want a number near %g", what, shown, *want)
		return
	}
	dec := 0
	if i := strings.IndexByte(shown, '.'); i >= 0 {
		dec = len(shown) - i - 1
	}
	if tol := 0.5*math.Pow(10, -float64(dec)) + 1e-9; math.Abs(v-*want) > tol {
		t.Errorf("%s: shown %q, the result says %g", what, shown, *want)
	}
}

// TestROITableFromResult renders the page and reads the per-ROI table
// back: every number must be the result's.
func TestROITableFromResult(t *testing.T) {
	page := synthCase(t, smallCase)
	r := page.Result
	_, doc := render(t, page)
	table := doc.ByID("roi-table")
	if table == nil {
		t.Fatal("no roi-table")
	}
	var overall *browsercheck.Node
	var rows []*browsercheck.Node
	for _, tr := range table.Elements("tr") {
		switch {
		case tr.HasClass("overall-row"):
			overall = tr
		case tr.HasClass("roi-row"):
			rows = append(rows, tr)
		}
	}
	if overall == nil {
		t.Fatal("no overall row")
	}
	o := cells(overall)
	if o["evaluated"] != strconv.Itoa(r.Overall.Evaluated) || o["pass_rate"] != r.Overall.PassRateText {
		t.Errorf("overall row: evaluated %q pass rate %q; result %d %q", o["evaluated"], o["pass_rate"], r.Overall.Evaluated, r.Overall.PassRateText)
	}
	near(t, "overall mean Γ", o["gamma_mean"], r.Overall.GammaMean)
	near(t, "overall P95 Γ", o["gamma_p95"], r.Overall.GammaP95)

	if len(rows) != len(r.ROIs) {
		t.Fatalf("%d ROI rows, the result has %d ROIs", len(rows), len(r.ROIs))
	}
	// Rows with a rule not met come first; each ROI exactly once.
	seen := map[int]bool{}
	failingDone := false
	for k, tr := range rows {
		i, err := strconv.Atoi(strings.TrimPrefix(tr.Attr["data-roi"], "roi-"))
		if err != nil || i < 0 || i >= len(r.ROIs) || seen[i] {
			t.Fatalf("row %d: data-roi %q", k, tr.Attr["data-roi"])
		}
		seen[i] = true
		roi := r.ROIs[i]
		failing := false
		for _, rule := range r.Rules {
			failing = failing || (rule.Subject == roi.Name && rule.Outcome == result.NotMet)
		}
		if failing && failingDone {
			t.Errorf("row %d: %s has a rule not met but comes after an ROI without one", k, roi.Name)
		}
		failingDone = failingDone || !failing
		if failing != tr.HasClass("failing") {
			t.Errorf("%s: failing %v, row class %q", roi.Name, failing, tr.Attr["class"])
		}
		c := cells(tr)
		name := strings.TrimSpace(tr.Elements("td")[0].TextContent())
		if name != roi.Name {
			t.Errorf("row %d: %q, want %q", k, name, roi.Name)
		}
		if c["evaluated"] != strconv.Itoa(roi.Evaluated) {
			t.Errorf("%s: evaluated %q, want %d", roi.Name, c["evaluated"], roi.Evaluated)
		}
		if c["pass_rate"] != roi.PassRateText {
			t.Errorf("%s: pass rate %q, the result's text is %q", roi.Name, c["pass_rate"], roi.PassRateText)
		}
		near(t, roi.Name+" volume", c["volume_cc"], &roi.VolumeCC)
		near(t, roi.Name+" mean Γ", c["gamma_mean"], roi.GammaMean)
		near(t, roi.Name+" P95 Γ", c["gamma_p95"], roi.GammaP95)
		near(t, roi.Name+" max Γ", c["gamma_max"], roi.GammaMax)
		var dm, d95, d2 *float64
		if roi.DVH != nil {
			dm, d95, d2 = roi.DVH.DifferencePercent.MeanGy, roi.DVH.DifferencePercent.D95Gy, roi.DVH.DifferencePercent.D2Gy
		}
		near(t, roi.Name+" ΔDmean", c["d_mean"], dm)
		near(t, roi.Name+" ΔD95", c["d95"], d95)
		near(t, roi.Name+" ΔD2", c["d2"], d2)
		if !strings.HasPrefix(c["status"], string(roi.Status)) {
			t.Errorf("%s: status %q, want %q", roi.Name, c["status"], roi.Status)
		}
		// Rules: one mark per rule applied to the ROI, in words and symbol.
		var marks []string
		for _, li := range tr.Elements("li") {
			marks = append(marks, strings.TrimSpace(li.TextContent()))
		}
		var want []string
		for _, rule := range r.Rules {
			if rule.Subject == roi.Name {
				want = append(want, metMark(rule)+": "+rule.Rule+" ("+rule.Level+")")
			}
		}
		if strings.Join(marks, "|") != strings.Join(want, "|") {
			t.Errorf("%s: rules %q, want %q", roi.Name, marks, want)
		}
	}
}

func TestHeaderAndRules(t *testing.T) {
	page := synthCase(t, smallCase)
	r := page.Result
	html, doc := render(t, page)
	text := string(html)
	title := strings.TrimSpace(doc.Elements("title")[0].TextContent())
	if !strings.Contains(title, "PHANTOM-001") || !strings.Contains(title, r.Criteria.Label) {
		t.Errorf("title %q lacks the patient ID or the criteria", title)
	}
	ident := doc.ByID("identification").TextContent()
	for _, want := range []string{"PHANTOM-001", "PHANTOM, HEAD", "2.25.81985529216486895", r.Criteria.Label,
		"synthetic test protocol", r.Version, page.Generated} {
		if !strings.Contains(ident, want) {
			t.Errorf("header lacks %q", want)
		}
	}
	inputs := doc.ByID("inputs").TextContent()
	for _, in := range r.Inputs {
		if !strings.Contains(inputs, in.SHA256) || !strings.Contains(inputs, in.Path) {
			t.Errorf("input %s: path or SHA-256 missing", in.Role)
		}
	}
	caution := doc.ByID("caution")
	if caution == nil || !strings.Contains(caution.TextContent(), r.Caution) {
		t.Fatal("the caution is not shown")
	}
	// Near the top: before the rules and every table of numbers.
	if strings.Index(text, r.Caution) > strings.Index(text, `id="rule-table"`) {
		t.Error("the caution comes after the rules")
	}
	for _, w := range append(r.Warnings, r.Notes...) {
		if !strings.Contains(text, w) {
			t.Errorf("warning or note %q not shown", w)
		}
	}
	verdict := doc.ByID("verdict").TextContent()
	if !strings.Contains(verdict, "✘ FAIL") || r.Verdict != "fail" {
		t.Errorf("verdict %q for a result that says %q", verdict, r.Verdict)
	}
	// Rules: not met first, each group in the result's order.
	var outcomes []string
	for _, tr := range doc.ByID("rule-table").Elements("tr")[1:] {
		td := tr.Elements("td")
		outcomes = append(outcomes, strings.TrimSpace(td[0].TextContent())+" "+strings.TrimSpace(td[1].TextContent())+" "+strings.TrimSpace(td[3].TextContent()))
	}
	var want []string
	for _, first := range []bool{true, false} {
		for _, rule := range r.Rules {
			if (rule.Outcome == result.NotMet) == first {
				want = append(want, metMark(rule)+" "+rule.Rule+" "+rule.Subject)
			}
		}
	}
	if strings.Join(outcomes, "\n") != strings.Join(want, "\n") {
		t.Errorf("rule rows:\n%s\nwant:\n%s", strings.Join(outcomes, "\n"), strings.Join(want, "\n"))
	}
	// Cluster table: one row per cluster, the result's numbers.
	trs := doc.ByID("cluster-table").Elements("tr")[1:]
	if len(trs) != len(r.Clusters) {
		t.Fatalf("%d cluster rows, want %d", len(trs), len(r.Clusters))
	}
	for i, c := range r.Clusters {
		td := trs[i].Elements("td")
		near(t, "cluster volume", strings.TrimSpace(td[1].TextContent()), &c.VolumeCC)
		near(t, "cluster max Γ", strings.TrimSpace(td[4].TextContent()), &c.GammaMax)
		if got := strings.TrimSpace(td[5].TextContent()); got != strings.Join(c.ROIs, ", ") {
			t.Errorf("cluster %d ROIs %q", i, got)
		}
	}
	// Self-contained: nothing to fetch.
	if m := regexp.MustCompile(`(?i)(src|href)\s*=\s*"(https?:|//)`).FindString(text); m != "" {
		t.Errorf("the page refers to the network: %s", m)
	}
	if !strings.Contains(text, "Content-Security-Policy") {
		t.Error("no content security policy")
	}
}

func TestDeidentifiedHeader(t *testing.T) {
	page := synthCase(t, smallCase)
	page.Generated = ""
	for i := range page.Result.Inputs {
		page.Result.Inputs[i].PatientID, page.Result.Inputs[i].PatientName = "", ""
	}
	html, doc := render(t, page)
	if strings.Contains(string(html), "PHANTOM-001") || strings.Contains(string(html), "PHANTOM^HEAD") || strings.Contains(string(html), "PHANTOM, HEAD") {
		t.Error("de-identified page shows the patient")
	}
	if strings.Contains(doc.ByID("identification").TextContent(), "Date") {
		t.Error("de-identified page shows a date row")
	}
}

func TestVerdictPass(t *testing.T) {
	page := synthCase(t, synthOptions{Dims: smallCase.Dims, Spacing: smallCase.Spacing, Fail: false})
	r := page.Result
	// Without failing points every rule but the 99.5 % action level holds;
	// make the result's verdict what its rules say.
	for i := range r.Rules {
		r.Rules[i].Met = true
	}
	r.Verdict = "pass"
	_, doc := render(t, page)
	if v := doc.ByID("verdict").TextContent(); !strings.Contains(v, "✔ PASS") {
		t.Errorf("verdict %q", v)
	}
	if doc.ByID("cluster-table") != nil {
		t.Error("cluster table without clusters")
	}
	if !strings.Contains(doc.ByID("slices").TextContent(), "reference dose maximum") {
		t.Error("without failing regions the slices should go through the reference maximum")
	}
}

func TestRuleValueNeverCrossesLimit(t *testing.T) {
	for _, c := range []struct {
		v, limit float64
		want     string
	}{
		{94.996, 95, "94.996"},
		{95, 95, "95.00"},
		{95.004, 95, "95.004"},
		{97.62, 95, "97.62"},
		{89.99999, 90, "89.99999"},
	} {
		if got := ruleValue(c.v, c.limit); got != c.want {
			t.Errorf("ruleValue(%g, %g) = %q, want %q", c.v, c.limit, got, c.want)
		}
	}
}

func TestPageSize(t *testing.T) {
	if testing.Short() {
		t.Skip("large case")
	}
	// A clinical-sized case: 128×128×100 voxels, 30 ROIs.
	page := synthCase(t, synthOptions{Dims: [3]int{128, 128, 100}, Spacing: [3]float64{2.5, 2.5, 2.5}, Fail: true, ExtraROIs: 24})
	path := filepath.Join(t.TempDir(), "report.html")
	start := time.Now()
	if err := WriteHTML(path, page); err != nil {
		t.Fatal(err)
	}
	took := time.Since(start)
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("128×128×100, %d ROIs: %d bytes (%.2f MB) in %v", len(page.Result.ROIs), st.Size(), float64(st.Size())/1e6, took)
	if st.Size() >= 5<<20 {
		t.Errorf("page is %d bytes, want under 5 MB", st.Size())
	}
}

// TestSlicesFast renders the three slices of a 256×256×160 grid: about a
// second is the budget (generous bound here: shared test machines).
func TestSlicesFast(t *testing.T) {
	if testing.Short() {
		t.Skip("large case")
	}
	page := synthCase(t, synthOptions{Dims: [3]int{256, 256, 160}, Spacing: [3]float64{1.5, 1.5, 2}, Fail: true})
	m := &model{}
	lay := layoutROIs(page.Result, page.Reference, page.ROIs)
	start := time.Now()
	if err := fillSlices(m, page, page.Result, lay); err != nil {
		t.Fatal(err)
	}
	took := time.Since(start)
	size := 0
	for _, f := range m.Slices {
		size += len(f.SVG)
	}
	t.Logf("three slices of 256×256×160: %v, %d bytes of SVG", took, size)
	if took > 5*time.Second {
		t.Errorf("slices took %v, want about a second", took)
	}
}

func TestSubGridNote(t *testing.T) {
	page := synthCase(t, smallCase)
	roi := &page.Result.ROIs[0]
	sub := 0.5
	roi.SubGridMM = &sub
	roi.Evaluated += 1000 // a finer sub-grid has more points than voxels
	_, doc := render(t, page)
	panel := doc.ByID("panel-roi-0")
	if panel == nil {
		t.Fatal("no panel for the first ROI")
	}
	text := panel.TextContent()
	want := "cover " + strconv.Itoa(roi.Evaluated) + " points"
	if !strings.Contains(text, want) || !strings.Contains(text, "0.5 mm sub-grid") {
		t.Errorf("the histogram of a sub-grid ROI does not say its counts differ: %q", text)
	}
	status := cells(doc.ByID("roi-table").All(func(n *browsercheck.Node) bool { return n.Attr["data-roi"] == "roi-0" })[0])["status"]
	if !strings.Contains(status, "0.5 mm sub-grid") {
		t.Errorf("status %q does not name the sub-grid", status)
	}
}

func TestSingleFrameGrid(t *testing.T) {
	// A single plane of dose (one frame): the coronal and sagittal slices
	// are one row high and still drawn.
	page := synthCase(t, synthOptions{Dims: [3]int{40, 36, 1}, Spacing: [3]float64{3, 3, 3}, Fail: true})
	html, doc := render(t, page)
	if n := len(doc.ByID("slices").Elements("svg")); n != 3 {
		t.Errorf("%d slice figures, want 3", n)
	}
	if len(html) == 0 {
		t.Error("empty page")
	}
}
