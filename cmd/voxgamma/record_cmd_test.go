package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"voxgamma/internal/batchtest"
	"voxgamma/internal/browsercheck"
	"voxgamma/internal/pgtest"
	"voxgamma/protocol"
	"voxgamma/record"
	"voxgamma/result"
	"voxgamma/trend"
)

// rcStores are the stores the command tests record into: an SQLite file,
// and a database on the real PostgreSQL server (internal/pgtest: skipped
// without one, failed on CI).
func rcStores() map[string]func(t *testing.T) string {
	return map[string]func(t *testing.T) string{
		"sqlite":   func(t *testing.T) string { return filepath.Join(t.TempDir(), "qa.db") },
		"postgres": func(t *testing.T) string { return pgtest.NewDatabase(t) },
	}
}

func rcPoints(t *testing.T, dsn string) []record.Point {
	t.Helper()
	st, err := record.Open(context.Background(), dsn)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	pts, err := st.Points(context.Background(), record.Filter{})
	if err != nil {
		t.Fatal(err)
	}
	ptrs := make([]*record.Point, len(pts))
	for i := range pts {
		ptrs[i] = &pts[i]
	}
	if err := st.Details(context.Background(), ptrs); err != nil {
		t.Fatal(err)
	}
	return pts
}

// TestRecordCompare records comparisons of a flat reference dose d0 with
// k·d0. Closed form (domain notes: a uniform scale k in a flat region gives
// Γ = |k−1|·D/ΔD; global 3 % of the reference maximum d0): k = 1.02 gives
// Γ = 2/3 at every point (all pass), k = 1.05 gives Γ = 5/3 (all fail).
// The store holds what result.json says, with the labels and case given;
// the same comparison run again is not counted twice.
func TestRecordCompare(t *testing.T) {
	for kind, mk := range rcStores() {
		t.Run(kind, func(t *testing.T) {
			dsn := mk(t)
			pass := newUniformCase(t, 2, 1.02)
			js := filepath.Join(pass.dir, "result.json")
			args := []string{"compare", "--reference", pass.ref, "--evaluated", pass.eval, "--json", js, "--record", dsn,
				"--technique", "VMAT", "--machine", "LA1", "--case-id", "VG-DEMO-001", "--no-structures", "-q"}
			vgExit(t, exitPass, args...)
			r := readResultJSON(t, js)
			pts := rcPoints(t, dsn)
			if len(pts) != 1 {
				t.Fatalf("%d recorded comparisons, want 1", len(pts))
			}
			p := pts[0]
			if *p.PassRate != 100 || *p.PassRate != *r.Overall.PassRate || *p.GammaMean != *r.Overall.GammaMean {
				t.Errorf("recorded pass rate %v Γ mean %v; result.json %v %v", *p.PassRate, *p.GammaMean, *r.Overall.PassRate, *r.Overall.GammaMean)
			}
			checkNear(t, "recorded Γ mean", p.GammaMean, 0.02/0.03, engineTol+pass.evalFile.quantBound()/(0.03*pass.refFile.max))
			if p.Labels != (record.Labels{Technique: "VMAT", Machine: "LA1"}) || p.CaseID != "VG-DEMO-001" || p.Source != "compare" || p.Verdict != "pass" {
				t.Errorf("recorded %+v", p)
			}
			for _, in := range r.Inputs {
				if in.Role == "reference" && p.ReferenceSHA256 != in.SHA256 || in.Role == "evaluated" && p.EvaluatedSHA256 != in.SHA256 {
					t.Errorf("recorded %s SHA-256 differs from the result's %s", in.Role, in.SHA256)
				}
			}
			if p.CriteriaLabel != r.Criteria.Label {
				t.Errorf("recorded criteria %q; result %q", p.CriteriaLabel, r.Criteria.Label)
			}
			// Again, forced over its outputs: still one comparison.
			vgExit(t, exitPass, append(args, "--force")...)
			if n := len(rcPoints(t, dsn)); n != 1 {
				t.Errorf("%d comparisons after comparing the same plan twice", n)
			}
			fail := newUniformCase(t, 2, 1.05)
			vgExit(t, exitRuleFail, "compare", "--reference", fail.ref, "--evaluated", fail.eval, "--record", dsn, "--no-structures", "-q")
			pts = rcPoints(t, dsn)
			if len(pts) != 2 || *pts[1].PassRate != 0 || pts[1].Verdict != "fail" {
				t.Errorf("after a failing plan: %d comparisons, last %v %s", len(pts), pts[len(pts)-1].PassRate, pts[len(pts)-1].Verdict)
			}
			checkNear(t, "failing plan's Γ mean", pts[1].GammaMean, 0.05/0.03, engineTol+fail.evalFile.quantBound()/(0.03*fail.refFile.max))
		})
	}
}

