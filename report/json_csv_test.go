package report

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"

	"voxgamma/result"
)

func TestJSONRoundTrip(t *testing.T) {
	r := synthCase(t, smallCase).Result
	var buf bytes.Buffer
	if err := EncodeJSON(&buf, r); err != nil {
		t.Fatal(err)
	}
	b := buf.Bytes()
	if !bytes.HasSuffix(b, []byte("}\n")) || bytes.HasSuffix(b, []byte("\n\n")) {
		t.Errorf("JSON does not end with exactly one newline")
	}
	if !bytes.HasPrefix(b, []byte("{\n  \"schema_version\": ")) {
		t.Errorf("JSON not indented by two spaces: %.40q", b)
	}
	if !bytes.Contains(b, []byte("≥ 95 %")) || bytes.Contains(b, []byte(`\u003e`)) {
		t.Errorf("JSON escapes characters it need not")
	}
	var back result.Result
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(&back, r) {
		t.Errorf("decoded result differs from the encoded one")
	}
	// Null for numbers that do not exist.
	if !bytes.Contains(b, []byte(`"pass_rate": null`)) {
		t.Errorf("the ROI with nothing evaluated has no null pass rate")
	}

	// Deterministic: the same result (and an equal one built anew, whose
	// protocol map was filled in another order) give the same bytes.
	r2 := synthCase(t, smallCase).Result
	r2.Protocol = map[string]any{"oar_pass_rate": 90.0, "target_pass_rate": 95.0, "name": "synthetic test protocol"}
	var buf2 bytes.Buffer
	if err := EncodeJSON(&buf2, r2); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(b, buf2.Bytes()) {
		t.Errorf("equal results gave different JSON")
	}

	// The file.
	path := filepath.Join(t.TempDir(), "result.json")
	if err := WriteJSON(path, r); err != nil {
		t.Fatal(err)
	}
	if got, err := os.ReadFile(path); err != nil || !bytes.Equal(got, b) {
		t.Errorf("file differs from EncodeJSON's output (%v)", err)
	}
}

