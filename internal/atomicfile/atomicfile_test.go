package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
)

func TestWriteReplacesWhole(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.json")
	if err := WriteBytes(p, []byte("first")); err != nil {
		t.Fatal(err)
	}
	if err := WriteBytes(p, []byte("second")); err != nil {
		t.Fatal(err)
	}
	if b, _ := os.ReadFile(p); string(b) != "second" {
		t.Fatalf("content %q", b)
	}
	assertOnly(t, dir, "out.json")
}

// A failure part-way leaves the old file as it was and no temporary file.
func TestFailureKeepsOldFile(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.json")
	if err := WriteBytes(p, []byte("old")); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("boom")
	err := Write(p, func(w io.Writer) error {
		w.Write([]byte("half of the new"))
		return boom
	})
	if !errors.Is(err, boom) || err.Error() == boom.Error() {
		t.Fatalf("error %v: want it wrapped with the path", err)
	}
	if b, _ := os.ReadFile(p); string(b) != "old" {
		t.Fatalf("content %q, want the old file intact", b)
	}
	assertOnly(t, dir, "out.json")
}

func TestMissingDirectory(t *testing.T) {
	p := filepath.Join(t.TempDir(), "no", "such", "out.json")
	if err := WriteBytes(p, []byte("x")); err == nil {
		t.Fatal("writing into a missing directory succeeded")
	}
}

func assertOnly(t *testing.T, dir string, names ...string) {
	t.Helper()
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(entries) != len(names) {
		var got []string
		for _, e := range entries {
			got = append(got, e.Name())
		}
		t.Fatalf("directory holds %v, want only %v", got, names)
	}
}

// TestWriteRegularFilesOnly: Write replaces a regular file but refuses a
// named pipe, a directory and a symbolic link, leaving them as they were
// and no temporary file behind.
func TestWriteRegularFilesOnly(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "fifo")
	if err := syscall.Mkfifo(fifo, 0o644); err != nil {
		t.Skipf("no FIFO: %v", err)
	}
	sub := filepath.Join(dir, "sub")
	os.Mkdir(sub, 0o755)
	link := filepath.Join(dir, "link")
	os.Symlink(filepath.Join(dir, "elsewhere"), link)
	for _, p := range []string{fifo, sub, link} {
		err := WriteBytes(p, []byte("x"))
		if err == nil || !strings.Contains(err.Error(), "not a regular file") {
			t.Errorf("%s: %v", p, err)
		}
	}
	if st, _ := os.Lstat(fifo); st.Mode()&os.ModeNamedPipe == 0 {
		t.Error("the FIFO was replaced")
	}
	reg := filepath.Join(dir, "reg")
	if err := WriteBytes(reg, []byte("a")); err != nil {
		t.Fatal(err)
	}
	if err := WriteBytes(reg, []byte("b")); err != nil {
		t.Fatal(err)
	}
	if names, _ := os.ReadDir(dir); len(names) != 4 {
		t.Errorf("%d entries left", len(names))
	}
}