// TestRecordStoreSources: --record, else the protocol's record field (a
// path relative to the protocol file), else $VOXGAMMA_RECORD.
func TestRecordStoreSources(t *testing.T) {
	c := newUniformCase(t, 2, 1.02)
	dir := t.TempDir()
	proto := filepath.Join(dir, "clinic.yaml")
	writeTextFile(t, proto, "name: clinic\ncriteria: {criteria: 3%/2mm, threshold_percent: 10}\nrecord: history.db\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n")
	env := filepath.Join(t.TempDir(), "env.db")
	t.Setenv(record.EnvVar, env)
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--protocol", proto, "--no-structures", "-q")
	if n := len(rcPoints(t, filepath.Join(dir, "history.db"))); n != 1 {
		t.Errorf("protocol's store: %d comparisons, want 1", n)
	}
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "-q")
	if n := len(rcPoints(t, env)); n != 1 {
		t.Errorf("$%s store: %d comparisons, want 1", record.EnvVar, n)
	}
	flag := filepath.Join(t.TempDir(), "flag.db")
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--protocol", proto, "--record", flag, "--no-structures", "-q")
	if n := len(rcPoints(t, flag)); n != 1 {
		t.Errorf("--record store: %d comparisons, want 1", n)
	}
	if n := len(rcPoints(t, filepath.Join(dir, "history.db"))); n != 1 {
		t.Errorf("--record did not override the protocol's store")
	}
	// The protocol's record field is not part of the result's protocol.
	js := filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--protocol", proto, "--json", js, "--no-structures", "-q")
	if b, _ := os.ReadFile(js); bytes.Contains(b, []byte("history.db")) {
		t.Error("result.json names the store")
	}
}

