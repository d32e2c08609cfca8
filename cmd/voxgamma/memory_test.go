package main

import (
	"path/filepath"
	"testing"

	"voxgamma/job"
	"voxgamma/phantom"
)

// TestMemoryBudget checks that a comparison estimated to need more than
// --max-memory is refused before anything is loaded, saying how much it
// needs, and that a sufficient budget runs. The estimate is batch's
// EstimateBytes from the header sizes (a project formula, not a published
// one: the test checks the arithmetic and the refusal, not the constant).
func TestMemoryBudget(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	ref := filepath.Join(dir, "ref.dcm")
	eval := filepath.Join(dir, "eval.dcm")
	writeTestDose(t, ref, [3]int{20, 20, 10}, [3]float64{-19, -19, -9}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
	writeTestDose(t, eval, [3]int{24, 24, 12}, [3]float64{-23, -23, -11}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
	need := job.EstimateBytes(20*20*10, 24*24*12)
	out := filepath.Join(dir, "r.json")
	r := vgExit(t, 1, "compare", "--reference", ref, "--evaluated", eval, "--json", out, "--max-memory", "1MiB")
	oneErrorLine(t, r, job.FormatBytes(need), "--max-memory")
	if names := testDirNames(t, dir); len(names) != 2 {
		t.Fatalf("a refused comparison left files: %v", names)
	}
	vgExit(t, 0, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--json", out, "--max-memory", "1GiB", "-q")
	r = vgExit(t, 1, "compare", "--reference", ref, "--evaluated", eval, "--max-memory", "lots")
	oneErrorLine(t, r, "--max-memory")
}
