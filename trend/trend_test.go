package trend

import (
	"bytes"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"voxgamma/internal/browsercheck"
	"voxgamma/protocol"
	"voxgamma/record"
	"voxgamma/spc"
)

// nistFlow are the flow rates of the NIST/SEMATECH e-Handbook of
// Statistical Methods, section 6.3.2.2 "Individuals Control Charts"
// (Xbar = 50.81, MRbar = 1.8778, UCL = 55.8041, LCL = 45.8159 there).
var nistFlow = []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}

func ptr(v float64) *float64 { return &v }

// plan is an invented recorded comparison with overall pass rate rate.
func plan(i int, rate float64, l record.Labels) record.Point {
	p := record.Point{ID: int64(i + 1), ComparedAt: time.Date(2025, 2, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(i) * 24 * time.Hour),
		CaseID: "case-" + string(rune('A'+i%26)), PatientID: "VG-DEMO-001", Verdict: "pass", ReferenceSHA256: strings.Repeat("ab", 32),
		Labels: l, ProtocolName: "tg218", CriteriaLabel: "3%/2mm global", DosePercent: 3, DTAmm: 2, Normalisation: "global",
		NormDoseGy: 60, NormDoseSource: "reference maximum", ThresholdPercent: 10, SearchMM: 6,
		PassRate: ptr(rate), GammaMean: ptr(0.2 + (100-rate)/100)}
	p.SetWorst("target", math.Min(100, rate+1))
	p.SetWorst("oar", 99)
	return p
}

// TestAnalyzeNIST: the overall pass rates of a group are the NIST flow
// rates: the group's chart has the handbook's limits, the fewer-than-20
// warning, and the group and metric plumbing (labels, criteria, kinds) is
// right.
func TestAnalyzeNIST(t *testing.T) {
	var pts []record.Point
	for i, v := range nistFlow {
		pts = append(pts, plan(i, v, record.Labels{Technique: "VMAT", Machine: "LA1"}))
	}
	// Another group: other technique; and other criteria in VMAT.
	for i := range 5 {
		pts = append(pts, plan(20+i, 97+float64(i)/10, record.Labels{Technique: "IMRT"}))
	}
	other := plan(40, 99, record.Labels{Technique: "VMAT", Machine: "LA1"})
	other.CriteriaLabel = "2%/1mm global"
	pts = append(pts, other)

	a, err := Analyze(pts, Options{By: []string{"technique"}, Metrics: []string{"overall_pass_rate", "target_pass_rate", "gamma_mean"}})
	if err != nil {
		t.Fatal(err)
	}
	if len(a.Groups) != 3 {
		t.Fatalf("%d groups, want 3 (IMRT, VMAT 3%%/2mm, VMAT 2%%/1mm)", len(a.Groups))
	}
	var s *Series
	for _, x := range a.Series {
		if x.Group.Labels.Technique == "VMAT" && strings.HasPrefix(x.Group.Criteria, "3%/2mm") && x.Metric.Name == "overall_pass_rate" {
			s = x
		}
	}
	if s == nil {
		t.Fatal("no VMAT 3%/2mm overall series")
	}
	c := s.Chart
	if math.Abs(c.Mean-50.81) > 0.005 || math.Abs(c.UCL-55.8041) > 0.00005 || math.Abs(c.LCL-45.8159) > 0.00005 {
		t.Errorf("chart x̄ %.4f UCL %.4f LCL %.4f, NIST/SEMATECH 6.3.2.2 gives 50.81, 55.8041, 45.8159", c.Mean, c.UCL, c.LCL)
	}
	if tol := *s.Tolerance(); tol != c.LCL {
		t.Errorf("tolerance %g, want the LCL %g (pass rates: lower is worse)", tol, c.LCL)
	}
	// 100 − ΔA/2 with ΔA = 6√(s² + (x̄ − 100)²) is negative for values
	// near 50: a pass rate's limit is 0 at least.
	if want := math.Max(0, 100-3*math.Sqrt(c.SD*c.SD+(c.Mean-100)*(c.Mean-100))); s.Action == nil || math.Abs(*s.Action-want) > 1e-9 {
		t.Errorf("action %v, want max(0, 100 − ΔA/2) = %g", s.Action, want)
	}
	if len(s.Warnings) == 0 || !strings.Contains(s.Warnings[0], "fewer than 20") {
		t.Errorf("warnings %q: want the fewer-than-20-plans warning", s.Warnings)
	}
	lim := a.Limits()
	if len(lim.Rows) != len(a.Series) || lim.Plans != len(pts) {
		t.Errorf("%d limit rows for %d series, %d plans", len(lim.Rows), len(a.Series), lim.Plans)
	}
	for _, r := range lim.Rows {
		if r.Metric == "gamma_mean" && r.Plans > 1 && (r.Worse != "higher" || r.Action != nil || r.Tolerance == nil || *r.Tolerance != *r.UCL) {
			t.Errorf("Γ row %+v: want the UCL as tolerance and no action limit", r)
		}
		if r.Group["technique"] == "" || len(r.Group) != 1 {
			t.Errorf("group %v: want the technique only", r.Group)
		}
	}
	var buf bytes.Buffer
	lim.Table(&buf)
	if !strings.Contains(buf.String(), "technique=VMAT · 3%/2mm global, threshold 10 %") || !strings.Contains(buf.String(), "warning:") {
		t.Errorf("table:\n%s", buf.String())
	}
	// The 2%/1mm group has one plan: no chart, said so.
	for _, x := range a.Series {
		if strings.HasPrefix(x.Group.Criteria, "2%/1mm") && !errors.Is(x.ChartErr, spc.ErrTooFew) {
			t.Errorf("one-plan series: %v", x.ChartErr)
		}
	}
	if _, err := Analyze(pts, Options{By: []string{"colour"}}); err == nil {
		t.Error("an unknown label was accepted")
	}
	if _, err := Analyze(pts, Options{Metrics: []string{"d95"}}); err == nil {
		t.Error("an unknown metric was accepted")
	}
}

