package main

// Swapped inputs (issue 11, item 7). Γ is not symmetric (Low et al., Med
// Phys 25 (1998) 656: the reference is iterated, the evaluated dose
// searched), so the reference and the evaluated dose the wrong way round
// can turn a failing target into a pass. Where the files say which is which
// (the words of Manufacturer, SeriesDescription and DoseComment, and
// ReferencedRTPlanSequence), a likely swap is a warning on every output
// (console, JSON warnings, CSV, report), naming the evidence; a protocol
// may make it an error. Files that say nothing, or only one of them, give
// no warning: a false alarm on every comparison teaches users to ignore it.

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/phantom"
)

// writeDescribedDose writes a uniform dose of value d0 with the given
// series description (also the DoseComment) on the uniform case's grid.
func writeDescribedDose(t *testing.T, path, desc string, dims [3]int, origin [3]float64, d0 float64, ids dicomio.Identifiers) {
	t.Helper()
	g := testGrid(t, dims, origin, [3]float64{2, 2, 2})
	if err := phantom.Fill(g, phantom.Uniform(d0)); err != nil {
		t.Fatal(err)
	}
	if _, err := dicomio.WriteDose(path, g, ids, dicomio.DoseOptions(desc)); err != nil {
		t.Fatal(err)
	}
}

// swapCase writes a flat reference-sized 2 Gy dose and a larger 2.04 Gy
// dose (the uniform case: Γ = 0.667 either way round), each described as
// asked, and returns their paths.
func swapCase(t *testing.T, ids dicomio.Identifiers, smallDesc, largeDesc string) (small, large string) {
	t.Helper()
	dir := t.TempDir()
	small, large = filepath.Join(dir, "small.dcm"), filepath.Join(dir, "large.dcm")
	writeDescribedDose(t, small, smallDesc, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, 2, ids)
	writeDescribedDose(t, large, largeDesc, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, 2.04, ids)
	return small, large
}

