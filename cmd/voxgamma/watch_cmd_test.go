package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
	"voxgamma/job"
)

// btSettleAll sets every file under dir an hour into the past: files that
// arrived long before the watcher looked.
func btSettleAll(t *testing.T, dir string) {
	t.Helper()
	old := time.Now().Add(-time.Hour)
	filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err == nil && info.Mode().IsRegular() {
			os.Chtimes(p, old, old)
		}
		return nil
	})
}

func TestWatchCmdOnceExitStatus(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	if _, err := batchtest.Write(filepath.Join(dir, "p1"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, dir)
	status, _, stderr := btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms")
	if status != exitPass || btLastLine(stderr) != "voxgamma: watch: 1 passed, 0 failed rules, 0 could not be evaluated (of 1 cases); 0 folders waiting" {
		t.Fatalf("exit %d, %q\n%s", status, btLastLine(stderr), stderr)
	}
	if !strings.Contains(stderr, `msg="case finished" case=p1 verdict=pass seconds=`) {
		t.Errorf("no finish line:\n%s", stderr)
	}
	// Processed once: a second run does nothing.
	status, _, stderr = btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms")
	if status != exitPass || !strings.Contains(btLastLine(stderr), "(of 0 cases)") {
		t.Fatalf("second run: exit %d, %q", status, btLastLine(stderr))
	}

	// A failing case (2), a case still being written (waits), then a
	// broken one next to it (1).
	if _, err := batchtest.Write(filepath.Join(dir, "p2"), batchtest.Spec{Scale: 0.85}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, filepath.Join(dir, "p2"))
	if _, err := batchtest.Write(filepath.Join(dir, "fresh"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	status, _, stderr = btRun("watch", dir, "--out", out, "--once", "--settle", "1m", "--poll", "50ms")
	if status != exitRuleFail || btLastLine(stderr) != "voxgamma: watch: 0 passed, 1 failed rules, 0 could not be evaluated (of 1 cases); 1 folders waiting (exit 2)" {
		t.Fatalf("exit %d, %q", status, btLastLine(stderr))
	}
	if _, err := batchtest.Write(filepath.Join(dir, "p3"), batchtest.Spec{EvaluatedFrame: true}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, filepath.Join(dir, "p3"))
	status, _, stderr = btRun("watch", dir, "--out", out, "--once", "--settle", "1m", "--poll", "50ms")
	if status != exitError || !strings.Contains(btLastLine(stderr), "1 could not be evaluated") || !strings.Contains(btLastLine(stderr), batch.FailedDir) {
		t.Fatalf("exit %d, %q", status, btLastLine(stderr))
	}
	if _, err := os.Stat(filepath.Join(dir, batch.FailedDir, "p3", "error.txt")); err != nil {
		t.Error(err)
	}
	status, _, stderr = btRun("watch", dir, "--once", "--settle", "0s")
	if status != exitError || !strings.Contains(btLastLine(stderr), "--settle") {
		t.Errorf("--settle 0: exit %d, %q", status, btLastLine(stderr))
	}
}

func TestWatchCmdRunsUntilSIGTERM(t *testing.T) {
	bin := btBinary(t)
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	cmd := exec.Command(bin, "watch", dir, "--out", out, "--poll", "50ms", "--settle", "200ms")
	cmd.Env = btEnv()
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Process.Kill()
	// A case dropped while it runs: written in a hidden folder, then moved
	// in, as an exporter would.
	staging := filepath.Join(dir, ".incoming")
	if _, err := batchtest.Write(staging, batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(staging, filepath.Join(dir, "drop1")); err != nil {
		t.Fatal(err)
	}
	result := filepath.Join(out, "drop1", "result.json")
	deadline := time.Now().Add(20 * time.Second)
	for {
		if _, err := os.Stat(result); err == nil {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("no result after 20 s:\n%s", stderr.String())
		}
		time.Sleep(20 * time.Millisecond)
	}
	if err := cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	done := make(chan error)
	go func() { done <- cmd.Wait() }()
	select {
	case err := <-done:
		if err != nil {
			t.Fatalf("exit after SIGTERM: %v\n%s", err, stderr.String())
		}
	case <-time.After(10 * time.Second):
		t.Fatal("did not stop on SIGTERM")
	}
	if btLastLine(stderr.String()) != "voxgamma: watch: stopped" {
		t.Errorf("last line %q", btLastLine(stderr.String()))
	}
	if n := strings.Count(stderr.String(), `msg="case finished" case=drop1`); n != 1 {
		t.Errorf("drop1 finished %d times:\n%s", n, stderr.String())
	}
}

// TestWatchCmdRestartReportsFoundCase: a watcher killed (kill -9) after a
// case's folder was installed and before the state file recorded it
// leaves exactly this behind: the finished case folder, no state entry.
// The next run reports that case with its verdict (here a failing one:
// exit 2, "(of 1 cases)", a "case finished" line), without computing it
// again; with --deidentify too, where the case's folder name (a keyed
// token) differs between runs of random keys and the case is found by the
// content of its files.
func TestWatchCmdRestartReportsFoundCase(t *testing.T) {
	for _, extra := range [][]string{nil, {"--deidentify"}} {
		dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
		if _, err := batchtest.Write(filepath.Join(dir, "p1"), batchtest.Spec{Scale: 0.85}); err != nil {
			t.Fatal(err)
		}
		btSettleAll(t, dir)
		args := append([]string{"watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms"}, extra...)
		status, _, stderr := btRun(args...)
		if status != exitRuleFail {
			t.Fatalf("%v first run: exit %d\n%s", extra, status, stderr)
		}
		// The kill: the state file never written.
		if err := os.Remove(filepath.Join(out, batch.WatchStateFile)); err != nil {
			t.Fatal(err)
		}
		folders := testDirNames(t, out)
		status, _, stderr = btRun(args...)
		if status != exitRuleFail || !strings.Contains(btLastLine(stderr), "0 passed, 1 failed rules, 0 could not be evaluated (of 1 cases)") {
			t.Fatalf("%v after the restart: exit %d, %q\n%s", extra, status, btLastLine(stderr), stderr)
		}
		if !strings.Contains(stderr, `msg="case finished"`) || !strings.Contains(stderr, "verdict=fail") || !strings.Contains(stderr, "recorded now") {
			t.Errorf("%v: the found case is not reported with its verdict:\n%s", extra, stderr)
		}
		if strings.Contains(stderr, "case started") {
			t.Errorf("%v: the finished case was computed again:\n%s", extra, stderr)
		}
		if after := testDirNames(t, out); strings.Join(after, ",") != strings.Join(folders, ",")+","+batch.WatchStateFile && strings.Join(after, ",") != batch.WatchStateFile+","+strings.Join(folders, ",") {
			t.Errorf("%v: output folders %v, before %v", extra, after, folders)
		}
		// Recorded now: a third run has nothing to do.
		if status, _, stderr = btRun(args...); status != exitPass || !strings.Contains(stderr, "(of 0 cases)") {
			t.Errorf("%v third run: exit %d\n%s", extra, status, stderr)
		}
	}
}

// TestWatchCmdKeysCannotCollide: a subfolder named exactly like the flat
// layout's case key of a frame of reference ("for-" and 12 hex digits of
// the frame UID's SHA-256) is its own case with its own output folder:
// both cases are reported with their own verdicts (one passes, one fails),
// and each output folder holds its own case's status.
func TestWatchCmdKeysCannotCollide(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	flat, err := batchtest.Write(dir, batchtest.Spec{Reference: "ref_flat.dcm", Evaluated: "eval_flat.dcm", Structures: "rs_flat.dcm"})
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256([]byte(flat.FrameOfReferenceUID))
	flatKey := "for-" + hex.EncodeToString(sum[:6])
	if _, err := batchtest.Write(filepath.Join(dir, flatKey), batchtest.Spec{Scale: 0.85}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, dir)
	status, _, stderr := btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms")
	if status != exitRuleFail || !strings.Contains(btLastLine(stderr), "1 passed, 1 failed rules, 0 could not be evaluated (of 2 cases)") {
		t.Fatalf("exit %d, %q\n%s", status, btLastLine(stderr), stderr)
	}
	verdicts := map[string]bool{}
	for _, name := range testDirNames(t, out) {
		if strings.HasPrefix(name, ".") {
			continue
		}
		st, err := batch.ReadStatus(filepath.Join(out, name))
		if err != nil {
			t.Fatal(err)
		}
		verdicts[st.Verdict] = true
		if len(st.Inputs) == 0 || (st.Verdict == batch.VerdictPass) != strings.Contains(st.Inputs[0].Path, "ref_flat.dcm") {
			t.Errorf("folder %s holds the status of another case: %+v", name, st.Inputs)
		}
	}
	if len(verdicts) != 2 {
		t.Errorf("output folders hold %v, want one pass and one fail", verdicts)
	}
}

// TestWatchCmdMemoryBudget: watch has the batch memory budget. A case
// whose dose grids are estimated to need more than --max-memory (24×24×16
// voxels each, job.EstimateBytes: about 17 MiB, against 1 MiB) is not
// loaded: it is moved aside with the estimate and the budget, exit 1; with
// the default budget it passes.
func TestWatchCmdMemoryBudget(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	if _, err := batchtest.Write(filepath.Join(dir, "big"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, dir)
	status, _, stderr := btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms", "--max-memory", "1MiB")
	n := int64(24 * 24 * 16)
	need := "needs about " + job.FormatBytes(job.EstimateBytes(n, n)) + " of memory"
	if status != exitError || !strings.Contains(stderr, need) || !strings.Contains(stderr, "memory budget of 1 MiB") {
		t.Fatalf("exit %d\n%s", status, stderr)
	}
	errTxt, err := os.ReadFile(filepath.Join(dir, batch.FailedDir, "big", "error.txt"))
	if err != nil || !strings.Contains(string(errTxt), "--max-memory") {
		t.Errorf("error.txt: %v %s", err, errTxt)
	}
	// Put back, with the default budget.
	os.Rename(filepath.Join(dir, batch.FailedDir, "big"), filepath.Join(dir, "big2"))
	os.Remove(filepath.Join(dir, "big2", "error.txt"))
	btSettleAll(t, dir)
	if status, _, stderr = btRun("watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms"); status != exitPass {
		t.Errorf("default budget: exit %d\n%s", status, stderr)
	}
}
