package main

import (
	"net"
	"os"
	"path/filepath"
	"syscall"
	"testing"
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
