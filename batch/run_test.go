package batch

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"voxgamma/internal/batchtest"
	"voxgamma/job"
	"voxgamma/result"
)

// mixedStudy is a study of every kind of case: two that pass (the
// evaluated dose equals the reference, so Γ = 0 everywhere), one that fails
// its rules (evaluated 15 % low: with 3 %/2 mm global criteria a uniform
// scale k fails where |k−1|·D > 3 % of the maximum and no nearby point
// agrees, which covers the target at the peak), one whose evaluated dose is
// in another frame of reference and one whose reference file is missing
// (neither can be evaluated).
func mixedStudy() []studyCase {
	return []studyCase{
		{id: "p01"},
		{id: "p02", spec: batchtest.Spec{Scale: 0.85}},
		{id: "p03", spec: batchtest.Spec{EvaluatedFrame: true}},
		{id: "p04", spec: batchtest.Spec{NoStructures: true}},
		{id: "p05", missing: true},
		{id: "p06", spec: batchtest.Spec{Peak: 3}, protocol: "stereotactic"},
	}
}

func runBatch(t *testing.T, ctx context.Context, manifest string, opt Options) *Report {
	t.Helper()
	cases, err := ReadManifest(manifest)
	if err != nil {
		t.Fatal(err)
	}
	if opt.Overrides.Version == "" {
		opt.Overrides.Version = "test"
	}
	if opt.MaxMemory == 0 {
		opt.MaxMemory = 1 << 30
	}
	rep, err := Run(ctx, cases, opt)
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

func TestBatchEndToEnd(t *testing.T) {
	dir := t.TempDir()
	manifest := writeStudy(t, dir, mixedStudy())
	out1, out3 := filepath.Join(dir, "out1"), filepath.Join(dir, "out3")
	rep1 := runBatch(t, context.Background(), manifest, Options{Out: out1, Jobs: 1, Outputs: Outputs{Report: true, ReportPDF: true}})
	rep3 := runBatch(t, context.Background(), manifest, Options{Out: out3, Jobs: 3, Outputs: Outputs{Report: true}})

	s := rep1.Summary
	want := map[string]string{"p01": "pass", "p02": "fail", "p03": "error", "p04": "pass", "p05": "error", "p06": "pass"}
	if len(s.Rows) != len(want) {
		t.Fatalf("%d rows", len(s.Rows))
	}
	for i, r := range s.Rows {
		if r.ID != mixedStudy()[i].id {
			t.Errorf("row %d is %s: not in manifest order", i, r.ID)
		}
		if r.Verdict != want[r.ID] {
			t.Errorf("%s: verdict %s, want %s (error %q)", r.ID, r.Verdict, want[r.ID], r.Error)
		}
	}
	if s.Passed != 3 || s.FailedRules != 1 || s.CouldNotEvaluate != 2 || s.ExitStatus() != ExitError {
		t.Errorf("counts %d/%d/%d exit %d", s.Passed, s.FailedRules, s.CouldNotEvaluate, s.ExitStatus())
	}
	p01, p02 := s.Rows[0], s.Rows[1]
	if p01.OverallPassRateText != "100.0" || p01.TargetPassRates != `[["PTV_A","100.0"]]` || p01.WorstROI == "" {
		t.Errorf("p01 row %+v", p01)
	}
	if p02.WorstROI != "PTV_A" || p02.RulesFailed == 0 || *p02.WorstROIPassRate >= 95 {
		t.Errorf("p02: the target at the peak should be the worst ROI and fail: %+v", p02)
	}
	if !strings.Contains(s.Rows[2].Error, "frames of reference") {
		t.Errorf("p03 error %q does not name the frames of reference", s.Rows[2].Error)
	}
	if !strings.Contains(s.Rows[4].Error, "no-such-file.dcm") {
		t.Errorf("p05 error %q does not name the file", s.Rows[4].Error)
	}
	if s.Rows[3].TargetPassRates != "[]" || s.Rows[3].WorstROI != "" {
		t.Errorf("p04 has no structures but %+v", s.Rows[3])
	}

	// Same summary whatever the number of cases at once.
	if a, b := withoutTime(t, rep1.Summary), withoutTime(t, rep3.Summary); a != b {
		t.Errorf("summaries differ between --jobs 1 and 3:\n%s\n%s", a, b)
	}
	read, err := ReadSummaryJSON(filepath.Join(out1, "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	if withoutTime(t, read) != withoutTime(t, s) {
		t.Error("summary.json differs from the summary returned")
	}
	csvData, err := os.ReadFile(filepath.Join(out1, "summary.csv"))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(csvData)), "\n")
	if lines[0] != strings.Join(SummaryColumns, ",") || len(lines) != 7 || !strings.HasPrefix(lines[1], `p01,pass,100.0,"[[""PTV_A"",""100.0""]]",`) {
		t.Errorf("summary.csv:\n%s", csvData)
	}

	// Case folders: outputs of evaluated cases, status only for errors.
	for id, v := range want {
		dir := filepath.Join(out1, CasesDir, id)
		st, err := ReadStatus(dir)
		if err != nil {
			t.Fatalf("%s: %v", id, err)
		}
		entries, _ := os.ReadDir(dir)
		var names []string
		for _, e := range entries {
			names = append(names, e.Name())
		}
		got := strings.Join(names, ",")
		wantFiles := "report.html,report.pdf,result.csv,result.json,status.json"
		if v != "error" {
			// The PDF is whole: its header and its end-of-file marker
			// (ISO 32000-1, 7.5.2 and 7.5.5).
			pdf, err := os.ReadFile(filepath.Join(dir, ReportPDFFile))
			if err != nil || !bytes.HasPrefix(pdf, []byte("%PDF-")) || !bytes.HasSuffix(bytes.TrimSpace(pdf), []byte("%%EOF")) {
				t.Errorf("%s: report.pdf is not a whole PDF (%v)", id, err)
			}
		}
		if v == "error" {
			wantFiles = "status.json"
			if st.ExitClass != ExitError || st.Error == "" {
				t.Errorf("%s status %+v", id, st)
			}
		}
		if got != wantFiles {
			t.Errorf("%s folder holds %s, want %s", id, got, wantFiles)
		}
		if st.ID != id || st.Verdict != v || st.Runs != 1 || len(st.SettingsSHA256) != 64 {
			t.Errorf("%s status %+v", id, st)
		}
		if v != "error" {
			if len(st.Inputs) == 0 || len(st.Inputs[0].SHA256) != 64 {
				t.Errorf("%s inputs %+v", id, st.Inputs)
			}
			wantClass := map[string]int{"pass": ExitPass, "fail": ExitRuleFail}[v]
			if st.ExitClass != wantClass {
				t.Errorf("%s exit class %d, want %d", id, st.ExitClass, wantClass)
			}
		}
	}
	if st, _ := ReadStatus(filepath.Join(out1, CasesDir, "p06")); st.Protocol != "stereotactic" {
		t.Errorf("p06 ran protocol %q", st.Protocol)
	}
	if st, _ := ReadStatus(filepath.Join(out1, CasesDir, "p01")); st.Protocol != DefaultProtocol {
		t.Errorf("p01 ran protocol %q", st.Protocol)
	}
	if l := tempLeftovers(t, out1); len(l) != 0 {
		t.Errorf("temporary folders left: %v", l)
	}
}