// TestSwappedInputs runs a recalculation as the reference and the planning
// system's dose as the evaluated dose.
func TestSwappedInputs(t *testing.T) {
	// The reference is always the small grid, inside the evaluated one;
	// every file is of one phantom and frame of reference.
	ids := phantomIDs()
	tps, mc := swapCase(t, ids, "planning system dose, Gy", "Monte Carlo recalculation, Gy")
	mcRef, tpsEval := swapCase(t, ids, "Monte Carlo recalculation, Gy", "planning system dose, Gy")

	t.Run("right_way_round", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "r.json")
		r := vgExit(t, exitPass, "compare", "--reference", tps, "--evaluated", mc, "--json", out, "--no-structures")
		if strings.Contains(r.stderr, "swapped") || strings.Contains(strings.Join(readResultJSON(t, out).Warnings, "\n"), "swapped") {
			t.Errorf("a warning of swapped doses on doses the right way round\n%s", r)
		}
	})
	t.Run("swapped_warns_on_every_output", func(t *testing.T) {
		dir := t.TempDir()
		js, cs, rep := filepath.Join(dir, "r.json"), filepath.Join(dir, "r.csv"), filepath.Join(dir, "r.html")
		r := vgExit(t, exitPass, "compare", "--reference", mcRef, "--evaluated", tpsEval, "--json", js, "--csv", cs, "--report", rep, "--no-structures")
		evidence := []string{"look swapped", "reference (small.dcm)", `SeriesDescription "Monte Carlo recalculation, Gy"`,
			"evaluated dose (large.dcm)", `SeriesDescription "planning system dose, Gy"`}
		var warning string
		for _, w := range readResultJSON(t, js).Warnings {
			if strings.Contains(w, "look swapped") {
				warning = w
			}
		}
		for _, want := range evidence {
			if !strings.Contains(warning, want) {
				t.Errorf("JSON warning %q does not name %q", warning, want)
			}
		}
		if !strings.Contains(r.stderr, "warning: "+warning) {
			t.Errorf("console (stderr) lacks the warning\n%s", r)
		}
		f, err := os.Open(cs)
		if err != nil {
			t.Fatal(err)
		}
		rows, err := csv.NewReader(f).ReadAll()
		f.Close()
		if err != nil {
			t.Fatal(err)
		}
		found := false
		for _, row := range rows {
			found = found || row[0] == "warning" && strings.Contains(strings.Join(row, ","), "look swapped")
		}
		if !found {
			t.Errorf("CSV has no warning row for the swap: %v", rows)
		}
		// The report escapes quotes (html/template): look for a phrase.
		if page := string(mustReadFile(t, rep)); !strings.Contains(page, "look swapped") || !strings.Contains(page, "Monte Carlo recalculation") {
			t.Errorf("report lacks the warning")
		}
	})
	t.Run("quiet_still_warns", func(t *testing.T) {
		r := vgExit(t, exitPass, "compare", "--reference", mcRef, "--evaluated", tpsEval, "--no-structures", "-q")
		lines := strings.Split(strings.TrimRight(r.stderr, "\n"), "\n")
		if len(lines) != 2 || !strings.HasPrefix(lines[0], "warning: the reference and evaluated doses look swapped") || !strings.HasPrefix(lines[1], "voxgamma: verdict pass") {
			t.Errorf("quiet: stderr %q, want the swap warning then the outcome line", r.stderr)
		}
	})
	t.Run("protocol_makes_it_an_error", func(t *testing.T) {
		proto := filepath.Join(t.TempDir(), "strict.yaml")
		if err := os.WriteFile(proto, []byte(`name: strict-inputs
criteria: {criteria: 3%/2mm, threshold_percent: 10}
inputs: {swapped_doses: error}
rules:
  - {subject: overall, metric: pass_rate, op: ">=", limit: 95}
`), 0o644); err != nil {
			t.Fatal(err)
		}
		refused(t, compareArgs(mcRef, tpsEval, "", "--protocol", proto), "look swapped", `SeriesDescription "Monte Carlo recalculation, Gy"`, "swapped_doses: error")
		// The same protocol on doses the right way round: evaluated.
		vgExit(t, exitPass, "compare", "--reference", tps, "--evaluated", mc, "--protocol", proto, "-q")
	})
	t.Run("plan_reference_evidence", func(t *testing.T) {
		// The reference says "Monte Carlo" and references no plan; the
		// evaluated dose says nothing in words but references the plan.
		ref := filepath.Join(t.TempDir(), "mc_noplan.dcm")
		if err := os.WriteFile(ref, dropTopSequence(t, mustReadFile(t, mcRef), tgRTPlanSeq), 0o644); err != nil {
			t.Fatal(err)
		}
		_, silent := swapCase(t, ids, "dose, Gy", "dose, Gy")
		out := filepath.Join(t.TempDir(), "r.json")
		if r := vgRun(t, "compare", "--reference", ref, "--evaluated", silent, "--json", out, "--no-structures", "-q"); r.code != exitPass {
			t.Fatalf("exit %d\n%s", r.code, r)
		}
		w := strings.Join(readResultJSON(t, out).Warnings, "\n")
		if !strings.Contains(w, "look swapped") || !strings.Contains(w, "ReferencedRTPlanSequence (300C,0002) names RT Plan") {
			t.Errorf("warnings %q do not name the plan reference as evidence", w)
		}
	})
	// One file speaking alone is no evidence of a swap.
	for _, tc := range []struct{ name, ref, eval string }{
		{"only_reference_speaks", "Monte Carlo recalculation, Gy", "dose, Gy"},
		{"only_evaluated_speaks", "dose, Gy", "planning system dose, Gy"},
		{"both_ways_in_one_file", "TPS dose recalculated, Gy", "planning system dose, Gy"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ref, eval := swapCase(t, ids, tc.ref, tc.eval)
			out := filepath.Join(t.TempDir(), "r.json")
			vgExit(t, exitPass, "compare", "--reference", ref, "--evaluated", eval, "--json", out, "--no-structures", "-q")
			if w := strings.Join(readResultJSON(t, out).Warnings, "\n"); strings.Contains(w, "swapped") {
				t.Errorf("false alarm: %s", w)
			}
		})
	}
}