func writeTextFile(t *testing.T, path, s string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(s), 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestRecordBatch runs a batch with label columns into a store, resumes
// it and reruns it: each evaluated case recorded once with its manifest
// labels (the command line's filling the blanks), cases that could not be
// evaluated not recorded.
func TestRecordBatch(t *testing.T) {
	for kind, mk := range rcStores() {
		t.Run(kind, func(t *testing.T) {
			dsn := mk(t)
			dir := t.TempDir()
			var b strings.Builder
			b.WriteString("id,reference,evaluated,structures,protocol,technique,machine\n")
			for i, spec := range []batchtest.Spec{{}, {Scale: 0.85}, {}, {}} {
				id := fmt.Sprintf("case%d", i)
				if _, err := batchtest.Write(filepath.Join(dir, "in", id), spec); err != nil {
					t.Fatal(err)
				}
				ref := "in/" + id + "/reference.dcm"
				if i == 3 {
					ref = "in/" + id + "/absent.dcm"
				}
				tech := []string{"VMAT", "VMAT", "", "IMRT"}[i]
				fmt.Fprintf(&b, "%s,%s,in/%s/evaluated.dcm,in/%s/structures.dcm,,%s,LA1\n", id, ref, id, id, tech)
			}
			manifest := filepath.Join(dir, "cases.csv")
			writeTextFile(t, manifest, b.String())
			out := filepath.Join(dir, "out")
			status, _, stderr := btRun("batch", manifest, "--out", out, "--record", dsn, "--technique", "SRS", "--site", "brain", "--jobs", "2")
			if status != exitError || !strings.Contains(btLastLine(stderr), "3 recorded in") {
				t.Fatalf("batch: exit %d, %q", status, btLastLine(stderr))
			}
			check := func(when string) {
				pts := rcPoints(t, dsn)
				got := map[string]record.Labels{}
				for _, p := range pts {
					got[p.CaseID] = p.Labels
				}
				want := map[string]record.Labels{
					"case0": {Technique: "VMAT", Machine: "LA1", Site: "brain"},
					"case1": {Technique: "VMAT", Machine: "LA1", Site: "brain"},
					"case2": {Technique: "SRS", Machine: "LA1", Site: "brain"},
				}
				if len(pts) != 3 || len(got) != 3 {
					t.Errorf("%s: %d comparisons %v, want 3", when, len(pts), got)
				}
				for id, l := range want {
					if got[id] != l {
						t.Errorf("%s: %s labels %+v, want %+v", when, id, got[id], l)
					}
				}
			}
			check("first run")
			status, _, stderr = btRun("batch", manifest, "--out", out, "--record", dsn, "--technique", "SRS", "--site", "brain")
			if !strings.Contains(btLastLine(stderr), "3 skipped as up to date; 3 recorded in") {
				t.Errorf("resumed: exit %d, %q", status, btLastLine(stderr))
			}
			check("resumed")
			btRun("batch", manifest, "--out", out, "--record", dsn, "--technique", "SRS", "--site", "brain", "--rerun")
			check("rerun")
		})
	}
}

// TestRecordWatch: a watched case is recorded, once, across two runs.
func TestRecordWatch(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	db := filepath.Join(t.TempDir(), "qa.db")
	if _, err := batchtest.Write(filepath.Join(dir, "p1"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, dir)
	for range 2 {
		status, _, stderr := btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms", "--record", db, "--machine", "LA2")
		if status != exitPass {
			t.Fatalf("watch: exit %d\n%s", status, stderr)
		}
	}
	pts := rcPoints(t, db)
	if len(pts) != 1 || pts[0].CaseID != "p1" || pts[0].Source != "watch" || pts[0].Labels.Machine != "LA2" {
		t.Errorf("recorded %+v", pts)
	}
}

// rcResult is an invented result whose overall pass rate is rate (and its
// target's rate+0.5), compared on day i: what import reads from a folder.
func rcResult(seed string, i int, rate float64) *result.Result {
	f := func(v float64) *float64 { return &v }
	r := &result.Result{SchemaVersion: result.SchemaVersion, Version: "test", Caution: result.Caution,
		Criteria: result.Criteria{DosePercent: 3, DTAmm: 2, Normalisation: "global", NormDoseGy: 2, NormDoseSource: "reference maximum",
			ThresholdPercent: 10, SearchMM: 6, Method: "fast", Label: "3%/2mm global"},
		Overall:  result.GammaStats{Evaluated: 5000, PassRate: f(rate), GammaMean: f(0.25 + (100-rate)/40)},
		Verdict:  "pass",
		Protocol: map[string]any{"name": "tg218", "criteria": map[string]any{"criteria": "3%/2mm", "threshold_percent": 10}},
		Inputs: []result.Input{{Role: "reference", SHA256: fmt.Sprintf("%x", sha256.Sum256([]byte(fmt.Sprint(seed, i, "ref")))), PatientID: "VG-DEMO-001"},
			{Role: "evaluated", SHA256: fmt.Sprintf("%x", sha256.Sum256([]byte(fmt.Sprint(seed, i, "eval"))))}},
		ROIs: []result.ROI{{Name: "PTV", Kind: "target", Source: "structure set", Status: "evaluated",
			GammaStats: result.GammaStats{Evaluated: 400, PassRate: f(math.Min(100, rate+0.5))}}},
		Run: result.Run{Started: time.Date(2025, 1, 1, 9, 0, 0, 0, time.UTC).AddDate(0, 0, i).Format(time.RFC3339)},
	}
	return r
}

func rcWriteResults(t *testing.T, dir string, rates []float64) {
	t.Helper()
	for i, v := range rates {
		d := filepath.Join(dir, fmt.Sprintf("case%03d", i))
		os.MkdirAll(d, 0o755)
		b, _ := json.MarshalIndent(rcResult(dir, i, v), "", " ")
		writeTextFile(t, filepath.Join(d, "result.json"), string(b))
	}
}

// TestLimitsCommandNIST imports results whose overall pass rates are the
// flow rates of the NIST/SEMATECH e-Handbook's individuals-chart example
// (section 6.3.2.2: Xbar = 50.81, MRbar = 1.8778, UCL = 55.8041,
// LCL = 45.8159) and checks the limits command's JSON against those
// numbers, with the fewer-than-20-plans warning.
func TestLimitsCommandNIST(t *testing.T) {
	dir := t.TempDir()
	rcWriteResults(t, dir, []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1})
	db := filepath.Join(t.TempDir(), "qa.db")
	status, _, stderr := btRun("record", "import", dir, "--record", db, "--technique", "VMAT")
	if status != exitPass || !strings.Contains(stderr, "10 results found: 10 recorded as new") {
		t.Fatalf("import: exit %d %s", status, stderr)
	}
	status, stdout, _ := btRun("record", "stats", "--record", db)
	if status != exitPass || !strings.Contains(stdout, "10 comparisons") || !strings.Contains(stdout, "VMAT") {
		t.Errorf("record stats: exit %d\n%s", status, stdout)
	}
	js := filepath.Join(t.TempDir(), "limits.json")
	status, stdout, stderr = btRun("limits", "--record", db, "--group", "technique=VMAT", "--metric", "overall_pass_rate", "--json", js)
	if status != exitPass {
		t.Fatalf("limits: exit %d %s", status, stderr)
	}
	if !strings.Contains(stdout, "technique=VMAT") || !strings.Contains(stdout, "50.81") || !strings.Contains(stdout, "45.82") {
		t.Errorf("table:\n%s", stdout)
	}
	var lim trend.Limits
	b, _ := os.ReadFile(js)
	if err := json.Unmarshal(b, &lim); err != nil {
		t.Fatal(err)
	}
	if len(lim.Rows) != 1 {
		t.Fatalf("%d rows", len(lim.Rows))
	}
	r := lim.Rows[0]
	if r.Plans != 10 || math.Abs(*r.Centre-50.81) > 0.005 || math.Abs(*r.MRBar-1.8778) > 0.00005 || math.Abs(*r.UCL-55.8041) > 0.00005 ||
		math.Abs(*r.LCL-45.8159) > 0.00005 || *r.Tolerance != *r.LCL {
		t.Errorf("row %+v: NIST/SEMATECH 6.3.2.2 gives x̄ 50.81, mR̄ 1.8778, UCL 55.8041, LCL 45.8159", r)
	}
	if len(r.Warnings) == 0 || !strings.Contains(r.Warnings[0], "fewer than 20") {
		t.Errorf("warnings %q", r.Warnings)
	}
}

// TestLimitsProtocolRoundTrip: 25 plans' limits written as a protocol,
// which compare then runs with (the clinic's own limits become its
// rules): the closed-form plan (k = 1.005, every point Γ = 1/6, 100 %
// passing, mean Γ below the group's) meets them.
func TestLimitsProtocolRoundTrip(t *testing.T) {
	dir := t.TempDir()
	var rates []float64
	for i := range 25 {
		rates = append(rates, 97.5+1.2*math.Sin(1.3*float64(i)))
	}
	rcWriteResults(t, dir, rates)
	db := filepath.Join(t.TempDir(), "qa.db")
	btRun("record", "import", dir, "--record", db, "--technique", "VMAT")
	out := filepath.Join(t.TempDir(), "vmat.yaml")
	status, stdout, stderr := btRun("limits", "--record", db, "--group", "technique=VMAT", "--protocol-out", out)
	if status != exitPass || !strings.Contains(stdout, "protocol: "+out) {
		t.Fatalf("limits: exit %d %s %s", status, stdout, stderr)
	}
	p, err := protocol.Load(out)
	if err != nil {
		t.Fatalf("the protocol written does not load: %v", err)
	}
	if p.Name != "tg218-process-limits" || len(p.Rules) != 5 || p.Criteria.Criteria != "3%/2mm" || p.Coverage != protocol.DefaultCoverage() {
		t.Errorf("protocol %s, %d rules, criteria %q, coverage %+v", p.Name, len(p.Rules), p.Criteria.Criteria, p.Coverage)
	}
	c := newUniformCase(t, 2, 1.005)
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--protocol", out, "--no-structures", "-q")
	// Two groups cannot make one protocol.
	more := t.TempDir()
	rcWriteResults(t, more, []float64{99.5, 99})
	btRun("record", "import", more, "--record", db, "--technique", "IMRT")
	status, _, stderr = btRun("limits", "--record", db, "--protocol-out", filepath.Join(t.TempDir(), "x.yaml"))
	if status != exitError || !strings.Contains(stderr, "needs one group") {
		t.Errorf("two groups: exit %d %q", status, stderr)
	}
}

// TestTrendCommand writes the control-chart page of 40 plans, one of them
// far below the others: exit 2, the page passes the browser check
// (headless Chromium), and the plan is in its chart's flagged table.
func TestTrendCommand(t *testing.T) {
	dir := t.TempDir()
	var rates []float64
	for i := range 40 {
		v := 98 + 0.5*math.Sin(1.7*float64(i))
		if i == 30 {
			v = 90
		}
		rates = append(rates, v)
	}
	rcWriteResults(t, dir, rates)
	db := filepath.Join(t.TempDir(), "qa.db")
	btRun("record", "import", dir, "--record", db, "--technique", "VMAT", "--machine", "LA1")
	page := filepath.Join(t.TempDir(), "trend.html")
	status, _, stderr := btRun("trend", "--record", db, "--report", page, "--since", "2025-01-01", "--until", "2025-12-31")
	if status != exitRuleFail || !strings.Contains(stderr, "40 plans, 1 groups, 3 charts") {
		t.Fatalf("trend: exit %d %s", status, stderr)
	}
	raw, _ := os.ReadFile(page)
	doc, err := browsercheck.Parse(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, tr := range doc.All(func(n *browsercheck.Node) bool { return n.HasClass("flag-row") }) {
		cells := tr.Elements("td")
		if len(cells) > 2 && strings.TrimSpace(cells[0].TextContent()) == "31" && strings.TrimSpace(cells[2].TextContent()) == "case030" {
			found = true
		}
	}
	if !found {
		t.Error("plan 31 (case030, the outlier) is not in a flagged table")
	}
	chromium, err := browsercheck.FindChromium()
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("CI: %v", err)
		}
		t.Skipf("%v: apt-get install chromium", err)
	}
	if _, err := browsercheck.CheckWith(page, filepath.Join(t.TempDir(), "trend.png"), browsercheck.Options{Chromium: chromium}); err != nil {
		t.Errorf("browser check: %v", err)
	}
	// The window excludes every plan: a clear error.
	status, _, stderr = btRun("trend", "--record", db, "--report", filepath.Join(t.TempDir(), "t.html"), "--since", "2030-01-01")
	if status != exitError || !strings.Contains(stderr, "no recorded comparison matches") {
		t.Errorf("empty selection: exit %d %q", status, stderr)
	}
}

