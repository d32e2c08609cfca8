package protocol

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"voxgamma/gamma"
	"voxgamma/result"
	"voxgamma/roi"
	"voxgamma/structure"
)

func fp(v float64) *float64 { return &v }

// TestExampleYAMLAndJSONAreEqual reads the YAML and the JSON form of the
// same protocol and compares the structs, and checks the values read.
func TestExampleYAMLAndJSONAreEqual(t *testing.T) {
	y, err := Load(filepath.Join("testdata", "example.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	j, err := Load(filepath.Join("testdata", "example.json"))
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(y, j) {
		t.Fatalf("YAML and JSON forms differ:\nYAML %+v\nJSON %+v", y, j)
	}
	want := Criteria{Criteria: "3%/2mm", Normalisation: "global", ThresholdPercent: 10, SearchMM: 6, NormDoseFrom: NormDoseReferenceMax}
	if y.Criteria != want {
		t.Errorf("criteria %+v, want %+v", y.Criteria, want)
	}
	if y.Name != "example-vmat" || !strings.HasPrefix(y.Source, "Criteria and overall limits from AAPM TG-218") {
		t.Errorf("name %q source %q", y.Name, y.Source)
	}
	if !reflect.DeepEqual(y.Isodose, []float64{50, 80}) {
		t.Errorf("isodose %v", y.Isodose)
	}
	wantKinds := []KindRule{{Pattern: "PTV*", Kind: "target"}, {Pattern: "z_*", Kind: "other", Override: true}}
	if !reflect.DeepEqual(y.KindRules, wantKinds) {
		t.Errorf("kind rules %+v", y.KindRules)
	}
	wantRules := []Rule{
		{Level: "tolerance", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95, WhenMissing: "fail"},
		{Level: "action", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 90, WhenMissing: "fail"},
		{Level: "tolerance", Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95, WhenMissing: "fail"},
		{Level: "tolerance", Subject: "targets", Metric: "dvh_diff_percent:d95", Op: "abs<=", Limit: 3, WhenMissing: "fail"},
		{Level: "tolerance", Subject: "oars", Metric: "gamma_p95", Op: "<=", Limit: 1, WhenMissing: "fail"},
		{Level: "action", Subject: "roi:SpinalCord", Metric: "dvh_diff_gy:d0_03cc", Op: "<=", Limit: 0.5, WhenMissing: "fail"},
		{Level: "tolerance", Subject: "isodose:50", Metric: "gamma_mean", Op: "<=", Limit: 0.5, WhenMissing: "fail"},
	}
	if y.Coverage != DefaultCoverage() {
		t.Errorf("coverage %+v, want the defaults %+v (the file leaves them out)", y.Coverage, DefaultCoverage())
	}
	if !reflect.DeepEqual(y.Rules, wantRules) {
		t.Errorf("rules\n got %+v\nwant %+v", y.Rules, wantRules)
	}
}

// TestDocExampleIsTestdata checks that the example file in the package
// documentation is testdata/example.yaml, byte for byte.
func TestDocExampleIsTestdata(t *testing.T) {
	doc, err := os.ReadFile("doc.go")
	if err != nil {
		t.Fatal(err)
	}
	file, err := os.ReadFile(filepath.Join("testdata", "example.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	var block []string
	in := false
	for _, l := range strings.Split(string(doc), "\n") {
		switch {
		case strings.HasPrefix(l, "// # Example file"):
			in = true
		case in && strings.HasPrefix(l, "//\t"):
			block = append(block, strings.TrimPrefix(l, "//\t"))
		case in && len(block) > 0:
			in = false
		}
	}
	if got := strings.Join(block, "\n") + "\n"; got != string(file) {
		t.Errorf("doc.go example differs from testdata/example.yaml:\n%s", got)
	}
}

// valid is a correct protocol that the error cases below spoil one line at
// a time (line numbers in comments).
const valid = `name: t
criteria:
  criteria: 3%/2mm
  normalisation: global
  threshold_percent: 10
isodose_rois: [50]
roi_kinds:
  - pattern: PTV
    kind: target
rules:
  - subject: overall
    metric: pass_rate
    op: ">="
    limit: 95
  - subject: targets
    metric: pass_rate
    op: ">="
    limit: 95
`

func TestParseValidBase(t *testing.T) {
	p, err := Parse([]byte(valid), "t.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Rules) != 2 || p.Rules[1].Subject != "targets" {
		t.Fatalf("%+v", p.Rules)
	}
}

func TestParseErrors(t *testing.T) {
	cases := []struct {
		name     string
		old, new string // replaced in valid; old "" means the whole text is new
		want     []string
		line     int
		field    string
	}{
		{"criteria 3/2", "criteria: 3%/2mm", "criteria: 3/2",
			[]string{"bad.yaml:3: criteria.criteria: ", `criteria "3/2"`}, 3, "criteria.criteria"},
		{"unknown field in rule", "    limit: 95\n  - subject: targets", "    lmit: 95\n  - subject: targets",
			[]string{"bad.yaml:14: rules[0].lmit: ", `unknown field "lmit"`, "level, subject, metric, op, limit"}, 14, "rules[0].lmit"},
		{"unknown top-level field", "name: t\n", "name: t\nthreshold: 10\n",
			[]string{"bad.yaml:2: threshold: ", `unknown field "threshold"`}, 2, "threshold"},
		{"bad op", `    op: ">="
    limit: 95
  - subject: targets`, `    op: "=>"
    limit: 95
  - subject: targets`,
			[]string{"bad.yaml:13: rules[0].op: ", `op "=>"`, "want >=, <= or abs<="}, 13, "rules[0].op"},
		{"bad subject", "subject: targets", "subject: target",
			[]string{"bad.yaml:15: rules[1].subject: ", `subject "target"`}, 15, "rules[1].subject"},
		{"threshold 100", "threshold_percent: 10", "threshold_percent: 100",
			[]string{"bad.yaml:5: criteria.threshold_percent: 100 %"}, 5, "criteria.threshold_percent"},
		{"NaN limit", "    limit: 95\n", "    limit: .nan\n",
			[]string{"bad.yaml:14: rules[0].limit: NaN: want a finite number"}, 14, "rules[0].limit"},
		{"infinite limit", "    limit: 95\n", "    limit: -.inf\n",
			[]string{"bad.yaml:14: rules[0].limit: -Inf"}, 14, "rules[0].limit"},
		{"bad normalisation", "normalisation: global", "normalisation: relative",
			[]string{"bad.yaml:4: criteria.normalisation: ", `"relative"`}, 4, "criteria.normalisation"},
		{"bad kind", "kind: target", "kind: tumour",
			[]string{"bad.yaml:9: roi_kinds[0].kind: ", `"tumour"`}, 9, "roi_kinds[0].kind"},
		{"isodose not listed", "subject: targets", "subject: isodose:80",
			[]string{"bad.yaml:15: rules[1].subject: ", "not in isodose_rois"}, 15, "rules[1].subject"},
		{"DVH metric overall", "    metric: pass_rate\n    op: \">=\"\n    limit: 95\n  - subject: targets", "    metric: dvh_diff_gy:d95\n    op: \">=\"\n    limit: 95\n  - subject: targets",
			[]string{"bad.yaml:12: rules[0].metric: ", "overall has no DVH"}, 12, "rules[0].metric"},
		{"unknown DVH metric", "subject: targets\n    metric: pass_rate", "subject: targets\n    metric: dvh_diff_percent:d97",
			[]string{"bad.yaml:16: rules[1].metric: ", "d97"}, 16, "rules[1].metric"},
		{"abs<= on pass rate", "subject: targets\n    metric: pass_rate\n    op: \">=\"", "subject: targets\n    metric: pass_rate\n    op: abs<=",
			[]string{"bad.yaml:17: rules[1].op: ", "use <="}, 17, "rules[1].op"},
		{"pass rate limit 950", "    limit: 95\n", "    limit: 950\n",
			[]string{"bad.yaml:14: rules[0].limit: 950"}, 14, "rules[0].limit"},
		{"limit as text", "    limit: 95\n", "    limit: high\n",
			[]string{"bad.yaml:14: rules[0].limit: ", "high"}, 14, "rules[0].limit"},
		{"isodose 0", "isodose_rois: [50]", "isodose_rois: [0]",
			[]string{"bad.yaml:6: isodose_rois[0]: 0 %"}, 6, "isodose_rois[0]"},
		{"no name", "name: t\n", "description: no name\n",
			[]string{"bad.yaml:1: name: empty"}, 1, "name"},
		{"no rules", "", "name: t\ncriteria:\n  criteria: 3%/2mm\nrules: []\n",
			[]string{"bad.yaml:4: rules: no rule"}, 4, "rules"},
		{"no criteria", "", "name: t\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n",
			[]string{"bad.yaml:1: criteria.criteria: missing"}, 1, "criteria.criteria"},
		{"unquoted op", `op: ">="`, `op: >=`,
			[]string{"bad.yaml: yaml: ", `write the operator in quotes: op: ">="`}, 0, ""},
		{"two documents", "", valid + "---\n" + valid,
			[]string{"bad.yaml:19: more than one YAML document"}, 19, ""},
		{"empty file", "", "# nothing\n",
			[]string{"bad.yaml: empty file"}, 0, ""},
		{"not a mapping", "", "- 1\n- 2\n",
			[]string{"bad.yaml:1: a list, not a mapping of protocol fields"}, 1, ""},
		{"JSON unknown field", "", `{"name": "t",
 "criteria": {"criteria": "3%/2mm"},
 "rules": [
  {"subject": "overall", "metric": "pass_rate", "op": ">=", "limit": 95},
  {"subject": "overall", "metric": "pass_rate", "op": ">=", "limt": 90}
 ]}`,
			[]string{"bad.yaml:5: rules[1].limt: ", `unknown field "limt"`}, 5, "rules[1].limt"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			text := c.new
			if c.old != "" {
				if !strings.Contains(valid, c.old) {
					t.Fatalf("test broken: %q not in the valid text", c.old)
				}
				text = strings.Replace(valid, c.old, c.new, 1)
			}
			p, err := Parse([]byte(text), "bad.yaml")
			if err == nil {
				t.Fatalf("no error; got %+v", p)
			}
			if p != nil {
				t.Errorf("a protocol came back with the error")
			}
			msg := err.Error()
			for _, w := range c.want {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q\n does not contain %q", msg, w)
				}
			}
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("error %T is not a *Error", err)
			}
			if e.File != "bad.yaml" || e.Line != c.line || e.Field != c.field {
				t.Errorf("error at %s:%d field %q, want line %d field %q", e.File, e.Line, e.Field, c.line, c.field)
			}
		})
	}
}

// TestParseReportsEveryProblem: two problems in two rules, both reported.
func TestParseReportsEveryProblem(t *testing.T) {
	text := strings.Replace(valid, `op: ">="`, `op: "=="`, 1)
	text = strings.Replace(text, "subject: targets", "subject: everything", 1)
	_, err := Parse([]byte(text), "two.yaml")
	if err == nil {
		t.Fatal("no error")
	}
	for _, w := range []string{"two.yaml:13: rules[0].op: ", "two.yaml:15: rules[1].subject: "} {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("%q does not contain %q", err, w)
		}
	}
}

