package main

import (
	"encoding/json"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
	"voxgamma/phantom"
)

// TestForceRegularFilesOnly: --force overwrites regular files only. An
// output path that is a named pipe, a socket or a directory is refused
// before anything is computed, with or without --force, and is left as it
// was (a rename over a pipe would replace the pipe a reader waits on with a
// file: POSIX rename(2) replaces the directory entry, whatever it is).
// A regular file is overwritten with --force.
func TestForceRegularFilesOnly(t *testing.T) {
	c := newUniformCase(t, 2, 1)
	dir := t.TempDir()
	fifo := filepath.Join(dir, "pipe.json")
	if err := syscall.Mkfifo(fifo, 0o644); err != nil {
		t.Skipf("cannot make a FIFO here: %v", err)
	}
	sock := filepath.Join(dir, "s.csv")
	l, err := net.Listen("unix", sock)
	if err != nil {
		t.Skipf("cannot make a socket here: %v", err)
	}
	defer l.Close()
	sub := filepath.Join(dir, "folder.html")
	os.Mkdir(sub, 0o755)
	for _, o := range []struct{ flag, path, kind string }{
		{"--json", fifo, "named pipe (FIFO)"},
		{"--csv", sock, "socket"},
		{"--report", sub, "is a directory"},
	} {
		for _, force := range []bool{false, true} {
			args := []string{"compare", "--reference", c.ref, "--evaluated", c.eval, o.flag, o.path}
			if force {
				args = append(args, "--force")
			}
			r := vgExit(t, exitError, args...)
			oneErrorLine(t, r, o.path, o.kind)
		}
		st, err := os.Lstat(o.path)
		if err != nil || st.Mode().IsRegular() {
			t.Errorf("%s was replaced: %v %v", o.path, st, err)
		}
	}
	// A symbolic link is not a regular file either: the link itself would
	// be replaced.
	target := filepath.Join(dir, "target.json")
	os.WriteFile(target, []byte("{}"), 0o644)
	link := filepath.Join(dir, "link.json")
	os.Symlink(target, link)
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--json", link, "--force"), link, "symbolic link")
	// A regular file is overwritten with --force.
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--json", target, "--force", "-q")
	if res := readResultJSON(t, target); res.Verdict != "pass" {
		t.Errorf("overwritten result: verdict %q", res.Verdict)
	}
	if names := testDirNames(t, dir); len(names) != 5 {
		t.Errorf("left behind: %v", names)
	}
}

// snapshot lists every file under dir with its size: what must be left
// exactly as it was.
func snapshot(t *testing.T, dir string) map[string]int64 {
	t.Helper()
	m := map[string]int64{}
	filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err == nil {
			m[p] = info.Size()
			if info.IsDir() {
				m[p] = -1
			}
		}
		return nil
	})
	return m
}

func sameSnapshot(t *testing.T, what string, before, after map[string]int64) {
	t.Helper()
	for p, n := range before {
		if m, ok := after[p]; !ok || m != n {
			t.Errorf("%s: %s changed or removed", what, p)
		}
	}
	for p := range after {
		if _, ok := before[p]; !ok {
			t.Errorf("%s: %s was created among the inputs", what, p)
		}
	}
}