func mtime(t *testing.T, path string) time.Time {
	t.Helper()
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	return st.ModTime()
}

func TestBatchResume(t *testing.T) {
	dir := t.TempDir()
	protoFile := filepath.Join(dir, "clinic.yaml")
	protoText := "name: clinic\ncriteria: {criteria: 3%/2mm, normalisation: global, threshold_percent: 10}\n" +
		"rules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95}\n"
	writeFile(t, protoFile, protoText)
	manifest := writeStudy(t, dir, []studyCase{{id: "a"}, {id: "b"}, {id: "c", protocol: "clinic.yaml"}, {id: "bad", missing: true}})
	out := filepath.Join(dir, "out")
	opt := Options{Out: out, Jobs: 2}
	rep := runBatch(t, context.Background(), manifest, opt)
	if rep.Computed != 4 || rep.Skipped != 0 {
		t.Fatalf("first run: computed %d skipped %d", rep.Computed, rep.Skipped)
	}
	resultOf := func(id string) string { return filepath.Join(out, CasesDir, id, ResultJSON) }
	runs := func(id string) int {
		st, err := ReadStatus(filepath.Join(out, CasesDir, id))
		if err != nil {
			t.Fatal(err)
		}
		return st.Runs
	}
	before := map[string]time.Time{"a": mtime(t, resultOf("a")), "b": mtime(t, resultOf("b")), "c": mtime(t, resultOf("c"))}

	// Nothing changed: every evaluated case is skipped; the case that
	// could not be evaluated is tried again.
	rep = runBatch(t, context.Background(), manifest, opt)
	if rep.Computed != 1 || rep.Skipped != 3 {
		t.Errorf("unchanged rerun: computed %d skipped %d, want 1 and 3", rep.Computed, rep.Skipped)
	}
	for id, m := range before {
		if !mtime(t, resultOf(id)).Equal(m) || runs(id) != 1 {
			t.Errorf("%s was computed again although nothing changed", id)
		}
	}
	if runs("bad") != 2 {
		t.Errorf("the case in error ran %d times, want 2", runs("bad"))
	}

	// A changed input reruns its case only.
	if _, err := batchtest.Write(filepath.Join(dir, "inputs", "b"), batchtest.Spec{Scale: 0.85}); err != nil {
		t.Fatal(err)
	}
	rep = runBatch(t, context.Background(), manifest, opt)
	if rep.Computed != 2 || rep.Skipped != 2 || runs("a") != 1 || runs("b") != 2 || runs("c") != 1 {
		t.Errorf("after changing b: computed %d skipped %d, runs a=%d b=%d c=%d", rep.Computed, rep.Skipped, runs("a"), runs("b"), runs("c"))
	}
	if rep.Summary.Rows[1].Verdict != VerdictFail {
		t.Errorf("b now fails, summary says %s", rep.Summary.Rows[1].Verdict)
	}

	// A changed protocol file reruns the cases that use it; a change that
	// leaves the protocol's content as it was (a comment) does not.
	writeFile(t, protoFile, "# reviewed\n"+protoText)
	rep = runBatch(t, context.Background(), manifest, opt)
	if runs("c") != 1 {
		t.Errorf("a comment in the protocol reran c")
	}
	writeFile(t, protoFile, strings.Replace(protoText, "limit: 95", "limit: 99", 1))
	rep = runBatch(t, context.Background(), manifest, opt)
	if runs("a") != 1 || runs("b") != 2 || runs("c") != 2 {
		t.Errorf("after changing the protocol: runs a=%d b=%d c=%d, want 1 2 2", runs("a"), runs("b"), runs("c"))
	}

	// A changed option reruns every case.
	opt.Overrides = job.Overrides{Criteria: "2%/2mm"}
	rep = runBatch(t, context.Background(), manifest, opt)
	if rep.Skipped != 0 || runs("a") != 2 {
		t.Errorf("after changing the criteria: skipped %d, runs a=%d", rep.Skipped, runs("a"))
	}

	// A missing output makes the case run again.
	if err := os.Remove(resultOf("a")); err != nil {
		t.Fatal(err)
	}
	runBatch(t, context.Background(), manifest, opt)
	if runs("a") != 3 {
		t.Errorf("a case missing its result.json was not rerun (runs %d)", runs("a"))
	}
	if l := tempLeftovers(t, out); len(l) != 0 {
		t.Errorf("temporary folders left: %v", l)
	}
}

