package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
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