// TestOutputNeverOverInput: an output folder may never contain, replace or
// remove an input. watch with --out the watched folder (the case:
// the results went into the case folder and both DICOM files were deleted),
// batch with --out a folder holding the inputs under cases/<id>/, and each
// of these through a symbolic link, or with the output inside an input
// folder, are refused up front: exit 1, one line naming both, every input
// file as it was and nothing written among them.
func TestOutputNeverOverInput(t *testing.T) {
	sw := t.TempDir()
	if _, err := batchtest.Write(filepath.Join(sw, "c1"), batchtest.Spec{Reference: "ref.dcm", Evaluated: "eval.dcm"}); err != nil {
		t.Fatal(err)
	}
	btSettleAll(t, sw)
	link := filepath.Join(t.TempDir(), "link")
	os.Symlink(sw, link)
	before := snapshot(t, sw)
	for _, c := range []struct {
		out, want string
	}{
		{sw, "is the watched folder"},
		{link, "is the watched folder"},
		{filepath.Dir(sw), "contains the watched folder"},
		{filepath.Join(sw, "c1", "res"), "inside the case folder"},
		{filepath.Join(sw, ".failed"), "broken cases are moved into"},
	} {
		r := vgExit(t, exitError, "watch", sw, "--out", c.out, "--once", "--settle", "1s", "--poll", "50ms")
		oneErrorLine(t, r, c.out, c.want)
		sameSnapshot(t, "watch --out "+c.out, before, snapshot(t, sw))
	}

	bd := t.TempDir()
	for _, id := range []string{"c1", "c2"} {
		if _, err := batchtest.Write(filepath.Join(bd, "cases", id), batchtest.Spec{}); err != nil {
			t.Fatal(err)
		}
	}
	manifest := filepath.Join(t.TempDir(), "m.csv")
	os.WriteFile(manifest, []byte("id,reference,evaluated,structures\n"+
		"c1,"+bd+"/cases/c1/reference.dcm,"+bd+"/cases/c1/evaluated.dcm,"+bd+"/cases/c1/structures.dcm\n"+
		"c2,"+bd+"/cases/c2,"+bd+"/cases/c2/evaluated.dcm,\n"), 0o644)
	blink := filepath.Join(t.TempDir(), "blink")
	os.Symlink(bd, blink)
	before = snapshot(t, bd)
	for _, c := range []struct{ out, want string }{
		{bd, "contains the input"},
		{blink, "contains the input"},
		{filepath.Join(bd, "cases", "c1", "reference.dcm"), "is the input"},
		{filepath.Join(bd, "cases", "c2", "out"), "is inside the input folder"},
		{filepath.Dir(manifest), "contains the input " + manifest},
	} {
		status, _, stderr := btRun("batch", manifest, "--out", c.out)
		if status != exitError {
			t.Errorf("batch --out %s: exit %d", c.out, status)
		}
		oneErrorLine(t, invocation{stderr: stderr}, c.out, c.want)
		sameSnapshot(t, "batch --out "+c.out, before, snapshot(t, bd))
	}

	// compare: an output inside a folder given as an input.
	before = snapshot(t, bd)
	r := vgExit(t, exitError, "compare", "--reference", filepath.Join(bd, "cases", "c2"), "--evaluated", filepath.Join(bd, "cases", "c1", "evaluated.dcm"),
		"--json", filepath.Join(bd, "cases", "c2", "r.json"), "--force")
	oneErrorLine(t, r, "inside the input folder")
	sameSnapshot(t, "compare", before, snapshot(t, bd))
}

// writeLock plants a batch lock file as a run with that PID on that host
// would have left it (the layout of batch.LockFile: JSON with pid, host,
// started, shard).
func writeLock(t *testing.T, path string, pid int, host, shard string, age time.Duration) {
	t.Helper()
	data, _ := json.Marshal(map[string]any{"pid": pid, "host": host, "started": "2026-01-01T00:00:00Z", "shard": shard})
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	old := time.Now().Add(-age)
	os.Chtimes(path, old, old)
}