func TestBatchInterruptedAndResumed(t *testing.T) {
	dir := t.TempDir()
	var study []studyCase
	for _, id := range []string{"c1", "c2", "c3", "c4", "c5", "c6"} {
		study = append(study, studyCase{id: id})
	}
	manifest := writeStudy(t, dir, study)
	out := filepath.Join(dir, "out")
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var once sync.Once
	cases, err := ReadManifest(manifest)
	if err != nil {
		t.Fatal(err)
	}
	rep, err := Run(ctx, cases, Options{Out: out, Jobs: 1, MaxMemory: 1 << 30, Overrides: job.Overrides{Version: "test"},
		Progress: func(done, total int) {
			if done == 2 {
				once.Do(cancel)
			}
		}})
	if !errors.Is(err, context.Canceled) || !strings.Contains(err.Error(), "resume") {
		t.Fatalf("interrupted run returned %v", err)
	}
	if rep.Computed < 2 || rep.NotRun == 0 || rep.Computed+rep.NotRun != 6 {
		t.Fatalf("computed %d, not run %d", rep.Computed, rep.NotRun)
	}
	if l := tempLeftovers(t, out); len(l) != 0 {
		t.Errorf("an interrupted run left temporary folders: %v", l)
	}
	notRun := 0
	for _, r := range rep.Summary.Rows {
		if strings.HasPrefix(r.Error, "not run") {
			notRun++
		}
	}
	if notRun != rep.NotRun || rep.Summary.ExitStatus() != ExitError {
		t.Errorf("summary of the interrupted run: %d not run, want %d", notRun, rep.NotRun)
	}
	done := rep.Computed

	rep2 := runBatch(t, context.Background(), manifest, Options{Out: out, Jobs: 2})
	if rep2.Skipped != done || rep2.Computed != 6-done || rep2.Summary.Passed != 6 {
		t.Errorf("resumed: skipped %d computed %d passed %d; %d were done before", rep2.Skipped, rep2.Computed, rep2.Summary.Passed, done)
	}
	ref := runBatch(t, context.Background(), manifest, Options{Out: filepath.Join(dir, "ref"), Jobs: 2})
	if withoutTime(t, rep2.Summary) != withoutTime(t, ref.Summary) {
		t.Error("the resumed batch's summary differs from an uninterrupted run's")
	}
}

