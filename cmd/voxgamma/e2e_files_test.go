package main

import (
	"net"
	"os"
	"path/filepath"
	"syscall"
	"testing"

	"voxgamma/batch/batchtest"
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
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--json", target, "--force", "-q")
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
