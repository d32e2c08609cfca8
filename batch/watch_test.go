package batch

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"voxgamma/internal/batchtest"
	"voxgamma/job"
)

// testSettle is the settle time of the watch tests: short, but long
// against the time a test takes to write a file.
const testSettle = time.Second

func newTestWatcher(t *testing.T, dir, out string, mod func(*WatchOptions)) *Watcher {
	t.Helper()
	opt := WatchOptions{Dir: dir, Out: out, Settle: testSettle, Overrides: job.Overrides{Version: "test", Workers: 1}}
	if mod != nil {
		mod(&opt)
	}
	w, err := NewWatcher(opt)
	if err != nil {
		t.Fatal(err)
	}
	return w
}

func poll(t *testing.T, w *Watcher) *PollReport {
	t.Helper()
	rep, err := w.Poll(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

// backdate sets the modification time of every file under dir to an hour
// ago: files that arrived long before the watcher looked.
func backdate(t *testing.T, dir string) {
	t.Helper()
	old := time.Now().Add(-time.Hour)
	filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err == nil && info.Mode().IsRegular() {
			if err := os.Chtimes(p, old, old); err != nil {
				t.Fatal(err)
			}
		}
		return nil
	})
}

// once is Watcher.Once with a short pause.
func once(t *testing.T, w *Watcher) *PollReport {
	t.Helper()
	rep, err := w.Once(context.Background(), 20*time.Millisecond)
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

func verdicts(rep *PollReport) map[string]string {
	m := map[string]string{}
	for _, c := range rep.Cases {
		m[c.Key] = c.Verdict
	}
	return m
}

func TestWatchSubfoldersWithABrokenCase(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "results")
	for name, spec := range map[string]batchtest.Spec{
		"good1": {}, "good2": {Scale: 0.85}, "bad": {EvaluatedFrame: true},
	} {
		if _, err := batchtest.Write(filepath.Join(dir, name), spec); err != nil {
			t.Fatal(err)
		}
	}
	w := newTestWatcher(t, dir, out, nil)
	// Just written: not settled, nothing is read.
	rep := poll(t, w)
	if len(rep.Cases) != 0 || rep.Waiting != 3 || w.reads != 0 {
		t.Fatalf("fresh files: %d cases, %d waiting, %d reads", len(rep.Cases), rep.Waiting, w.reads)
	}
	time.Sleep(testSettle + 50*time.Millisecond)
	rep = poll(t, w)
	got := verdicts(rep)
	want := map[string]string{"good1": "pass", "good2": "fail", "bad": "error"}
	for k, v := range want {
		if got[k] != v {
			t.Errorf("case %s: %q, want %q (all: %v)", k, got[k], v, got)
		}
	}
	if len(got) != 3 {
		t.Errorf("cases %v", got)
	}
	// The broken case is moved aside with its reason; the good ones have
	// results.
	errText, err := os.ReadFile(filepath.Join(dir, FailedDir, "bad", "error.txt"))
	if err != nil || !strings.Contains(string(errText), "different frames of reference") {
		t.Errorf("error.txt: %v %q", err, errText)
	}
	if _, err := os.Stat(filepath.Join(dir, FailedDir, "bad", "evaluated.dcm")); err != nil {
		t.Errorf("the broken case's files were not moved: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "bad")); !os.IsNotExist(err) {
		t.Errorf("the broken case's folder is still in the watched folder")
	}
	for _, k := range []string{"good1", "good2"} {
		st, err := ReadStatus(filepath.Join(out, k))
		if err != nil || st.Verdict != want[k] || st.WatchKey == "" {
			t.Errorf("%s: %+v %v", k, st, err)
		}
		if _, err := os.Stat(filepath.Join(out, k, ResultJSON)); err != nil {
			t.Error(err)
		}
	}

	// Idle: nothing read, nothing run.
	reads := w.reads
	for range 3 {
		if rep := poll(t, w); len(rep.Cases) != 0 {
			t.Fatalf("an idle poll ran %v", verdicts(rep))
		}
	}
	if w.reads != reads {
		t.Errorf("idle polls read %d files", w.reads-reads)
	}

	// A restart processes nothing again and reads nothing.
	w2 := newTestWatcher(t, dir, out, nil)
	if rep := poll(t, w2); len(rep.Cases) != 0 || w2.reads != 0 {
		t.Errorf("after a restart: ran %v, read %d files", verdicts(rep), w2.reads)
	}
	for _, k := range []string{"good1", "good2"} {
		if st, _ := ReadStatus(filepath.Join(out, k)); st.Runs != 1 {
			t.Errorf("%s ran %d times", k, st.Runs)
		}
	}
}

func TestWatchHalfWrittenFile(t *testing.T) {
	dir, src := t.TempDir(), t.TempDir()
	f, err := batchtest.Write(src, batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	caseDir := filepath.Join(dir, "c1")
	if err := os.Mkdir(caseDir, 0o755); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{f.Reference, f.Structures} {
		data, _ := os.ReadFile(p)
		writeFile(t, filepath.Join(caseDir, filepath.Base(p)), string(data))
	}
	backdate(t, caseDir)
	eval, err := os.ReadFile(f.Evaluated)
	if err != nil {
		t.Fatal(err)
	}
	half := len(eval) / 2
	target := filepath.Join(caseDir, "evaluated.dcm")
	writeFile(t, target, string(eval[:half]))
	w := newTestWatcher(t, dir, "", nil)
	rep := poll(t, w)
	if len(rep.Cases) != 0 || w.reads != 0 {
		t.Fatalf("half-written file: ran %v, read %d files", verdicts(rep), w.reads)
	}
	// The writer finishes.
	fh, err := os.OpenFile(target, os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := fh.Write(eval[half:]); err != nil {
		t.Fatal(err)
	}
	fh.Close()
	if rep := poll(t, w); len(rep.Cases) != 0 || w.reads != 0 {
		t.Fatalf("just finished: ran %v, read %d files", verdicts(rep), w.reads)
	}
	time.Sleep(testSettle + 50*time.Millisecond)
	rep = poll(t, w)
	if v := verdicts(rep); len(v) != 1 || v["c1"] != VerdictPass {
		t.Fatalf("after settling: %v", v)
	}
	if rep := poll(t, w); len(rep.Cases) != 0 {
		t.Errorf("ran again: %v", verdicts(rep))
	}
	// Results beside the files: DIR/.voxgamma/<key>; the structure set was
	// recognised and used.
	st, err := ReadStatus(filepath.Join(dir, DefaultWatchOut, "c1"))
	if err != nil {
		t.Fatal(err)
	}
	if len(st.Inputs) != 3 || st.Inputs[2].Role != "structures" || st.Summary == nil || len(st.Summary.Targets) != 1 {
		t.Errorf("status %+v", st)
	}
}

func TestWatchUnreadableFiles(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	// A subfolder whose evaluated dose stopped half-way long ago (the
	// settle rule cannot tell a stalled writer): moved aside as a whole.
	f, err := batchtest.Write(filepath.Join(dir, "trunc"), batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(f.Evaluated)
	writeFile(t, f.Evaluated, string(data[:len(data)/2]))
	// In the flat layout, an unreadable RT Dose is moved aside alone (case
	// key "file-" and its name); a text file is ignored.
	g, err := batchtest.Write(t.TempDir(), batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	data, _ = os.ReadFile(g.Reference)
	writeFile(t, filepath.Join(dir, "RD_plan_cut.dcm"), string(data[:len(data)-100]))
	writeFile(t, filepath.Join(dir, "readme.txt"), "exported by hand")
	backdate(t, dir)
	w := newTestWatcher(t, dir, out, nil)
	rep := once(t, w)
	v := verdicts(rep)
	if len(v) != 2 || v["trunc"] != VerdictError || v["file-RD_plan_cut"] != VerdictError {
		t.Fatalf("cases %v", v)
	}
	for _, c := range rep.Cases {
		if !strings.Contains(c.Error, "unreadable RT Dose") {
			t.Errorf("%s: %q", c.Key, c.Error)
		}
	}
	for _, p := range []string{"trunc/error.txt", "trunc/reference.dcm", "file-RD_plan_cut/RD_plan_cut.dcm", "file-RD_plan_cut/error.txt"} {
		if _, err := os.Stat(filepath.Join(dir, FailedDir, p)); err != nil {
			t.Error(err)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "readme.txt")); err != nil {
		t.Errorf("a text file was moved: %v", err)
	}
	if rep := poll(t, w); len(rep.Cases) != 0 {
		t.Errorf("again: %v", verdicts(rep))
	}
}

func TestWatchDuplicatedFiles(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	// Subfolder layout: the reference twice under two names.
	f, err := batchtest.Write(filepath.Join(dir, "d1"), batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(f.Reference)
	writeFile(t, filepath.Join(dir, "d1", "reference copy.dcm"), string(data))
	// Flat layout: the evaluated dose twice.
	g, err := batchtest.Write(dir, batchtest.Spec{Reference: "ref_flat.dcm", Evaluated: "eval_flat.dcm", Structures: "rs_flat.dcm"})
	if err != nil {
		t.Fatal(err)
	}
	data, _ = os.ReadFile(g.Evaluated)
	writeFile(t, filepath.Join(dir, "eval_flat_again.dcm"), string(data))
	// One file under a reference name and an evaluated name: which dose
	// is which cannot be told.
	h, err := batchtest.Write(filepath.Join(dir, "same"), batchtest.Spec{})
	if err != nil {
		t.Fatal(err)
	}
	data, _ = os.ReadFile(h.Reference)
	writeFile(t, h.Evaluated, string(data))
	backdate(t, dir)

	w := newTestWatcher(t, dir, out, nil)
	// Seen once, even long unchanged: not read yet.
	if rep := poll(t, w); len(rep.Cases) != 0 || w.reads != 0 {
		t.Fatalf("first sight: ran %v, read %d files", verdicts(rep), w.reads)
	}
	rep := poll(t, w)
	v := verdicts(rep)
	flatKey := frameKey(g.FrameOfReferenceUID)
	if len(v) != 3 || v["d1"] != VerdictPass || v[flatKey] != VerdictPass || v["same"] != VerdictError {
		t.Fatalf("cases %v (flat key %s)", v, flatKey)
	}
	for _, c := range rep.Cases {
		if c.Key == "same" && !strings.Contains(c.Error, "matches both") {
			t.Errorf("same content as both doses: %q", c.Error)
		}
	}
	entries, _ := os.ReadDir(out)
	var folders []string
	for _, e := range entries {
		if e.IsDir() {
			folders = append(folders, e.Name())
		}
	}
	if len(folders) != 2 {
		t.Errorf("result folders %v, want one per case", folders)
	}
	if len(w.state.Cases) != 3 {
		t.Errorf("state has %d cases", len(w.state.Cases))
	}
	if rep := poll(t, w); len(rep.Cases) != 0 {
		t.Errorf("ran again: %v", verdicts(rep))
	}
}

func TestWatchFlatLayoutAndRerunOnChange(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	a, err := batchtest.Write(dir, batchtest.Spec{Reference: "ref_a.dcm", Evaluated: "eval_a.dcm", Structures: "rs_a.dcm"})
	if err != nil {
		t.Fatal(err)
	}
	b, err := batchtest.Write(dir, batchtest.Spec{Reference: "ref_b.dcm", Evaluated: "eval_b.dcm", NoStructures: true})
	if err != nil {
		t.Fatal(err)
	}
	writeFile(t, filepath.Join(dir, "notes.txt"), "not DICOM: ignored")
	backdate(t, dir)
	w := newTestWatcher(t, dir, out, nil)
	rep := once(t, w)
	ka, kb := frameKey(a.FrameOfReferenceUID), frameKey(b.FrameOfReferenceUID)
	// b has no structure set, and the watch was not told to run without
	// one: its per-target rule has nothing to check and is not met.
	if v := verdicts(rep); len(v) != 2 || v[ka] != VerdictPass || v[kb] != VerdictFail {
		t.Fatalf("flat cases %v", v)
	}
	// A new evaluated dose for case a (same frame, new content): the case
	// is processed again and its results replaced; b is not.
	_, evalGrid := scaledDose(t, a.Reference, 0.85)
	if err := os.WriteFile(a.Evaluated, evalGrid, 0o644); err != nil {
		t.Fatal(err)
	}
	if rep := poll(t, w); len(rep.Cases) != 0 {
		t.Fatalf("a file just changed was read: %v", verdicts(rep))
	}
	time.Sleep(testSettle + 50*time.Millisecond)
	rep = poll(t, w)
	if v := verdicts(rep); len(v) != 1 || v[ka] != VerdictFail {
		t.Fatalf("after the change: %v", v)
	}
	st, err := ReadStatus(filepath.Join(out, ka))
	if err != nil || st.Runs != 2 || st.Verdict != VerdictFail {
		t.Errorf("status after the change: %+v %v", st, err)
	}
	if st, _ := ReadStatus(filepath.Join(out, kb)); st.Runs != 1 {
		t.Errorf("case b ran %d times", st.Runs)
	}
}

func TestWatchRulesAndRequiredStructures(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	// Names that say nothing; the SeriesDescription tells them apart.
	if _, err := batchtest.Write(filepath.Join(dir, "s1"), batchtest.Spec{Reference: "a.dcm", Evaluated: "b.dcm", NoStructures: true}); err != nil {
		t.Fatal(err)
	}
	backdate(t, dir)
	strict := newTestWatcher(t, dir, out, func(o *WatchOptions) {
		o.ReferenceMatch = []string{"series:*planning*"}
		o.EvaluatedMatch = []string{"series:*recalculation*"}
		o.RequireStructures = true
	})
	if rep := once(t, strict); len(rep.Cases) != 0 || rep.Waiting != 1 {
		t.Fatalf("without structures, --require-structures: %v, %d waiting", verdicts(rep), rep.Waiting)
	}
	// By name only (the defaults), a.dcm and b.dcm are neither: it waits.
	byName := newTestWatcher(t, dir, filepath.Join(t.TempDir(), "o2"), nil)
	if rep := once(t, byName); len(rep.Cases) != 0 || rep.Waiting != 1 {
		t.Fatalf("default rules on a.dcm, b.dcm: %v", verdicts(rep))
	}
	loose := newTestWatcher(t, dir, filepath.Join(t.TempDir(), "o3"), func(o *WatchOptions) {
		o.ReferenceMatch = []string{"series:*planning*"}
		o.EvaluatedMatch = []string{"series:*recalculation*"}
		o.Overrides.NoStructures = true // deliberately without structures
	})
	if v := verdicts(once(t, loose)); v["s1"] != VerdictPass {
		t.Fatalf("series rules: %v", v)
	}
	if _, err := NewWatcher(WatchOptions{Dir: dir, ReferenceMatch: []string{"[x"}}); err == nil || !strings.Contains(err.Error(), "--reference-match") {
		t.Errorf("a bad glob: %v", err)
	}
}

func TestWatchStopsOnCancel(t *testing.T) {
	dir := t.TempDir()
	w := newTestWatcher(t, dir, "", nil)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error)
	go func() { done <- w.Run(ctx, 20*time.Millisecond) }()
	time.Sleep(60 * time.Millisecond)
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("the watcher did not stop")
	}
}

func TestSafeKey(t *testing.T) {
	for _, name := range []string{"case 1", "_x", "...", "ü", strings.Repeat("a", 150), "ok-1"} {
		k := safeKey(name)
		if err := ValidID(k); err != nil {
			t.Errorf("%q → %q: %v", name, k, err)
		}
	}
	if safeKey("ok-1") != "ok-1" || safeKey("a b") == safeKey("a_b") || safeKey("case-1") != "case-1" {
		t.Error("keys not kept or not distinct")
	}
	// Names that look like the keys of other kinds of cases are altered:
	// a subfolder can take neither a flat case's output folder nor an
	// altered name's.
	for _, name := range []string{frameKey("1.2.3"), "FOR-x", "file-RD_plan", "x-a_b-0123456789abcdef", safeKey("a b")} {
		if k := safeKey(name); k == name || ValidID(k) != nil {
			t.Errorf("%q → %q", name, k)
		}
	}
}