// TestRecordBadInput: options and stores that cannot work are refused in
// one line, before any comparison.
func TestRecordBadInput(t *testing.T) {
	c := newUniformCase(t, 2, 1.02)
	js := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--json", js, "--record", filepath.Join(t.TempDir(), "missing", "qa.db"))
	oneErrorLine(t, r, "results store", "does not exist")
	if _, err := os.Stat(js); err == nil {
		t.Error("the comparison ran although its store could not be opened")
	}
	r = vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--record", "postgres://voxgamma@127.0.0.1:1/qa?connect_timeout=5")
	oneErrorLine(t, r, "results store", "127.0.0.1")
	db := filepath.Join(t.TempDir(), "qa.db")
	t.Setenv(record.EnvVar, "")
	for _, bad := range []struct {
		args  []string
		cause string
	}{
		{[]string{"limits"}, "--record is required"},
		{[]string{"limits", "--record", db, "--group", "colour=red"}, `--group "colour=red"`},
		{[]string{"limits", "--record", db, "--since", "2025-13-01"}, "--since"},
		{[]string{"limits", "--record", db, "--metric", "d95"}, `unknown metric "d95"`},
		{[]string{"limits", "--record", db, "--by", "linac"}, "--by"},
		{[]string{"limits", "--record", db}, "no recorded comparison matches"},
		{[]string{"trend", "--record", db}, "--report is required"},
		{[]string{"record", "import", t.TempDir()}, "--record is required"},
		{[]string{"record", "import", filepath.Join(t.TempDir(), "nope"), "--record", db}, "nope"},
	} {
		r := vgExit(t, exitError, bad.args...)
		oneErrorLine(t, r, bad.cause)
	}
}