func TestBatchStaleFoldersFromAKilledRun(t *testing.T) {
	dir := t.TempDir()
	manifest := writeStudy(t, dir, []studyCase{{id: "k1"}, {id: "k2"}})
	out := filepath.Join(dir, "out")
	ref := runBatch(t, context.Background(), manifest, Options{Out: out})
	cases := filepath.Join(out, CasesDir)
	// What a kill leaves: a half-built case (k1), a previous folder set
	// aside whose replacement never arrived (k2), and another shard's
	// live temporary folder (not in this manifest: left alone).
	if err := os.Mkdir(filepath.Join(cases, ".k1.tmp-123"), 0o755); err != nil {
		t.Fatal(err)
	}
	writeFile(t, filepath.Join(cases, ".k1.tmp-123", ResultJSON), "{half")
	if err := os.Rename(filepath.Join(cases, "k2"), filepath.Join(cases, ".k2.old-99")); err != nil {
		t.Fatal(err)
	}
	if err := os.Mkdir(filepath.Join(cases, ".other.tmp-7"), 0o755); err != nil {
		t.Fatal(err)
	}
	rep := runBatch(t, context.Background(), manifest, Options{Out: out})
	if len(rep.Cleaned) != 2 {
		t.Errorf("cleaned %v", rep.Cleaned)
	}
	if rep.Skipped != 2 {
		t.Errorf("skipped %d: the restored k2 and the untouched k1 are up to date", rep.Skipped)
	}
	if l := tempLeftovers(t, out); len(l) != 1 || l[0] != ".other.tmp-7" {
		t.Errorf("left %v, want only the other shard's .other.tmp-7", l)
	}
	if withoutTime(t, rep.Summary) != withoutTime(t, ref.Summary) {
		t.Error("summary changed")
	}
}