// TestBatchOneRunPerFolder: one batch run per output folder. A lock held
// by a live process (a real child process of the test, on this host) makes
// a second batch on the same --out exit 1 with one line naming the PID,
// the host and the lock file, before any case folder is touched; a lock
// left by a process that has exited is taken over with a message naming
// it; a lock from another host is honoured while it is refreshed and taken
// over once stale. Shards of one count lock apart and run side by side; an
// unsharded run and a shard of another count do not. The lock is gone when
// the run ends.
func TestBatchOneRunPerFolder(t *testing.T) {
	dir := t.TempDir()
	manifest := btWriteManifest(t, dir, []btCase{{id: "c1"}, {id: "c2"}})
	out := filepath.Join(t.TempDir(), "out")
	os.MkdirAll(filepath.Join(out, batch.CasesDir), 0o755)
	// A half-built case folder of the live run: must survive the refused
	// second run (it removed it as stale before).
	inProgress := filepath.Join(out, batch.CasesDir, ".c1.tmp-123")
	os.Mkdir(inProgress, 0o755)
	host, _ := os.Hostname()
	lock := filepath.Join(out, batch.LockFile)

	live := exec.Command("sleep", "60")
	if err := live.Start(); err != nil {
		t.Skipf("cannot start a child process: %v", err)
	}
	defer live.Process.Kill()
	writeLock(t, lock, live.Process.Pid, host, "", 0)
	status, _, stderr := btRun("batch", manifest, "--out", out)
	if status != exitError {
		t.Fatalf("second run on a locked folder: exit %d\n%s", status, stderr)
	}
	oneErrorLine(t, invocation{stderr: stderr}, "in use by another batch run", fmt.Sprintf("PID %d on host %s", live.Process.Pid, host), lock)
	if _, err := os.Stat(inProgress); err != nil {
		t.Errorf("the live run's temporary folder was removed: %v", err)
	}
	if names := testDirNames(t, filepath.Join(out, batch.CasesDir)); len(names) != 1 {
		t.Errorf("case folders written by a refused run: %v", names)
	}
	// A shard of any count is refused too while the whole run holds it.
	if status, _, _ := btRun("batch", manifest, "--out", out, "--shard", "0/2"); status != exitError {
		t.Errorf("shard beside a live unsharded run: exit %d", status)
	}

	// The owner dies: its lock is taken over, with a message.
	live.Process.Kill()
	live.Wait()
	status, _, stderr = btRun("batch", manifest, "--out", out)
	if status != exitPass {
		t.Fatalf("after the owner died: exit %d\n%s", status, stderr)
	}
	if !strings.Contains(stderr, "took over a stale lock") || !strings.Contains(stderr, fmt.Sprintf("PID %d on this host", live.Process.Pid)) {
		t.Errorf("no take-over message:\n%s", stderr)
	}
	if _, err := os.Stat(lock); !os.IsNotExist(err) {
		t.Errorf("lock left after the run: %v", err)
	}

	// Another host: honoured while fresh, taken over when stale.
	writeLock(t, lock, 4242, "other-host.example", "", time.Minute)
	status, _, stderr = btRun("batch", manifest, "--out", out, "--rerun")
	if status != exitError {
		t.Fatalf("fresh lock of another host: exit %d", status)
	}
	oneErrorLine(t, invocation{stderr: stderr}, "PID 4242 on host other-host.example")
	writeLock(t, lock, 4242, "other-host.example", "", time.Hour)
	if status, _, stderr = btRun("batch", manifest, "--out", out); status != exitPass || !strings.Contains(stderr, "not refreshed") {
		t.Fatalf("stale lock of another host: exit %d\n%s", status, stderr)
	}

	// Shards: 1/2 runs beside a live 0/2; an unsharded run and 1/3 do not.
	live2 := exec.Command("sleep", "60")
	if err := live2.Start(); err != nil {
		t.Fatal(err)
	}
	defer live2.Process.Kill()
	writeLock(t, filepath.Join(out, ".voxgamma-batch.shard-0-of-2.lock"), live2.Process.Pid, host, "0/2", 0)
	if status, _, stderr := btRun("batch", manifest, "--out", out, "--shard", "1/2", "--rerun"); status != exitPass {
		t.Errorf("shard 1/2 beside shard 0/2: exit %d\n%s", status, stderr)
	}
	for _, args := range [][]string{{}, {"--shard", "1/3"}, {"--shard", "0/2"}} {
		status, _, stderr := btRun(append([]string{"batch", manifest, "--out", out}, args...)...)
		if status != exitError || !strings.Contains(stderr, "shard 0/2") {
			t.Errorf("batch %v beside shard 0/2: exit %d\n%s", args, status, stderr)
		}
	}
}

// TestInspectHeadersOnly: inspect reads a dose's header, not its values,
// unless --values asks for them. On a 256 × 256 × 100 grid (6.6 M voxels:
// 13 MB of 16-bit values in the file, 26 MB as the float32 grid voxgamma
// decodes into) the heap allocated by inspect (runtime.MemStats.TotalAlloc)
// stays under 4 MB, and the description still gives the grid, spacing and
// extent from the header (extent = origin + (n − 1) × spacing, PS3.3
// C.7.6.2.1.1); --values allocates the grid (more than 26 MB) and prints
// the maximum; --values beyond --max-memory is refused before reading.
func TestInspectHeadersOnly(t *testing.T) {
	dose := filepath.Join(t.TempDir(), "big.dcm")
	writeTestDose(t, dose, [3]int{256, 256, 100}, [3]float64{-255, -255, -99}, [3]float64{2, 2, 2}, phantom.Uniform(2), phantomIDs())
	alloc := func(args ...string) (invocation, uint64) {
		var a, b runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&a)
		r := vgRun(t, args...)
		runtime.ReadMemStats(&b)
		return r, b.TotalAlloc - a.TotalAlloc
	}
	r, n := alloc("inspect", dose)
	if r.code != exitPass || n > 4<<20 {
		t.Errorf("inspect allocated %d bytes (exit %d)\n%s", n, r.code, r)
	}
	for _, want := range []string{"grid 256×256×100", "spacing 2 × 2 × 2 mm", "extent x -255.00…255.00, y -255.00…255.00, z -99.00…99.00 mm", "dose values not read"} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("no %q in\n%s", want, r.stdout)
		}
	}
	r, n = alloc("inspect", dose, "--values")
	if r.code != exitPass || n < 26<<20 || !strings.Contains(r.stdout, "maximum 2 gy") {
		t.Errorf("inspect --values allocated %d bytes (exit %d)\n%s", n, r.code, r)
	}
	r, n = alloc("inspect", dose, "--values", "--max-memory", "8MiB")
	if r.code != exitError || n > 4<<20 || !strings.Contains(r.stdout, "the memory budget is 8 MiB") {
		t.Errorf("inspect --values beyond the budget: %d bytes\n%s", n, r)
	}
}
