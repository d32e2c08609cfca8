package main

import (
	"bytes"
	"path/filepath"
	"strconv"
	"testing"
)

// TestDeterministicWorkersAndRuns extends TestDeterministicWorkers (1 and 3
// workers, e2e_roi_test.go) to 1, 2 and 5 workers and to a repeated run
// with the same worker count. README: "Everything except run is
// byte-identical for the same inputs, whatever the worker count";
// gamma/doc.go: points are processed in fixed blocks, "results are
// bit-identical for any number of workers". The case has structures and
// failing voxels (roiCase: the target fails entirely, TestPerROI), so the
// ROI statistics, failing clusters and rules are compared too, not only
// a uniform pass.
//
// Compared byte for byte: the JSON without its "run" object, the CSV, the
// MetaImage gamma and difference maps, and, in the RT Dose gamma and
// difference maps (whose UIDs and creation times must differ), the value
// bytes of PixelData (7FE0,0010) and DoseGridScaling (3004,000E).
func TestDeterministicWorkersAndRuns(t *testing.T) {
	c := newROICase(t)
	type outs struct {
		workers                           int
		json, csv, gdcm, ddcm, gmha, dmha string
	}
	var runs []outs
	for i, w := range []int{1, 2, 5, 5} {
		d := filepath.Join(t.TempDir(), "run"+strconv.Itoa(i))
		o := outs{workers: w, json: d + ".json", csv: d + ".csv", gdcm: d + "_gamma.dcm", ddcm: d + "_diff.dcm", gmha: d + "_gamma.mha", dmha: d + "_diff.mha"}
		base := []string{"compare", "--reference", c.ref, "--evaluated", c.eval, "--structures", c.rs, "--workers", strconv.Itoa(w), "--isodose", "50", "--quiet"}
		vgExit(t, exitRuleFail, append(base, "--json", o.json, "--csv", o.csv, "--gamma-map", o.gdcm, "--difference-map", o.ddcm)...)
		vgExit(t, exitRuleFail, append(base, "--gamma-map", o.gmha, "--difference-map", o.dmha)...)
		runs = append(runs, o)
	}

	first := readResultJSON(t, runs[0].json)
	ptv := resultROI(t, first, "PTV_Met")
	if ptv.Passed != 0 || ptv.Evaluated == 0 || len(first.Clusters) == 0 || first.Overall.Passed == first.Overall.Evaluated {
		t.Fatalf("the case must have failing voxels in a structure: PTV_Met %d of %d passed, %d clusters, overall %d of %d",
			ptv.Passed, ptv.Evaluated, len(first.Clusters), first.Overall.Passed, first.Overall.Evaluated)
	}
	ref := runs[0]
	refJSON := withoutRun(t, ref.json)
	for _, o := range runs[1:] {
		what := "workers " + strconv.Itoa(o.workers)
		if o.json == runs[len(runs)-1].json {
			what += ", second run"
		}
		if got := withoutRun(t, o.json); !bytes.Equal(got, refJSON) {
			t.Errorf("%s: JSON without run differs from 1 worker's:\n%s\n%s", what, got, refJSON)
		}
		if w := readResultJSON(t, o.json).Run.Workers; w != o.workers {
			t.Errorf("%s: run.workers %d", what, w)
		}
		for _, p := range [][2]string{{ref.csv, o.csv}, {ref.gmha, o.gmha}, {ref.dmha, o.dmha}} {
			if !bytes.Equal(mustReadFile(t, p[0]), mustReadFile(t, p[1])) {
				t.Errorf("%s: %s differs from %s", what, filepath.Base(p[1]), filepath.Base(p[0]))
			}
		}
		for _, p := range [][2]string{{ref.gdcm, o.gdcm}, {ref.ddcm, o.ddcm}} {
			got, want := mapValueBytes(t, p[1]), mapValueBytes(t, p[0])
			if !bytes.Equal(got[0], want[0]) || !bytes.Equal(got[1], want[1]) {
				t.Errorf("%s: %s: PixelData or DoseGridScaling differ from 1 worker's", what, filepath.Base(p[1]))
			}
			if bytes.Equal(mustReadFile(t, p[0]), mustReadFile(t, p[1])) {
				t.Errorf("%s: %s is byte-identical to %s: new UIDs and times expected", what, filepath.Base(p[1]), filepath.Base(p[0]))
			}
		}
	}
}

// mapValueBytes returns the value bytes of PixelData and DoseGridScaling of
// an RT Dose map.
func mapValueBytes(t *testing.T, path string) [2][]byte {
	t.Helper()
	b := mustReadFile(t, path)
	px, sc := findElem(t, b, tgPixelData, 0), findElem(t, b, tgScaling, 0)
	return [2][]byte{b[px.val:px.end()], b[sc.val:sc.end()]}
}