// TestProtocolFile writes a group's limits as a protocol, reads it back
// with the protocol package, and checks its rules: tolerance at the
// control limit and action at TG-218's limit, rounded toward the stricter
// side, the base protocol's ROI classes kept.
func TestProtocolFile(t *testing.T) {
	var pts []record.Point
	for i := range 30 {
		pts = append(pts, plan(i, 97+2*math.Sin(float64(i)), record.Labels{Technique: "VMAT"}))
	}
	a, err := Analyze(pts, Options{By: []string{"technique"}})
	if err != nil {
		t.Fatal(err)
	}
	base, _ := protocol.Preset("tg218")
	p, err := a.Protocol(a.Groups[0], base, "vmat-process")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "limits.yaml")
	if err := WriteProtocol(path, p); err != nil {
		t.Fatal(err)
	}
	back, err := protocol.Load(path)
	if err != nil {
		t.Fatalf("the written protocol does not load: %v", err)
	}
	if back.Name != "vmat-process" || back.Criteria.Criteria != "3%/2mm" || back.Criteria.ThresholdPercent != 10 || len(back.KindRules) != 3 {
		t.Errorf("protocol %+v", back)
	}
	want := map[string]float64{}
	for _, s := range a.Series {
		switch s.Metric.Name {
		case "overall_pass_rate", "target_pass_rate", "oar_pass_rate":
			want["tolerance "+s.Metric.Subject] = math.Ceil(*s.Tolerance()*100) / 100
			want["action "+s.Metric.Subject] = math.Ceil(*s.Action*100) / 100
		case "gamma_mean":
			want["tolerance overall gamma_mean"] = math.Floor(*s.Tolerance()*1000) / 1000
		}
	}
	got := map[string]float64{}
	for _, r := range back.Rules {
		k := r.Level + " " + r.Subject
		if r.Metric == "gamma_mean" {
			k += " gamma_mean"
			if r.Op != "<=" {
				t.Errorf("Γ rule op %q", r.Op)
			}
		} else if r.Op != ">=" {
			t.Errorf("pass-rate rule op %q", r.Op)
		}
		got[k] = r.Limit
	}
	if len(got) != len(want) {
		t.Errorf("rules %v, want %v", got, want)
	}
	for k, v := range want {
		if math.Abs(got[k]-v) > 1e-9 {
			t.Errorf("%s: limit %g, want %g", k, got[k], v)
		}
	}
}

// TestPageInBrowser opens the control-chart page in headless Chromium: one
// chart per group and metric with limits, each laid out with a size, no
// request leaving the page, a silent console; the plan made an outlier is
// in the flagged table by rule 1.
func TestPageInBrowser(t *testing.T) {
	chromium, err := browsercheck.FindChromium()
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("CI: %v", err)
		}
		t.Skipf("%v: apt-get install chromium", err)
	}
	var pts []record.Point
	for i := range 40 {
		v := 98 + 0.6*math.Sin(1.7*float64(i))
		if i == 31 {
			v = 88 // far below 3σ̂
		}
		pts = append(pts, plan(i, v, record.Labels{Technique: "VMAT", Machine: "LA" + string(rune('1'+i%2))}))
	}
	a, err := Analyze(pts, Options{By: []string{"technique"}})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "trend.html")
	if err := a.WritePage(path, PageOptions{Store: "qa.db", Selection: "all plans", Version: "test"}); err != nil {
		t.Fatal(err)
	}
	shot := filepath.Join(t.TempDir(), "trend.png")
	if dir := os.Getenv("VOXGAMMA_ARTIFACTS"); dir != "" {
		shot = filepath.Join(dir, "trend-browser-test.png")
	}
	rep, err := browsercheck.CheckWith(path, shot, browsercheck.Options{Chromium: chromium})
	if err != nil {
		t.Fatalf("the page fails the browser check: %v", err)
	}
	charts := 0
	for _, s := range a.Series {
		if s.ChartErr == nil {
			charts++
		}
	}
	if len(rep.Figures) != charts || charts != 4 {
		t.Errorf("%d figures, %d series with charts (want 4: overall, target, organ at risk, Γ; no body or other ROI)", len(rep.Figures), charts)
	}
	for _, f := range rep.Figures {
		if f.RenderedWidth < 200 || f.RenderedHeight < 80 {
			t.Errorf("figure %q laid out at %g×%g", f.Label, f.RenderedWidth, f.RenderedHeight)
		}
	}
	raw, _ := os.ReadFile(path)
	doc, err := browsercheck.Parse(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, tr := range doc.All(func(n *browsercheck.Node) bool { return n.HasClass("flag-row") }) {
		cells := tr.Elements("td")
		if len(cells) > 5 && strings.TrimSpace(cells[0].TextContent()) == "32" && strings.HasPrefix(cells[5].TextContent(), "1") {
			found = true
		}
	}
	if !found {
		t.Error("plan 32 (the outlier) is not in a flagged table with rule 1")
	}
	if rows := doc.All(func(n *browsercheck.Node) bool { return n.HasClass("limit-row") }); len(rows) != len(a.Series) {
		t.Errorf("%d limit rows, want %d", len(rows), len(a.Series))
	}
}
