package batch

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/batchtest"
)

// studyCase is one invented case of a test study.
type studyCase struct {
	id       string
	spec     batchtest.Spec
	protocol string // manifest protocol column
	missing  bool   // name a reference file that does not exist
}

// writeStudy writes each case into dir/inputs/<id>/ and a CSV manifest
// dir/manifest.csv naming them with paths relative to the manifest.
func writeStudy(t testing.TB, dir string, cases []studyCase) string {
	t.Helper()
	var b strings.Builder
	b.WriteString("id,reference,evaluated,structures,protocol\n")
	for _, c := range cases {
		f, err := batchtest.Write(filepath.Join(dir, "inputs", c.id), c.spec)
		if err != nil {
			t.Fatal(err)
		}
		rel := func(p string) string {
			if p == "" {
				return ""
			}
			r, err := filepath.Rel(dir, p)
			if err != nil {
				t.Fatal(err)
			}
			return r
		}
		ref := rel(f.Reference)
		if c.missing {
			ref = "inputs/" + c.id + "/no-such-file.dcm"
		}
		rs := rel(f.Structures)
		if c.spec.NoStructures {
			rs = NoStructuresWord // deliberately none: per-ROI rules not applicable
		}
		fmt.Fprintf(&b, "%s,%s,%s,%s,%s\n", c.id, ref, rel(f.Evaluated), rs, c.protocol)
	}
	path := filepath.Join(dir, "manifest.csv")
	if err := os.WriteFile(path, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// withoutTime returns the summary's JSON with the seconds of every row set
// to 0: what must not depend on how the batch was run.
func withoutTime(t testing.TB, s *Summary) string {
	t.Helper()
	c := *s
	c.Rows = append([]Row(nil), s.Rows...)
	for i := range c.Rows {
		c.Rows[i].Seconds = 0
	}
	c.Shard = nil
	data, err := json.MarshalIndent(c, "", " ")
	if err != nil {
		t.Fatal(err)
	}
	return string(data)
}

// tempLeftovers lists the temporary and set-aside folders under out/cases.
func tempLeftovers(t testing.TB, out string) []string {
	t.Helper()
	entries, err := os.ReadDir(filepath.Join(out, CasesDir))
	if err != nil {
		t.Fatal(err)
	}
	var l []string
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			l = append(l, e.Name())
		}
	}
	return l
}

func writeFile(t testing.TB, path, data string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(data), 0o644); err != nil {
		t.Fatal(err)
	}
}

// scaledDose reads the RT Dose at refPath and returns its bytes and the
// bytes of an RT Dose of the same frame whose values are k times its own.
func scaledDose(t testing.TB, refPath string, k float64) ([]byte, []byte) {
	t.Helper()
	grid, info, err := dicomio.ReadDose(refPath)
	if err != nil {
		t.Fatal(err)
	}
	for i := range grid.Data {
		grid.Data[i] *= float32(k)
	}
	out := filepath.Join(t.TempDir(), "scaled.dcm")
	if _, err := dicomio.WriteDose(out, grid, info.Identifiers, dicomio.DoseOptions("invented recalculation, Gy")); err != nil {
		t.Fatal(err)
	}
	ref, err := os.ReadFile(refPath)
	if err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	return ref, data
}