func TestParseNormalises(t *testing.T) {
	text := `name: n
criteria: {criteria: " 2 % / 1 mm ", normalisation: LOCAL}
roi_kinds: [{pattern: " cord ", kind: OAR}]
rules:
  - {level: " action ", subject: "ROI: PTV 60", metric: Pass_Rate, op: " >= ", limit: 95}
  - {subject: Targets, metric: "DVH_Diff_Gy:D0_03cc", op: "ABS <=", limit: 1}
`
	p, err := Parse([]byte(text), "n.yaml")
	if err != nil {
		t.Fatal(err)
	}
	want := []Rule{
		{Level: "action", Subject: "roi:PTV 60", Metric: "pass_rate", Op: ">=", Limit: 95, WhenMissing: "fail"},
		{Level: "tolerance", Subject: "targets", Metric: "dvh_diff_gy:d0_03cc", Op: "abs<=", Limit: 1, WhenMissing: "fail"},
	}
	if !reflect.DeepEqual(p.Rules, want) {
		t.Errorf("rules %+v, want %+v", p.Rules, want)
	}
	if p.Criteria.Normalisation != "local" || p.Criteria.Criteria != "2 % / 1 mm" {
		t.Errorf("criteria %+v", p.Criteria)
	}
	if p.KindRules[0] != (KindRule{Pattern: "cord", Kind: "oar"}) {
		t.Errorf("kind rule %+v", p.KindRules[0])
	}
	g, err := p.GammaCriteria()
	if err != nil {
		t.Fatal(err)
	}
	// threshold_percent is left out: the documented default, 10 %, never
	// Go's zero value.
	if g != (gamma.Criteria{DosePercent: 2, DTA: 1, Normalisation: gamma.Local, ThresholdPercent: DefaultThresholdPercent}) {
		t.Errorf("gamma criteria %+v", g)
	}
}

