package pathcheck

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
)

func TestFolderOverlap(t *testing.T) {
	root := t.TempDir()
	in := filepath.Join(root, "in")
	os.MkdirAll(filepath.Join(in, "c1"), 0o755)
	file := filepath.Join(in, "c1", "ref.dcm")
	os.WriteFile(file, []byte("x"), 0o644)
	link := filepath.Join(root, "link")
	os.Symlink(in, link)
	fileLink := filepath.Join(root, "out2", "ref.dcm")
	os.MkdirAll(filepath.Dir(fileLink), 0o755)
	os.Symlink(file, fileLink) // an input that is a link sitting in the output folder
	cases := []struct {
		out    string
		inputs []string
		how    string // "" = no overlap
	}{
		{filepath.Join(root, "out"), []string{file}, ""},
		{in, []string{file}, "contains"},
		{link, []string{file}, "contains"},
		{filepath.Join(link, "..", "in"), []string{file}, "contains"},
		{file, []string{file}, "is"},
		{filepath.Join(in, "c1", "out"), []string{filepath.Join(in, "c1")}, "is inside"},
		{filepath.Join(link, "c1", "new", "deeper"), []string{filepath.Join(in, "c1")}, "is inside"},
		{filepath.Join(in, "c1", "out"), []string{file}, ""}, // beside an input file: allowed
		{filepath.Join(root, "out2"), []string{fileLink}, "contains"},
		{filepath.Join(root, "in2"), []string{in}, ""}, // a name sharing a prefix
	}
	for i, c := range cases {
		err := FolderOverlap(c.out, c.inputs)
		var o *Overlap
		switch {
		case c.how == "" && err != nil:
			t.Errorf("case %d: %v", i, err)
		case c.how != "" && (!errors.As(err, &o) || o.How != c.how):
			t.Errorf("case %d: %v, want %q", i, err, c.how)
		}
	}
	if FileInFolder(filepath.Join(link, "c1", "r.json"), []string{in}) != in || FileInFolder(filepath.Join(root, "r.json"), []string{in}) != "" {
		t.Error("FileInFolder")
	}
}