func TestJSONRefusesNaN(t *testing.T) {
	r := synthCase(t, smallCase).Result
	r.ROIs[0].VolumeCC = 0 / zero()
	path := filepath.Join(t.TempDir(), "result.json")
	if err := os.WriteFile(path, []byte("old"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := WriteJSON(path, r); err == nil {
		t.Fatal("NaN volume encoded without error")
	}
	if got, _ := os.ReadFile(path); string(got) != "old" {
		t.Errorf("failed write changed the file to %q", got)
	}
	entries, _ := os.ReadDir(filepath.Dir(path))
	if len(entries) != 1 {
		t.Errorf("failed write left %d files", len(entries))
	}
}

func zero() float64 { return 0 }

func TestCSV(t *testing.T) {
	r := synthCase(t, smallCase).Result
	path := filepath.Join(t.TempDir(), "result.csv")
	if err := WriteCSV(path, r); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Warnings) == 0 {
		t.Fatal("the synthetic result has no warning: the warning rows go untested")
	}
	if len(rows) != len(r.ROIs)+2+len(r.Warnings) {
		t.Fatalf("%d rows, want header + overall + %d ROIs + %d warnings", len(rows), len(r.ROIs), len(r.Warnings))
	}
	// One row per warning, after the ROIs: name "warning", the text in
	// the status column, every other cell empty.
	for i, w := range r.Warnings {
		row := rows[len(r.ROIs)+2+i]
		for c, v := range row {
			want := ""
			switch c {
			case 0:
				want = "warning"
			case slices.Index(rows[0], "status"):
				want = w
			}
			if v != want {
				t.Errorf("warning row %d, column %s: %q, want %q", i, rows[0][c], v, want)
			}
		}
	}
	rows = rows[:len(r.ROIs)+2]
	if got := strings.Join(CSVColumns(), ","); got != strings.Join(rows[0], ",") {
		t.Errorf("CSVColumns %s differs from the header written", got)
	}
	wantHeader := "name,kind,source,volume_cc,voxels,evaluated,passed,pass_rate,gamma_mean,gamma_p95,gamma_max,failing_volume_cc,status,coverage_percent,covered_percent,ref_mean_gy,eval_mean_gy,ref_d95_gy,eval_d95_gy,diff_d95_percent,ref_d2_gy,eval_d2_gy,diff_d2_percent,raw_pass_rate,raw_gamma_mean,noise_warning"
	if got := strings.Join(rows[0], ","); got != wantHeader {
		t.Errorf("header\n got %s\nwant %s", got, wantHeader)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	overall := rows[1]
	if overall[0] != "overall" || overall[col["evaluated"]] != itoa(r.Overall.Evaluated) ||
		overall[col["pass_rate"]] != result.FormatPercent(*r.Overall.PassRate, 2) {
		t.Errorf("overall row %v", overall)
	}
	for _, c := range []string{"volume_cc", "status", "ref_d95_gy", "diff_d2_percent"} {
		if overall[col[c]] != "" {
			t.Errorf("overall row: %s = %q, want empty", c, overall[col[c]])
		}
	}
	for i, roi := range r.ROIs {
		row := rows[i+2]
		if row[0] != roi.Name || row[col["status"]] != statusText(roi) {
			t.Errorf("row %d: %v, want ROI %q", i+2, row, roi.Name)
		}
		if roi.DVH != nil && row[col["diff_d95_percent"]] != csvFloat(*roi.DVH.DifferencePercent.D95Gy) {
			t.Errorf("ROI %q: diff_d95_percent %q", roi.Name, row[col["diff_d95_percent"]])
		}
	}
	// The marker ROI: nothing evaluated, no DVH: every null is an empty
	// cell, counts are 0.
	marker := rows[len(rows)-1]
	if marker[0] != "MARKER_1" {
		t.Fatalf("last row is %q", marker[0])
	}
	for _, c := range []string{"pass_rate", "gamma_mean", "gamma_p95", "gamma_max", "ref_mean_gy", "eval_mean_gy",
		"ref_d95_gy", "eval_d95_gy", "diff_d95_percent", "ref_d2_gy", "eval_d2_gy", "diff_d2_percent"} {
		if marker[col[c]] != "" {
			t.Errorf("MARKER_1: %s = %q, want empty (null)", c, marker[col[c]])
		}
	}
	if marker[col["evaluated"]] != "0" || marker[col["voxels"]] != "0" {
		t.Errorf("MARKER_1: counts %q %q, want 0", marker[col["evaluated"]], marker[col["voxels"]])
	}
}

func itoa(n int) string { return csvFloat(float64(n)) }

// With a noise correction the raw pass rates stand beside the corrected
// ones, and the rows whose pass rate the noise moves by more than 1 point
// carry the warning with σ and both rates; without one the columns are
// empty.
func TestCSVNoise(t *testing.T) {
	r := synthCase(t, smallCase).Result
	sigma := 2.5
	n := &result.Noise{Source: "estimated", SigmaPercent: &sigma, Corrected: true, Judged: "corrected", Warning: true,
		RawOverall: r.Overall}
	rawRate := *r.Overall.PassRate - 5
	n.RawOverall.PassRate, n.RawOverall.PassRateText = &rawRate, result.FormatPercent(rawRate, 2)
	for _, roi := range r.ROIs {
		n.ROIs = append(n.ROIs, result.NoiseROI{Name: roi.Name, GammaStats: roi.GammaStats})
	}
	r.Noise = n
	var buf bytes.Buffer
	if err := EncodeCSV(&buf, r); err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	overall := rows[1]
	if overall[col["raw_pass_rate"]] != csvPercent(&rawRate) {
		t.Errorf("overall raw_pass_rate %q, want %v", overall[col["raw_pass_rate"]], rawRate)
	}
	w := overall[col["noise_warning"]]
	for _, want := range []string{"2.5 %", "raw " + n.RawOverall.PassRateText + " %", "corrected " + r.Overall.PassRateText + " %", "corrected figures"} {
		if !strings.Contains(w, want) {
			t.Errorf("overall noise_warning %q lacks %q", w, want)
		}
	}
	// The ROIs' raw rates equal the corrected ones here: no warning on
	// their rows.
	for i := range r.ROIs {
		if rows[i+2][col["noise_warning"]] != "" {
			t.Errorf("row %q carries a warning without a shift", rows[i+2][0])
		}
		if got, want := rows[i+2][col["raw_pass_rate"]], csvPercent(r.ROIs[i].PassRate); got != want {
			t.Errorf("row %q raw_pass_rate %q, want %q", rows[i+2][0], got, want)
		}
	}
	r.Noise.Corrected, r.Noise.Warning = false, false
	buf.Reset()
	if err := EncodeCSV(&buf, r); err != nil {
		t.Fatal(err)
	}
	rows, _ = csv.NewReader(&buf).ReadAll()
	for _, c := range []string{"raw_pass_rate", "raw_gamma_mean", "noise_warning"} {
		if rows[1][col[c]] != "" {
			t.Errorf("without a correction %s = %q", c, rows[1][col[c]])
		}
	}
}
