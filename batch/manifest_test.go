package batch

import (
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestManifestErrorsNameTheRow(t *testing.T) {
	cases := []struct {
		name, file, data string
		want             []string
	}{
		{"bad header", "m.csv", "id,referenc,evaluated\np1,a.dcm,b.dcm\n",
			[]string{"m.csv", "line 1 (header)", `unknown column "referenc"`, "id,reference,evaluated,structures,protocol"}},
		{"header without evaluated", "m.csv", "id,reference\np1,a.dcm\n",
			[]string{"line 1 (header)", `no column "evaluated"`}},
		{"column twice", "m.csv", "id,reference,evaluated,id\np1,a,b,c\n", []string{`column "id" named twice`}},
		{"duplicate id", "m.csv", "id,reference,evaluated\np1,a.dcm,b.dcm\np2,a.dcm,b.dcm\np1,c.dcm,d.dcm\n",
			[]string{"row 3 (line 4)", `id "p1"`, "duplicate id", "first seen at row 1 (line 2)"}},
		{"duplicate id ignoring case", "m.csv", "id,reference,evaluated\nCase1,a,b\ncase1,c,d\n",
			[]string{"row 2 (line 3)", "duplicate id", "ignoring case"}},
		{"missing reference", "m.csv", "id,reference,evaluated,structures,protocol\np1,,b.dcm,,\n",
			[]string{"row 1 (line 2)", `id "p1"`, "missing reference"}},
		{"missing evaluated", "m.csv", "id,reference,evaluated\np1,a.dcm\n",
			[]string{"row 1 (line 2)", "missing evaluated"}},
		{"missing id", "m.csv", "id,reference,evaluated\n,a.dcm,b.dcm\n", []string{"row 1 (line 2)", "empty id"}},
		{"unsafe id", "m.csv", "id,reference,evaluated\np1,a,b\n../x,a.dcm,b.dcm\n",
			[]string{"row 2 (line 3)", `"../x"`, "not filesystem-safe"}},
		{"hidden id", "m.csv", "id,reference,evaluated\n.p1,a.dcm,b.dcm\n", []string{"row 1", "not filesystem-safe"}},
		{"id with slash", "m.csv", "id,reference,evaluated\na/b,a.dcm,b.dcm\n", []string{"not filesystem-safe"}},
		{"too many fields", "m.csv", "id,reference,evaluated\np1,a,b,c\n", []string{"row 1 (line 2)", "4 fields", "3 columns"}},
		{"no cases", "m.csv", "id,reference,evaluated\n", []string{"m.csv", "no cases"}},
		{"empty", "m.csv", "", []string{"empty file"}},
		{"JSON unknown key", "m.json", `[{"id":"p1","reference":"a","evaluated":"b"},{"id":"p2","reference":"a","evaluated":"b","plan":"x"}]`,
			[]string{"m.json", "row 2", `unknown field "plan"`}},
		{"JSON missing evaluated", "m.json", `[{"id":"p1","reference":"a"}]`, []string{"row 1", `id "p1"`, "missing evaluated"}},
		{"JSON unsafe id", "m.json", `[{"id":"..","reference":"a","evaluated":"b"}]`, []string{"row 1", "not filesystem-safe"}},
		{"JSON not a list", "m.json", `{"id":"p1"}`, []string{"want a JSON list"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := ParseManifest([]byte(c.data), c.file, "/base")
			if err == nil {
				t.Fatalf("no error for %q", c.data)
			}
			for _, w := range c.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q does not contain %q", err, w)
				}
			}
		})
	}
}

func TestManifestCSVAndJSONAgree(t *testing.T) {
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "clinic.yaml"), []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	csvData := "# a comment line\n" +
		"evaluated,id,reference,protocol,structures\n" +
		"mc/e1.dcm,p1,plan/r1.dcm,,plan/s1.dcm\n" +
		"/abs/e2.dcm, p2 ,plan/r2.dcm,stereotactic,\n" +
		"mc/e3.dcm,p3,plan/r3.dcm,clinic.yaml,\n"
	jsonData := `[
	 {"id":"p1","reference":"plan/r1.dcm","evaluated":"mc/e1.dcm","structures":"plan/s1.dcm"},
	 {"id":"p2","reference":"plan/r2.dcm","evaluated":"/abs/e2.dcm","protocol":"stereotactic"},
	 {"id":"p3","reference":"plan/r3.dcm","evaluated":"mc/e3.dcm","protocol":"clinic.yaml"}]`
	a, err := ParseManifest([]byte(csvData), "m.csv", dir)
	if err != nil {
		t.Fatal(err)
	}
	// Content decides: a JSON list in a file without the .json extension.
	b, err := ParseManifest([]byte(jsonData), "m.txt", dir)
	if err != nil {
		t.Fatal(err)
	}
	want := []Case{
		{ID: "p1", Reference: filepath.Join(dir, "plan/r1.dcm"), Evaluated: filepath.Join(dir, "mc/e1.dcm"), Structures: filepath.Join(dir, "plan/s1.dcm"), Index: 0},
		{ID: "p2", Reference: filepath.Join(dir, "plan/r2.dcm"), Evaluated: "/abs/e2.dcm", Protocol: "stereotactic", Index: 1},
		{ID: "p3", Reference: filepath.Join(dir, "plan/r3.dcm"), Evaluated: filepath.Join(dir, "mc/e3.dcm"), Protocol: filepath.Join(dir, "clinic.yaml"), Index: 2},
	}
	for _, got := range [][]Case{a, b} {
		if len(got) != len(want) {
			t.Fatalf("got %d cases, want %d", len(got), len(want))
		}
		for i := range want {
			g := got[i]
			g.Row = ""
			if !reflect.DeepEqual(g, want[i]) {
				t.Errorf("case %d: got %+v, want %+v", i, g, want[i])
			}
		}
	}
	if a[1].Row != "row 2 (line 4)" || b[1].Row != "row 2" {
		t.Errorf("rows named %q and %q", a[1].Row, b[1].Row)
	}
}

func TestValidID(t *testing.T) {
	for _, ok := range []string{"p1", "Case_01", "a.b-c", strings.Repeat("x", MaxIDLength)} {
		if err := ValidID(ok); err != nil {
			t.Errorf("%q refused: %v", ok, err)
		}
	}
	for _, bad := range []string{"", ".", "..", "../x", "a/b", `a\b`, ".hidden", "-x", "a b", "é", strings.Repeat("x", MaxIDLength+1)} {
		if ValidID(bad) == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}