func TestLoadErrors(t *testing.T) {
	missing := filepath.Join(t.TempDir(), "missing.yaml")
	if _, err := Load(missing); err == nil || !strings.Contains(err.Error(), missing) {
		t.Errorf("missing file: %v", err)
	}
	bad := filepath.Join(t.TempDir(), "clinic.yaml")
	if err := os.WriteFile(bad, []byte(strings.Replace(valid, "limit: 95", "limit: 95\n    extra: 1", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := Load(bad)
	if err == nil || !strings.Contains(err.Error(), bad+":15: rules[0].extra: ") {
		t.Errorf("unknown field: %v", err)
	}
	big := filepath.Join(t.TempDir(), "big.yaml")
	if err := os.WriteFile(big, []byte(valid+"#"+strings.Repeat("x", MaxFileSize)+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Load(big); err == nil || !strings.Contains(err.Error(), "larger than") {
		t.Errorf("large file: %v", err)
	}
}

func TestValidateBuiltInCode(t *testing.T) {
	p := &Protocol{Name: "code", Criteria: Criteria{Criteria: "3%/2mm"},
		Rules: []Rule{{Subject: "overall", Metric: "pass_rate", Op: ">", Limit: 95}}}
	err := p.Validate()
	if err == nil || err.Error() != `protocol "code": rules[0].op: op ">": want >=, <= or abs<=` {
		t.Errorf("got %v", err)
	}
	p.Rules[0].Op = ">="
	if err := p.Validate(); err != nil {
		t.Errorf("valid protocol: %v", err)
	}
}

func TestPresets(t *testing.T) {
	if got, want := PresetNames(), []string{"epid-invivo-example", "stereotactic", "tg218"}; !reflect.DeepEqual(got, want) {
		t.Fatalf("preset names %v, want %v", got, want)
	}
	for _, name := range PresetNames() {
		p, ok := Preset(name)
		if !ok || p.Name != name {
			t.Fatalf("preset %q: %v %+v", name, ok, p)
		}
		if err := p.Validate(); err != nil {
			t.Errorf("preset %q: %v", name, err)
		}
		if p.Source == "" || p.Description == "" {
			t.Errorf("preset %q has no source or description", name)
		}
		if _, err := p.GammaCriteria(); err != nil {
			t.Errorf("preset %q: %v", name, err)
		}
		// Written out as YAML and as JSON, each reads back unchanged: the
		// YAML and JSON field names agree.
		y, err := yaml.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		back, err := Parse(y, name+".yaml")
		if err != nil || !reflect.DeepEqual(back, p) {
			t.Errorf("preset %q from YAML: %v\n%+v\n%+v", name, err, back, p)
		}
		j, err := json.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		back, err = Parse(j, name+".json")
		if err != nil || !reflect.DeepEqual(back, p) {
			t.Errorf("preset %q from JSON: %v", name, err)
		}
	}
	if _, ok := Preset("tg-999"); ok {
		t.Error("unknown preset found")
	}
	// Each call returns a copy.
	a, _ := Preset("TG218")
	a.Rules[0].Limit = 1
	a.KindRules[0].Kind = "oar"
	b, _ := Preset("tg218")
	if b.Rules[0].Limit != 95 || b.KindRules[0].Kind != "target" {
		t.Error("changing a preset changed the built-in one")
	}
}

func TestPresetTG218(t *testing.T) {
	p, _ := Preset("tg218")
	g, err := p.GammaCriteria()
	if err != nil {
		t.Fatal(err)
	}
	// AAPM TG-218, Miften et al., Med Phys 45 (2018) e53: 3 %/2 mm, global
	// normalisation, 10 % low-dose threshold (gamma.TG218 states the same).
	want := gamma.Criteria{DosePercent: 3, DTA: 2, Normalisation: gamma.Global, ThresholdPercent: 10}
	if g != want || g != gamma.TG218() {
		t.Errorf("criteria %+v, want %+v", g, want)
	}
	// TG-218's universal tolerance limit ≥ 95 % and action limit ≥ 90 %
	// passing; the per-target rule is this tool's choice.
	wantRules := []Rule{
		{Level: "tolerance", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95, WhenMissing: MissingFail},
		{Level: "action", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 90, WhenMissing: MissingFail},
		{Level: "tolerance", Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95, WhenMissing: MissingFail},
	}
	if !reflect.DeepEqual(p.Rules, wantRules) {
		t.Errorf("rules %+v", p.Rules)
	}
	// Coverage: this tool's choice, in every preset.
	if p.Coverage != DefaultCoverage() {
		t.Errorf("coverage %+v", p.Coverage)
	}
	for _, w := range []string{"Miften et al., Med Phys 45 (2018) e53", "this tool's choice, not a TG-218 recommendation"} {
		if !strings.Contains(p.Source, w) {
			t.Errorf("source %q lacks %q", p.Source, w)
		}
	}
}

func TestPresetStereotacticAndEPID(t *testing.T) {
	s, _ := Preset("stereotactic")
	g, _ := s.GammaCriteria()
	if g.DosePercent != 2 || g.DTA != 1 || g.Normalisation != gamma.Global || g.ThresholdPercent != 10 {
		t.Errorf("stereotactic criteria %+v", g)
	}
	var words []string
	for _, r := range s.Rules {
		words = append(words, r.Level+": "+r.String())
	}
	want := []string{
		"tolerance: overall: pass rate ≥ 95 %",
		"tolerance: each target: pass rate ≥ 95 %",
		"tolerance: |ΔD95| of each target ≤ 3 %",
		"tolerance: each organ at risk: pass rate ≥ 90 %",
	}
	if !reflect.DeepEqual(words, want) {
		t.Errorf("stereotactic rules %q", words)
	}
	if !strings.Contains(s.Source, "no single published source") {
		t.Errorf("stereotactic source %q", s.Source)
	}
	e, _ := Preset("epid-invivo-example")
	g, _ = e.GammaCriteria()
	if g.DosePercent != 3 || g.DTA != 3 || g.ThresholdPercent != 10 || !reflect.DeepEqual(e.Isodose, []float64{50}) {
		t.Errorf("EPID example criteria %+v isodose %v", g, e.Isodose)
	}
	if len(e.Rules) != 2 || e.Rules[0].String() != "the 50 % isodose: mean Γ ≤ 0.5" ||
		e.Rules[1].String() != "the 50 % isodose: Γ 99th percentile ≤ 2" {
		t.Errorf("EPID example rules %+v", e.Rules)
	}
	if !strings.Contains(e.Source, "not taken from a specific paper") || !strings.Contains(e.Source, "set your own") {
		t.Errorf("EPID example source %q", e.Source)
	}
}

func TestRuleString(t *testing.T) {
	cases := []struct {
		r    Rule
		want string
	}{
		{Rule{Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95}, "each target: pass rate ≥ 95 %"},
		{Rule{Subject: "targets", Metric: "dvh_diff_percent:d95", Op: "abs<=", Limit: 3}, "|ΔD95| of each target ≤ 3 %"},
		{Rule{Subject: "overall", Metric: "gamma_mean", Op: "<=", Limit: 0.5}, "overall: mean Γ ≤ 0.5"},
		{Rule{Subject: "oars", Metric: "gamma_max", Op: "<=", Limit: 1.5}, "each organ at risk: maximum Γ ≤ 1.5"},
		{Rule{Subject: "roi:Cord", Metric: "dvh_diff_gy:d0_03cc", Op: "<=", Limit: 0.5}, `ΔD0.03cc of ROI "Cord" ≤ 0.5 Gy`},
		{Rule{Subject: "roi:PTV", Metric: "dvh_diff_gy:mean", Op: ">=", Limit: -1}, `ΔDmean of ROI "PTV" ≥ -1 Gy`},
		{Rule{Subject: "isodose:80", Metric: "gamma_median", Op: "<=", Limit: 0.4}, "the 80 % isodose: median Γ ≤ 0.4"},
		{Rule{Subject: "overall", Metric: "gamma_p95", Op: "<=", Limit: 1}, "overall: Γ 95th percentile ≤ 1"},
		{Rule{Subject: "somewhere", Metric: "pass_rate", Op: ">=", Limit: 95}, "somewhere: pass_rate >= 95 (invalid rule)"},
	}
	for _, c := range cases {
		if got := c.r.String(); got != c.want {
			t.Errorf("%+v: %q, want %q", c.r, got, c.want)
		}
	}
}

// roiOf builds a result ROI from the structure set with a pass rate (nil:
// not evaluated, with the status given).
func roiOf(name, kind string, pass *float64, status string) result.ROI {
	r := result.ROI{Name: name, Kind: kind, Source: "structure set", Status: result.ROIStatus(status)}
	r.PassRate = pass
	if pass != nil {
		r.Evaluated = 1000
		r.Passed = int(*pass * 10)
	}
	return r
}

func withD95(r result.ROI, percent float64) result.ROI {
	r.DVH = &result.DVHPair{DifferencePercent: result.DVHStats{D95Gy: fp(percent)}, DifferenceGy: result.DVHStats{D95Gy: fp(percent * 0.6)}}
	return r
}

func protocolOf(t *testing.T, rules ...Rule) *Protocol {
	t.Helper()
	p := &Protocol{Name: "test", Criteria: Criteria{Criteria: "3%/2mm", ThresholdPercent: 10}, Isodose: []float64{50}, Rules: rules}
	if err := p.Validate(); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestEvaluateOverallAtTheLimit(t *testing.T) {
	p := protocolOf(t,
		Rule{Level: "tolerance", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
		Rule{Level: "action", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 90})
	cases := []struct {
		pass    float64
		text    string
		met     [2]bool
		verdict string
	}{
		{95.0, "95.0", [2]bool{true, true}, Pass},   // equal to the limit meets it
		{94.96, "95.0", [2]bool{false, true}, Fail}, // the exact value counts, not the text
		{94.999999999, "94.9", [2]bool{false, true}, Fail},
		{90, "90.0", [2]bool{false, true}, Fail},
		{89.99, "89.9", [2]bool{false, false}, Fail},
		{100, "100.0", [2]bool{true, true}, Pass},
	}
	for _, c := range cases {
		r := &result.Result{Overall: result.GammaStats{Evaluated: 100, PassRate: fp(c.pass), PassRateText: c.text}}
		out, verdict := p.Evaluate(r)
		if len(out) != 2 || verdict != c.verdict {
			t.Fatalf("pass rate %v: %d outcomes, verdict %q", c.pass, len(out), verdict)
		}
		for i, o := range out {
			if o.Met != c.met[i] || o.Subject != "overall" || o.Value == nil || *o.Value != c.pass || o.Limit != p.Rules[i].Limit || o.Level != p.Rules[i].Level {
				t.Errorf("pass rate %v rule %d: %+v", c.pass, i, o)
			}
			if o.Met != (o.Reason == "") {
				t.Errorf("pass rate %v rule %d: met %v with reason %q", c.pass, i, o.Met, o.Reason)
			}
		}
	}
	// The reason of a rule not met states the exact value.
	out, _ := p.Evaluate(&result.Result{Overall: result.GammaStats{PassRate: fp(94.96)}})
	if out[0].Reason != "measured 94.96 %, not ≥ 95 %" || out[0].Rule != "overall: pass rate ≥ 95 %" {
		t.Errorf("outcome %+v", out[0])
	}
	// Nothing evaluated overall: not met.
	out, verdict := p.Evaluate(&result.Result{Overall: result.GammaStats{PassRateText: "n/a"}})
	if verdict != Fail || out[0].Met || out[0].Value != nil || !strings.HasPrefix(out[0].Reason, "not evaluated") {
		t.Errorf("nothing evaluated: %+v %s", out[0], verdict)
	}
}

func TestEvaluatePerROI(t *testing.T) {
	p := protocolOf(t,
		Rule{Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95},
		Rule{Level: "action", Subject: "oars", Metric: "pass_rate", Op: ">=", Limit: 90},
		Rule{Subject: "roi:spinalcord", Metric: "gamma_max", Op: "<=", Limit: 1.5},
		Rule{Subject: "roi:Brainstem", Metric: "pass_rate", Op: ">=", Limit: 90},
	)
	r := &result.Result{
		Overall: result.GammaStats{PassRate: fp(99)},
		ROIs: []result.ROI{
			roiOf("PTV_60", "target", fp(96.5), "evaluated"),
			roiOf("SpinalCord", "oar", fp(100), "evaluated"),
			roiOf("PTV_met", "target", nil, string(result.StatusBelowThreshold)),
			roiOf("Parotid_L", "oar", nil, string(result.StatusBelowThreshold)),
			roiOf("Lens_R", "oar", nil, string(result.StatusOutsideDoseGrid)),
			roiOf("PTV_54", "target", fp(94.5), "evaluated"),
			{Name: "all targets", Kind: "target", Source: "derived", Status: "evaluated", GammaStats: result.GammaStats{PassRate: fp(10)}},
			{Name: "isodose 50% of 60 Gy", Kind: "other", Source: "isodose", Status: "evaluated", GammaStats: result.GammaStats{PassRate: fp(10)}},
		},
	}
	r.ROIs[1].GammaMax = fp(1.2)
	out, verdict := p.Evaluate(r)
	type row struct {
		subject string
		value   *float64
		met     bool
		reason  string
	}
	want := []row{
		// each target, in ROI order; the derived "all targets" is not one
		{"PTV_60", fp(96.5), true, ""},
		{"PTV_met", nil, false, "not evaluated: all below threshold"},
		// the pass rate as shown: rounded down, two decimals
		{"PTV_54", fp(94.5), false, "measured 94.50 %, not ≥ 95 %"},
		// each organ at risk: low dose is fine (the status is a typed
		// value: the text analysis writes is the one evaluation reads),
		// outside the grid is not
		{"SpinalCord", fp(100), true, ""},
		{"Parotid_L", nil, true, "every point of this organ at risk is below the low-dose threshold"},
		{"Lens_R", nil, false, "not evaluated: outside the dose grid"},
		// one ROI by name, case-insensitive
		{"SpinalCord", fp(1.2), true, ""},
		// a named ROI that is missing must not pass
		{"roi:Brainstem", nil, false, "ROI not found: nothing to check, and the rule requires it (when_missing: fail)"},
	}
	if len(out) != len(want) {
		t.Fatalf("%d outcomes, want %d: %+v", len(out), len(want), out)
	}
	for i, w := range want {
		o := out[i]
		if o.Subject != w.subject || o.Met != w.met || o.Reason != w.reason || !reflect.DeepEqual(o.Value, w.value) {
			t.Errorf("outcome %d: %+v, want %+v", i, o, w)
		}
	}
	if out[0].Rule != "each target: pass rate ≥ 95 %" || out[3].Level != "action" || out[0].Level != "tolerance" {
		t.Errorf("rule text or level: %+v %+v", out[0], out[3])
	}
	if verdict != Fail {
		t.Errorf("verdict %q", verdict)
	}
	// The outcome's value is a copy, not the result's pointer.
	*r.ROIs[0].PassRate = 1
	if *out[0].Value != 96.5 {
		t.Error("outcome value aliases the result")
	}
}

// TestEvaluateNoROIOfAKind checks that a rule with nothing to check is not
// met unless the protocol says it may be skipped, or the comparison was run
// deliberately without a structure set; not applicable never reads as met,
// and rules that are all not applicable make no pass.
func TestEvaluateNoROIOfAKind(t *testing.T) {
	rules := []Rule{
		{Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
		{Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95},
		{Subject: "oars", Metric: "pass_rate", Op: ">=", Limit: 90},
	}
	r := &result.Result{Overall: result.GammaStats{PassRate: fp(99)}, ROIs: []result.ROI{
		roiOf("Couch", "other", fp(50), "evaluated"),
		{Name: "all targets", Kind: "target", Source: "derived", GammaStats: result.GammaStats{PassRate: fp(99)}},
	}}
	out, verdict := protocolOf(t, rules...).Evaluate(r)
	if len(out) != 3 || verdict != Fail {
		t.Fatalf("%+v %s", out, verdict)
	}
	for i, want := range []string{"no target ROI in this comparison", "no organ-at-risk ROI in this comparison"} {
		o := out[i+1]
		if o.Outcome != result.NotMet || o.Met || o.Value != nil || !strings.HasPrefix(o.Reason, want+": nothing to check") {
			t.Errorf("rule %d: %+v", i+1, o)
		}
	}

	// when_missing: skip makes them not applicable: the verdict rests on
	// the overall rule alone.
	skip := append([]Rule{}, rules...)
	skip[1].WhenMissing, skip[2].WhenMissing = MissingSkip, MissingSkip
	out, verdict = protocolOf(t, skip...).Evaluate(r)
	if verdict != Pass || out[0].Outcome != result.Met {
		t.Fatalf("skip: %+v %s", out, verdict)
	}
	for _, o := range out[1:] {
		if o.Outcome != result.NotApplicable || o.Met || !strings.HasSuffix(o.Reason, "(when_missing: skip)") {
			t.Errorf("skip: %+v", o)
		}
	}

	// A comparison run deliberately without structures: per-ROI rules are
	// not applicable whatever when_missing says.
	r.Choices.NoStructures = true
	out, verdict = protocolOf(t, rules...).Evaluate(r)
	if verdict != Pass {
		t.Fatalf("no structures: %+v %s", out, verdict)
	}
	for _, o := range out[1:] {
		if o.Outcome != result.NotApplicable || !strings.Contains(o.Reason, "--no-structures") {
			t.Errorf("no structures: %+v", o)
		}
	}

	// Nothing but not-applicable outcomes: nothing was checked, no pass.
	out, verdict = protocolOf(t, rules[1:]...).Evaluate(r)
	if verdict != Fail || len(out) != 2 {
		t.Errorf("all not applicable: %+v %s", out, verdict)
	}
}

// TestEvaluateCoverage checks that coverage is part of the verdict: the
// overall coverage rule, the coverage metric, and per-ROI rules on an ROI
// not wholly inside both grids.
func TestEvaluateCoverage(t *testing.T) {
	p := protocolOf(t, Rule{Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
		Rule{Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95})
	p.Coverage = DefaultCoverage()
	ptv := roiOf("PTV", "target", fp(100), "evaluated")
	ptv.CoveredPercent = fp(100)
	r := &result.Result{Overall: result.GammaStats{PassRate: fp(100), CoveragePercent: fp(100 * 5453.0 / (5453 + 6673))},
		ROIs: []result.ROI{ptv}}
	out, verdict := p.Evaluate(r)
	if verdict != Fail || len(out) != 3 {
		t.Fatalf("%+v %s", out, verdict)
	}
	if o := out[0]; o.Rule != "overall: coverage ≥ 99.5 %" || o.Outcome != result.NotMet || o.ValueText != "44.96" ||
		o.Reason != "measured 44.96 %, not ≥ 99.5 %" {
		t.Errorf("coverage rule: %+v", o)
	}
	// 99.5 % covered: met at the limit; the value shown is rounded down.
	r.Overall.CoveragePercent = fp(99.5)
	if out, verdict = p.Evaluate(r); verdict != Pass || !out[0].Met {
		t.Errorf("at the limit: %+v %s", out, verdict)
	}
	// A target only partly inside the grids is not judged on its covered
	// part, even at 100 % passing.
	r.ROIs[0].CoveredPercent = fp(62.5)
	out, verdict = p.Evaluate(r)
	if verdict != Fail || out[2].Outcome != result.NotMet || !strings.Contains(out[2].Reason, "only 62.50 % of this ROI lies inside both dose grids") {
		t.Errorf("partly covered target: %+v %s", out[2], verdict)
	}
	// ... unless the protocol says so.
	p.Coverage.ROIPercent = 50
	if out, verdict = p.Evaluate(r); verdict != Pass {
		t.Errorf("roi_percent 50: %+v %s", out, verdict)
	}
	// The coverage metric reads the ROI's covered share.
	p = protocolOf(t, Rule{Subject: "roi:PTV", Metric: "coverage", Op: ">=", Limit: 90})
	if out, verdict = p.Evaluate(r); verdict != Fail || *out[0].Value != 62.5 {
		t.Errorf("coverage metric: %+v %s", out, verdict)
	}
}

func TestEvaluateAbsD95(t *testing.T) {
	p := protocolOf(t, Rule{Subject: "targets", Metric: "dvh_diff_percent:d95", Op: "abs<=", Limit: 3},
		Rule{Subject: "targets", Metric: "dvh_diff_gy:d95", Op: ">=", Limit: -1.85})
	r := &result.Result{ROIs: []result.ROI{
		withD95(roiOf("PTV_a", "target", fp(99), "evaluated"), -2.9),
		withD95(roiOf("PTV_b", "target", fp(99), "evaluated"), -3),
		withD95(roiOf("PTV_c", "target", fp(99), "evaluated"), -3.1),
		withD95(roiOf("PTV_d", "target", fp(99), "evaluated"), 3.1),
		withD95(roiOf("PTV_e", "target", fp(99), "evaluated"), 2.5),
		roiOf("PTV_f", "target", fp(99), "no contours"),
		roiOf("PTV_g", "target", fp(99), "evaluated"),
	}}
	r.ROIs[4].DVH.DifferencePercent.D95Gy = nil
	out, verdict := p.Evaluate(r)
	if len(out) != 14 || verdict != Fail {
		t.Fatalf("%d outcomes, verdict %s", len(out), verdict)
	}
	wantMet := []bool{true, true, false, false, false, false, false}
	wantValue := []*float64{fp(-2.9), fp(-3), fp(-3.1), fp(3.1), nil, nil, nil}
	for i := range wantMet {
		o := out[i]
		if o.Met != wantMet[i] || !reflect.DeepEqual(o.Value, wantValue[i]) || o.Subject != r.ROIs[i].Name {
			t.Errorf("|ΔD95| %s: %+v", r.ROIs[i].Name, o)
		}
	}
	if out[2].Reason != "measured -3.1 %, |value| not ≤ 3 %" || out[2].Rule != "|ΔD95| of each target ≤ 3 %" {
		t.Errorf("reason %q rule %q", out[2].Reason, out[2].Rule)
	}
	if out[4].Reason != "no ΔD95 in the result" || out[5].Reason != "no DVH: no contours" || out[6].Reason != "no DVH for this ROI in the result" {
		t.Errorf("reasons %q %q %q", out[4].Reason, out[5].Reason, out[6].Reason)
	}
	// Signed, in Gy: -3.1 % is -1.86 Gy here, below -1.85 Gy; -3 % is -1.8 Gy.
	for i, met := range []bool{true, true, false, true, true, false, false} {
		if out[7+i].Met != met {
			t.Errorf("ΔD95 Gy %s: %+v", r.ROIs[i].Name, out[7+i])
		}
	}
	// A DVH rule on an organ at risk without DVH is not met either.
	p = protocolOf(t, Rule{Subject: "oars", Metric: "dvh_diff_gy:max", Op: "<=", Limit: 1})
	out, verdict = p.Evaluate(&result.Result{ROIs: []result.ROI{roiOf("Cord", "oar", nil, string(result.StatusBelowThreshold))}})
	if verdict != Fail || out[0].Met {
		t.Errorf("OAR without DVH: %+v", out[0])
	}
}

func TestEvaluateIsodose(t *testing.T) {
	p := protocolOf(t, Rule{Subject: "isodose:50", Metric: "gamma_mean", Op: "<=", Limit: 0.5})
	iso := func(name, source string, mean float64) result.ROI {
		return result.ROI{Name: name, Kind: "other", Source: source, Status: "evaluated", GammaStats: result.GammaStats{GammaMean: fp(mean)}}
	}
	r := &result.Result{ROIs: []result.ROI{
		iso("isodose 50% of 60 Gy", "structure set", 0.1), // a contour so named is not the isodose ROI
		iso("isodose 5% of 60 Gy", "isodose", 0.1),
		iso("isodose 500% of 60 Gy", "isodose", 0.1),
		iso("isodose 50% of 60 Gy", "isodose", 0.51),
	}}
	out, verdict := p.Evaluate(r)
	if len(out) != 1 || out[0].Subject != "isodose 50% of 60 Gy" || *out[0].Value != 0.51 || out[0].Met || verdict != Fail {
		t.Errorf("%+v %s", out, verdict)
	}
	r.ROIs[3].GammaMean = fp(0.5)
	if out, verdict = p.Evaluate(r); !out[0].Met || verdict != Pass {
		t.Errorf("at the limit: %+v %s", out, verdict)
	}
	r.ROIs = r.ROIs[:3]
	if out, verdict = p.Evaluate(r); out[0].Met || !strings.HasPrefix(out[0].Reason, "ROI not found:") || out[0].Subject != "isodose:50" || verdict != Fail {
		t.Errorf("missing isodose ROI: %+v %s", out, verdict)
	}
}

func TestEvaluateDegenerate(t *testing.T) {
	p := protocolOf(t, Rule{Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
		Rule{Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95})
	out, verdict := p.Evaluate(nil)
	if len(out) != 2 || verdict != Fail || out[0].Met || out[1].Met || out[0].Reason != "no comparison result" {
		t.Errorf("nil result: %+v %s", out, verdict)
	}
	empty := &Protocol{Name: "empty", Criteria: Criteria{Criteria: "3%/2mm"}}
	out, verdict = empty.Evaluate(&result.Result{Overall: result.GammaStats{PassRate: fp(100)}})
	if len(out) != 1 || out[0].Met || verdict != Fail {
		t.Errorf("no rules: %+v %s", out, verdict)
	}
	bad := &Protocol{Name: "bad", Rules: []Rule{
		{Subject: "overall", Metric: "pass_rate", Op: "=", Limit: 95},
		{Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 950},
		{Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
	}}
	out, verdict = bad.Evaluate(&result.Result{Overall: result.GammaStats{PassRate: fp(100)}})
	if len(out) != 3 || verdict != Fail || out[0].Met || !strings.HasPrefix(out[0].Reason, "invalid rule: op") ||
		out[1].Met || !strings.HasPrefix(out[1].Reason, "invalid rule: limit") || !out[2].Met {
		t.Errorf("invalid rules: %+v %s", out, verdict)
	}
}

// TestEvaluateExample runs the example file on a result that meets every
// rule, then spoils one value at a time.
func TestEvaluateExample(t *testing.T) {
	p, err := Load(filepath.Join("testdata", "example.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	good := func() *result.Result {
		cord := roiOf("SpinalCord", "oar", fp(100), "evaluated")
		cord.GammaP95 = fp(0.4)
		cord.DVH = &result.DVHPair{DifferenceGy: result.DVHStats{D003ccGy: fp(0.2)}}
		return &result.Result{
			Overall: result.GammaStats{PassRate: fp(98.2), CoveragePercent: fp(100)},
			ROIs: []result.ROI{
				withD95(roiOf("PTV_60", "target", fp(97), "evaluated"), 1.2),
				cord,
				{Name: "isodose 50% of 60 Gy", Source: "isodose", Kind: "other", Status: "evaluated", GammaStats: result.GammaStats{GammaMean: fp(0.3)}},
			},
		}
	}
	out, verdict := p.Evaluate(good())
	if verdict != Pass || len(out) != 8 || out[0].Rule != "overall: coverage ≥ 99.5 %" {
		t.Fatalf("%+v %s", out, verdict)
	}
	out = out[1:] // the spoilt rules below count from the file's first
	spoil := []func(r *result.Result){
		func(r *result.Result) { r.Overall.PassRate = fp(92) },
		func(r *result.Result) { r.ROIs[0].DVH.DifferencePercent.D95Gy = fp(-3.5) },
		func(r *result.Result) { r.ROIs[1].DVH.DifferenceGy.D003ccGy = fp(0.6) },
		func(r *result.Result) { r.ROIs[1].GammaP95 = fp(1.01) },
		func(r *result.Result) { r.ROIs[2].GammaMean = fp(0.7) },
	}
	wantFailed := [][]int{{1}, {4}, {6}, {5}, {7}} // after the coverage rule
	for k, f := range spoil {
		r := good()
		f(r)
		out, verdict := p.Evaluate(r)
		var failed []int
		for i, o := range out {
			if o.Met != (o.Outcome == result.Met) {
				t.Errorf("outcome %d: met %v with outcome %q", i, o.Met, o.Outcome)
			}
			if !o.Met {
				failed = append(failed, i)
			}
		}
		if verdict != Fail || !reflect.DeepEqual(failed, wantFailed[k]) {
			t.Errorf("spoil %d: failed %v, want %v (%s)", k, failed, wantFailed[k], verdict)
		}
	}
}

func TestCheckCriteria(t *testing.T) {
	p, _ := Preset("tg218")
	applied := result.Criteria{DosePercent: 3, DTAmm: 2, Normalisation: "global", NormDoseGy: 61.3,
		NormDoseSource: "reference maximum", ThresholdPercent: 10, SearchMM: 6, Method: "fast", Label: "3%/2mm global"}
	if err := p.CheckCriteria(applied); err != nil {
		t.Errorf("same criteria: %v", err)
	}
	bad := applied
	bad.DTAmm, bad.Normalisation, bad.NormDoseSource = 3, "local", "prescription"
	err := p.CheckCriteria(bad)
	if err == nil {
		t.Fatal("different criteria accepted")
	}
	for _, w := range []string{"DTA 3 mm applied, 2 mm in the protocol", `normalisation "local" applied`, `from "prescription"`} {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("%v lacks %q", err, w)
		}
	}
	p.Criteria.NormDoseGy = 60
	applied.NormDoseGy, applied.NormDoseSource = 60, "user"
	if err := p.CheckCriteria(applied); err != nil {
		t.Errorf("given normalisation dose: %v", err)
	}
	applied.NormDoseGy = 59
	if err := p.CheckCriteria(applied); err == nil || !strings.Contains(err.Error(), "normalisation dose 59 Gy applied, 60 Gy") {
		t.Errorf("other normalisation dose: %v", err)
	}
}

func TestROIRules(t *testing.T) {
	p, err := Load(filepath.Join("testdata", "example.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	rules, err := p.ROIRules()
	if err != nil {
		t.Fatal(err)
	}
	// Classification with the example's rules, as the roi package does it.
	cases := []struct {
		name, typ, want string
	}{
		{"PTV_60", "", "target"},
		{"ptv boost", "", "target"},
		{"PTV_60", "CTV", "target"},
		{"z_ring", "ORGAN", "other"}, // override
		{"Cord", "ORGAN", "oar"},
		{"Cord", "", "other"},
	}
	for _, c := range cases {
		k := classify(rules, c.name, c.typ)
		if k != c.want {
			t.Errorf("%s (%q): %s, want %s", c.name, c.typ, k, c.want)
		}
	}
	p.KindRules = append(p.KindRules, KindRule{Pattern: "x", Kind: "organ"})
	if _, err := p.ROIRules(); err == nil || !strings.Contains(err.Error(), "roi_kinds[2]") {
		t.Errorf("bad kind: %v", err)
	}
}

func classify(rules []roi.Rule, name, typ string) string {
	return roi.Classify(&structure.ROI{Name: name, InterpretedType: typ}, rules).String()
}

// TestParseDefaultsAndRequiredKeys checks that a key left out of a file takes
// its documented default, never Go's zero value (threshold_percent 10 %
// after AAPM TG-218, Miften et al., Med Phys 45 (2018) e53; the coverage
// limits are this tool's choice), that a rule's required keys are required,
// and that a limit written as a fraction is refused with a hint.
func TestParseDefaultsAndRequiredKeys(t *testing.T) {
	p, err := Parse([]byte("name: n\ncriteria: {criteria: 3%/2mm}\nrules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 95}]\n"), "n.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if p.Criteria.ThresholdPercent != 10 || p.Coverage != DefaultCoverage() || p.Criteria.NormDoseFrom != NormDoseReferenceMax {
		t.Errorf("defaults: %+v %+v", p.Criteria, p.Coverage)
	}
	// Left empty (YAML null) reads as left out; 0 written out is 0.
	p, err = Parse([]byte("name: n\ncriteria: {criteria: 3%/2mm, threshold_percent: ~}\ncoverage: {overall_percent: 0}\nrules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 95}]\n"), "n.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if p.Criteria.ThresholdPercent != 10 || p.Coverage.OverallPercent != 0 || p.Coverage.ROIPercent != 100 {
		t.Errorf("null and zero: %+v %+v", p.Criteria, p.Coverage)
	}
	r := p.Resolved()
	if r.Criteria.SearchMM != 6 || r.Rules[0].Level != "tolerance" || r.Rules[0].WhenMissing != MissingFail {
		t.Errorf("resolved: %+v %+v", r.Criteria, r.Rules[0])
	}
	for _, tc := range []struct{ text, want string }{
		{"rules: [{subject: overall, metric: pass_rate, op: \">=\"}]", `n.yaml:3: rules[0].limit: missing`},
		{"rules: [{subject: overall, metric: pass_rate, limit: 95}]", `rules[0].op: missing`},
		{"rules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 0.95}]", `rules[0].limit: 0.95: looks like a fraction, not a percentage; write 95 for 95 %`},
		{"rules: [{subject: overall, metric: coverage, op: \">=\", limit: 0.995}]", `write 99.5 for 99.5 %`},
		{"rules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 0}]", `checks nothing`},
		{"coverage: {overall_percent: 0.995}\nrules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 95}]", `coverage.overall_percent: 0.995 %: looks like a fraction`},
		{"rules: [{subject: targets, metric: pass_rate, op: \">=\", limit: 95, when_missing: ignore}]", `rules[0].when_missing: "ignore": want fail or skip`},
	} {
		_, err := Parse([]byte("name: n\ncriteria: {criteria: 3%/2mm}\n"+tc.text+"\n"), "n.yaml")
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want %q", tc.text, err, tc.want)
		}
	}
}

// norm_dose_from: prescription (issue 18): the normalisation dose is the
// RT Plan's prescription, which the comparison finds; no norm_dose_gy with
// it; a comparison normalised otherwise says it differs from the protocol.
func TestNormDoseFromPrescription(t *testing.T) {
	p, err := Parse([]byte("name: rx\ncriteria: {criteria: 3%/2mm, norm_dose_from: Prescription}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n"), "rx.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if !p.NormDoseFromPlan() || p.Resolved().Criteria.NormDoseFrom != NormDoseFromPrescription {
		t.Errorf("norm_dose_from %q, from plan %v", p.Resolved().Criteria.NormDoseFrom, p.NormDoseFromPlan())
	}
	c, err := p.GammaCriteria()
	if err != nil || c.NormDose != 0 {
		t.Fatalf("criteria %+v %v: the dose is the plan's, found when the comparison runs", c, err)
	}
	applied := result.Criteria{DosePercent: 3, DTAmm: 2, Normalisation: "global", NormDoseGy: 60, NormDoseSource: "prescription", ThresholdPercent: 10, SearchMM: 6}
	if err := p.CheckCriteria(applied); err != nil {
		t.Errorf("normalised to the prescription as asked: %v", err)
	}
	applied.NormDoseSource = "reference maximum"
	if err := p.CheckCriteria(applied); err == nil || !strings.Contains(err.Error(), "the RT Plan's prescription in the protocol") {
		t.Errorf("normalised to the reference maximum: %v", err)
	}
	_, err = Parse([]byte("name: rx\ncriteria: {criteria: 3%/2mm, norm_dose_from: prescription, norm_dose_gy: 60}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n"), "rx2.yaml")
	if err == nil || !strings.Contains(err.Error(), "leave norm_dose_gy out") {
		t.Errorf("with norm_dose_gy: %v", err)
	}
	_, err = Parse([]byte("name: rx\ncriteria: {criteria: 3%/2mm, norm_dose_from: plan}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n"), "rx3.yaml")
	if err == nil || !strings.Contains(err.Error(), `"prescription"`) {
		t.Errorf("an unknown source: %v", err)
	}
}

// evaluated_noise: left out, it reads as handling auto and rules judging
// the corrected figures (the documented defaults, written out by
// Resolved); a percentage is a given σ; anything else is refused with the
// file, the line and the field.
func TestParseEvaluatedNoise(t *testing.T) {
	base := "name: n\ncriteria: {criteria: 3%/2mm}\nrules: [{subject: overall, metric: pass_rate, op: \">=\", limit: 95}]\n"
	p, err := Parse([]byte(base), "n.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if r := p.Resolved(); r.Noise.Handling != DefaultNoiseHandling || r.Noise.Judge != NoiseJudgeCorrected || p.NoiseJudgesRaw() {
		t.Errorf("defaults: %+v", r.Noise)
	}
	p, err = Parse([]byte(base+"evaluated_noise: {handling: 2.5%, judge: RAW}\n"), "n.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if mode, pct, err := ParseNoiseHandling(p.Noise.Handling); err != nil || mode != "given" || pct != 2.5 || !p.NoiseJudgesRaw() {
		t.Errorf("given: %+v → %s %g %v, judges raw %v", p.Noise, mode, pct, err, p.NoiseJudgesRaw())
	}
	for _, tc := range []struct{ text, want string }{
		{"evaluated_noise: {handling: lots}", `n.yaml:4: evaluated_noise.handling: noise handling "lots": want auto, off, or σ at the evaluated maximum in percent`},
		{"evaluated_noise: {handling: -1}", `evaluated_noise.handling: noise handling "-1"`},
		{"evaluated_noise: {handling: 75}", `evaluated_noise.handling: noise handling "75"`},
		{"evaluated_noise: {judge: maybe}", `evaluated_noise.judge: judge "maybe": want corrected or raw`},
		{"evaluated_noise: {handle: auto}", `unknown field "handle"`},
	} {
		_, err := Parse([]byte(base+tc.text+"\n"), "n.yaml")
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want %q", tc.text, err, tc.want)
		}
	}
	for _, s := range []string{"auto", "", "OFF", "0.5 %", "50", "0"} {
		if _, _, err := ParseNoiseHandling(s); err != nil {
			t.Errorf("%q refused: %v", s, err)
		}
	}
}