func TestBatchMemoryBudget(t *testing.T) {
	dir := t.TempDir()
	manifest := writeStudy(t, dir, []studyCase{{id: "m1"}, {id: "m2", spec: batchtest.Spec{Dims: [3]int{40, 40, 20}}}})
	c, err := ReadManifest(manifest)
	if err != nil {
		t.Fatal(err)
	}
	// The estimate is read from the headers: 24×24×16 voxels in both grids.
	need, err := EstimateCase(c[0])
	if err != nil {
		t.Fatal(err)
	}
	if n := int64(24 * 24 * 16); need != max(11*n+13*n, 19*n+4*n)+16<<20 {
		t.Errorf("estimate %d", need)
	}
	need2, _ := EstimateCase(c[1])
	// A budget between the two needs: the small case runs, the large one
	// fails with a message naming its need and the budget.
	budget := (need + need2) / 2
	rep := runBatch(t, context.Background(), manifest, Options{Out: filepath.Join(dir, "out"), MaxMemory: budget, Jobs: 2})
	r := rep.Summary.Rows
	if r[0].Verdict != VerdictPass || r[1].Verdict != VerdictError {
		t.Fatalf("verdicts %s %s", r[0].Verdict, r[1].Verdict)
	}
	for _, w := range []string{job.FormatBytes(need2), job.FormatBytes(budget), "--max-memory"} {
		if !strings.Contains(r[1].Error, w) {
			t.Errorf("error %q does not name %q", r[1].Error, w)
		}
	}
}

func TestBatchShardsMergeToTheSingleRun(t *testing.T) {
	dir := t.TempDir()
	manifest := writeStudy(t, dir, mixedStudy())
	single := runBatch(t, context.Background(), manifest, Options{Out: filepath.Join(dir, "single")})
	shared := filepath.Join(dir, "shared")
	for i := range 3 {
		rep := runBatch(t, context.Background(), manifest, Options{Out: shared, Shard: Shard{Index: i, Count: 3}})
		if len(rep.Summary.Rows) != 2 || rep.Summary.Shard == nil || rep.SummaryFiles[0] != filepath.Join(shared, Shard{Index: i, Count: 3}.SummaryName()) {
			t.Errorf("shard %d: %d rows, files %v", i, len(rep.Summary.Rows), rep.SummaryFiles)
		}
	}
	if _, err := os.Stat(filepath.Join(shared, "summary.json")); !os.IsNotExist(err) {
		t.Error("a shard wrote the shared summary")
	}
	cases, _ := ReadManifest(manifest)
	merged, notes, err := Merge([]string{shared}, cases)
	if err != nil || len(notes) != 0 {
		t.Fatal(err, notes)
	}
	if withoutTime(t, merged) != withoutTime(t, single.Summary) {
		t.Errorf("merged shards differ from the single run:\n%s\n%s", withoutTime(t, merged), withoutTime(t, single.Summary))
	}
	// Without the manifest: sorted by id (here the manifest's order too).
	byID, _, err := Merge([]string{shared}, nil)
	if err != nil || withoutTime(t, byID) != withoutTime(t, single.Summary) {
		t.Errorf("merge without manifest differs: %v", err)
	}
	// Shards in separate folders merge the same way; a missing shard shows
	// as cases not run; a case in two folders is an error.
	parts := []string{filepath.Join(dir, "n0"), filepath.Join(dir, "n1")}
	for i, p := range parts {
		runBatch(t, context.Background(), manifest, Options{Out: p, Shard: Shard{Index: i, Count: 3}})
	}
	partial, _, err := Merge(parts, cases)
	if err != nil {
		t.Fatal(err)
	}
	if partial.Rows[2].Verdict != VerdictError || !strings.HasPrefix(partial.Rows[2].Error, "not run") || partial.Rows[0].Verdict != VerdictPass {
		t.Errorf("partial merge rows %+v", partial.Rows)
	}
	if _, _, err := Merge([]string{parts[0], shared}, cases); err == nil || !strings.Contains(err.Error(), "two output folders") {
		t.Errorf("a case in two folders: %v", err)
	}
}

func TestProtectTurnsAPanicIntoAnError(t *testing.T) {
	r, err := protect(func() (*result.Result, error) { panic("boom") })
	if r != nil || err == nil || !strings.Contains(err.Error(), "internal error: boom") {
		t.Fatalf("protect: %v %v", r, err)
	}
}
