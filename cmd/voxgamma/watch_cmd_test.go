package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/batch"
	"voxgamma/batch/batchtest"
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
