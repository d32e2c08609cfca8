package main

// Bad input through the real command (docs/bad-input.md): valid inputs
// that leave nothing to compare, search distances too short to find Γ,
// outputs that fail after the comparison, detector points that cannot be
// read.

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// ---------------------------------------------------------------------------
// Inputs that leave nothing to compare.

// TestBadInputNothingToCompare: valid files whose comparison evaluates no
// point. The low-dose threshold is a percentage of the normalisation dose
// (TG-218, Miften et al., Med Phys 45 (2018) e53); a point outside the
// evaluated grid is not evaluated (gamma/doc.go). A comparison of nothing
// has no pass rate and must not pass (README: "nothing evaluated exits 1").
func TestBadInputNothingToCompare(t *testing.T) {
	f := newBadFixture(t)
	t.Run("no_point_above_threshold", func(t *testing.T) {
		// --norm-dose 100 Gy: the threshold is 10 Gy, above the 2 Gy
		// reference everywhere. 100 Gy is 50 × the reference maximum, so
		// it is refused as implausible unless accepted explicitly (see
		// TestNormDoseBand); accepted, nothing is evaluated.
		refused(t, compareArgs(f.ref, f.eval, f.rs, "--norm-dose", "100", "--accept-norm-dose"), "nothing was evaluated")
	})
	t.Run("evaluated_grid_elsewhere", func(t *testing.T) {
		// The evaluated grid 22×22×18 voxels of 2 mm at x from 179 to 221
		// mm: 168 mm from the reference grid (x from −11 to 11 mm).
		far := corpus(t, "evaluated_grid_elsewhere.dcm")
		refused(t, compareArgs(f.ref, far, ""), "the evaluated grid covers none of the reference high-dose region", filepath.Base(far))
	})
	t.Run("evaluated_grid_partly_outside", func(t *testing.T) {
		// The evaluated grid covers x ≤ 1 mm only (centres −21 to 1):
		// the reference voxels at x = 3 to 11 mm, 5 of 12 columns, lie
		// outside it. Not bad input: evaluated, with a warning and the
		// count of points outside (gamma/doc.go: "counted separately,
		// never passed").
		half := corpus(t, "evaluated_grid_partly_outside.dcm")
		out := filepath.Join(t.TempDir(), "r.json")
		r := vgRun(t, compareArgs(f.ref, half, "", "--no-structures", "--json", out)...)
		// Every evaluated point passes (Γ = 0.667), but 5 of 12 columns
		// were never compared: coverage 58 % < 99.5 %, a rule of every
		// preset: exit 2 (docs/bad-input.md, "Ways a pass could be
		// wrong").
		if r.code != exitRuleFail {
			t.Fatalf("exit %d, want 2 (coverage below 99.5 %%)\n%s", r.code, r)
		}
		res := readResultJSON(t, out)
		if want := 5 * 12 * 8; res.Overall.OutsideEvaluated != want || res.Overall.Evaluated != 7*12*8 {
			t.Errorf("outside %d, evaluated %d; want %d and %d", res.Overall.OutsideEvaluated, res.Overall.Evaluated, want, 7*12*8)
		}
		for _, w := range []string{"lie outside the evaluated grid: not evaluated", "of the reference high-dose region"} {
			found := false
			for _, x := range res.Warnings {
				found = found || strings.Contains(x, w)
			}
			if !found {
				t.Errorf("no warning %q in the result: %q", w, res.Warnings)
			}
			if !strings.Contains(r.stderr, w) {
				t.Errorf("no warning %q on stderr:\n%s", w, r)
			}
		}
		t.Logf("exit %d with %d of %d reference points above the threshold outside the evaluated grid, verdict %q (pass rates count evaluated points only)",
			r.code, res.Overall.OutsideEvaluated, res.Overall.OutsideEvaluated+res.Overall.Evaluated, res.Verdict)
	})
	t.Run("all_zero_reference", func(t *testing.T) {
		zero := corpus(t, "all_zero_reference.dcm")
		refused(t, compareArgs(zero, f.eval, ""), "no positive value", filepath.Base(zero))
	})
}

// TestBadInputSearchBelowGridSpacing: a search distance R too short to
// find Γ. Checked on the closed form of the shifted linear field
// (NOTES.md; derivation in e2e_helpers_test.go, shiftGamma): reference
// D = a + g·(n·x), evaluated the same field shifted by s = 3 mm along n,
// 3 %/2 mm global with D_norm = 10 Gy (ΔD = 0.3 Gy, ΔD/g = 3 mm). Every
// point has Γ = s/√(Δd² + (ΔD/g)²) = 3/√13 = 0.832 and passes; the minimum
// lies t = s·Δd²/(Δd² + (ΔD/g)²) = 12/13 = 0.923 mm from the point, along
// n.
//
//   - --search 1 mm on a 2 mm evaluated grid: below the grid spacing.
//     voxgamma refuses it (analysis/run.go, since commit 2277b3b).
//   - --search 0.6 mm on a 0.5 mm evaluated grid: not below the spacing,
//     but below the DTA and below t. No Γ below R/Δd = 0.3 lies within
//     0.6 mm, so every point is "capped": failed, and reported as Γ = 0.3
//     (gamma/doc.go). The truth is 100 % pass. A search distance below Δd
//     can miss a passing point (a minimum with Γ ≤ 1 lies within Γ·Δd ≤ Δd
//     of the point, since the spatial term alone is at most Γ), so R ≥ Δd
//     is what guarantees that every pass is found; below it voxgamma must
//     refuse, or at least warn, and must never report a failed point with
//     Γ ≤ 1.
//   - The same at 3 %/3 mm under the epid-invivo-example protocol (mean Γ
//     ≤ 0.5 inside the 50 % isodose): the truth is Γ = 3/√(9 + 9) = 0.707
//     everywhere, so the rule is not met (exit 2); with --search 0.6 every
//     point is capped and reported as Γ = 0.2, and the rule is met: a
//     false pass.
func TestBadInputSearchBelowGridSpacing(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	const s = 3.0
	shifted := func(p [3]float64) float64 { return rampDose(p) - rampG*s }
	ref := filepath.Join(dir, "RD_ref.dcm")
	writeTestDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, rampDose, ids)
	coarse, fine := filepath.Join(dir, "RD_eval_2mm.dcm"), filepath.Join(dir, "RD_eval_0.5mm.dcm")
	writeTestDose(t, coarse, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, shifted, ids)
	// 0.5 mm grid over x, y from −12.25 to 12.25 mm and z from −8.25 to
	// 8.25 mm: it covers the reference grid and a search of 1.25 mm.
	writeTestDose(t, fine, [3]int{50, 50, 34}, [3]float64{-12.25, -12.25, -8.25}, [3]float64{0.5, 0.5, 0.5}, shifted, ids)
	want := shiftGamma(s, cfDTA, cfDelta*cfNorm, rampG)
	if math.Abs(want-3/math.Sqrt(13)) > 1e-12 {
		t.Fatalf("closed form %v, want 3/√13", want)
	}
	// The truth first: with the default search (3 × DTA = 6 mm) every
	// point passes with Γ = 0.832 (quantisation of the files moves Γ by
	// less than 0.002: DoseGridScaling ≤ 12 Gy/65535, over ΔD = 0.3 Gy).
	for _, eval := range []string{coarse, fine} {
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitPass, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--criteria", "3%/2mm", "--norm-dose", "10", "--json", out, "--quiet")
		res := readResultJSON(t, out)
		checkNear(t, filepath.Base(eval)+" Γ max", res.Overall.GammaMax, want, 0.002)
		checkNear(t, filepath.Base(eval)+" pass rate", res.Overall.PassRate, 100, 0)
	}
	for _, tc := range []struct {
		name, eval, search string
	}{
		{"search_1mm_on_2mm_grid", coarse, "1"},
		{"search_0.6mm_below_DTA_on_0.5mm_grid", fine, "0.6"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "r.json")
			r := vgRun(t, "compare", "--reference", ref, "--evaluated", tc.eval, "--criteria", "3%/2mm", "--norm-dose", "10",
				"--search", tc.search, "--json", out)
			if r.code == exitError {
				// Refused: the line must name the option.
				oneErrorLine(t, r, "--search")
				if _, err := os.Stat(out); err == nil {
					t.Errorf("refused, but %s was written", out)
				}
				return
			}
			res := readResultJSON(t, out)
			t.Logf("--search %s: exit %d, evaluated %d, passed %d, capped %d, Γ mean %v max %v (closed form %.3f, all pass), warnings %q",
				tc.search, r.code, res.Overall.Evaluated, res.Overall.Passed, res.Overall.Capped,
				jsonNum(res.Overall.GammaMean), jsonNum(res.Overall.GammaMax), want, res.Warnings)
			if res.Overall.Capped > 0 && jsonNum(res.Overall.GammaMax) <= 1 {
				t.Errorf("BUG: %d points capped at the search distance are failed but reported with Γ ≤ 1 (Γ max %v): the pass rate %v %% and the Γ statistics contradict each other",
					res.Overall.Capped, jsonNum(res.Overall.GammaMax), jsonNum(res.Overall.PassRate))
			}
			warned := false
			for _, w := range res.Warnings {
				// Not the note that the criteria differ from the protocol's.
				warned = warned || strings.Contains(w, "search") && !strings.HasPrefix(w, "criteria differ from protocol")
			}
			if pr := jsonNum(res.Overall.PassRate); pr != 100 && !warned {
				t.Errorf("BUG: --search %s mm (DTA 2 mm) gives a pass rate of %v %% where every point passes (Γ = %.3f), without a warning (exit %d)",
					tc.search, pr, want, r.code)
			}
		})
	}
}

// TestBadInputSearchFalsePass: the third case of
// TestBadInputSearchBelowGridSpacing, under a protocol whose rules are on
// Γ statistics.
func TestBadInputSearchFalsePass(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	const s = 3.0
	ref, fine := filepath.Join(dir, "RD_ref.dcm"), filepath.Join(dir, "RD_eval_0.5mm.dcm")
	writeTestDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, rampDose, ids)
	writeTestDose(t, fine, [3]int{50, 50, 34}, [3]float64{-12.25, -12.25, -8.25}, [3]float64{0.5, 0.5, 0.5},
		func(p [3]float64) float64 { return rampDose(p) - rampG*s }, ids)
	// 3 %/3 mm, D_norm 10 Gy: ΔD/g = 3 mm, Γ = 3/√18 = 0.707 (shiftGamma).
	want := shiftGamma(s, 3, cfDelta*cfNorm, rampG)
	args := []string{"compare", "--reference", ref, "--evaluated", fine, "--protocol", "epid-invivo-example", "--norm-dose", "10", "--quiet"}
	out := filepath.Join(t.TempDir(), "truth.json")
	vgExit(t, exitRuleFail, append(args, "--json", out)...)
	iso := resultROI(t, readResultJSON(t, out), "isodose 50% of 10 Gy")
	checkNear(t, "50 % isodose Γ mean (default search 9 mm)", iso.GammaMean, want, 0.002)
	r := vgRun(t, append(args, "--search", "0.6", "--json", filepath.Join(t.TempDir(), "r.json"))...)
	switch r.code {
	case exitError:
		oneErrorLine(t, r, "--search")
	case exitPass:
		t.Errorf("BUG: --search 0.6 mm turns a failing comparison (mean Γ %.3f > 0.5) into a pass: every point capped and reported as Γ = 0.2\n%s", want, r)
	}
}

// TestBadInputPartialOutput: an error met while writing the outputs must
// not leave some of them behind (README: exit 1 "an output that could not
// be written"; job.Write writes JSON, CSV, maps, report in turn). The
// reference dose has no StudyInstanceUID (0020,000D) and no
// FrameOfReferenceUID (0020,0052): readable (the missing frame is a
// warning, dicomio/check.go), but an RT Dose map written with its
// identifiers lacks type 1 attributes (PS3.3 C.7.2.1 StudyInstanceUID,
// C.7.4.1 FrameOfReferenceUID), which dicomio.WriteDose refuses.
func TestBadInputPartialOutput(t *testing.T) {
	f := newBadFixture(t)
	ref := corpus(t, "no_StudyInstanceUID_no_FrameOfReferenceUID.dcm")
	out := t.TempDir()
	r := vgRun(t, withOutputs(compareArgs(ref, f.eval, "", "--quiet", "--no-structures"), out)...)
	switch r.code {
	case exitError:
		oneErrorLine(t, r, "gamma.dcm")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("BUG: exit 1, yet the outputs written before the failure are left behind: %v\n%s", names, r)
		}
	case exitPass:
		// Writing the map anyway (with new UIDs, say) is a fix too: then
		// every output must be there.
		if names := testDirNames(t, out); len(names) != 5 {
			t.Errorf("exit 0 with outputs %v, want all five", names)
		}
	default:
		t.Errorf("exit %d\n%s", r.code, r)
	}
}

// TestBadInputReferencePoints: a detector array's measured points
// (--reference-points, CSV with the header x_mm,y_mm,z_mm,dose_gy,
// analysis/load.go) that cannot be read. The CSV syntax is RFC 4180's as
// encoding/csv reads it (a quote may only open a quoted field).
func TestBadInputReferencePoints(t *testing.T) {
	f := newBadFixture(t)
	dir := t.TempDir()
	csvFile := func(name, content string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	for _, tc := range []struct {
		name, content string
		cause         []string
	}{
		// Found by FuzzParsePoints (analysis/testdata/fuzz/FuzzParsePoints):
		// a CSV syntax error in a data row.
		{"bare_quote_in_row", "x_mm,y_mm,z_mm,dose_gy\n0\"0000000\n", []string{"bare_quote.csv", "line 2"}},
		{"NaN_dose", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,NaN\n", []string{"NaN_dose.csv line 2: dose_gy \"NaN\" is not a finite number"}},
		{"negative_dose", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,-1\n", []string{"negative_dose.csv line 2: negative dose -1 Gy"}},
		{"three_fields", "x_mm,y_mm,z_mm,dose_gy\n0,0,0\n", []string{"three_fields.csv line 2: 3 fields, want 4"}},
		{"wrong_header", "x,y,z,dose\n0,0,0,1\n", []string{"wrong_header.csv: header \"x,y,z,dose\", want x_mm,y_mm,z_mm,dose_gy"}},
		{"no_points", "x_mm,y_mm,z_mm,dose_gy\n", []string{"no_points.csv: no points after the header"}},
		// Points 500 mm away from the evaluated grid: nothing evaluated.
		{"all_outside_evaluated_grid", "x_mm,y_mm,z_mm,dose_gy\n500,0,0,2\n501,0,0,2\n", []string{"nothing was evaluated"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			file := strings.TrimSuffix(tc.name, "_in_row") + ".csv"
			p := csvFile(file, tc.content)
			out := t.TempDir()
			r := vgRun(t, "compare", "--reference-points", p, "--evaluated", f.eval, "--json", filepath.Join(out, "r.json"), "--csv", filepath.Join(out, "r.csv"))
			if r.code != exitError {
				t.Fatalf("exit %d, want 1\n%s", r.code, r)
			}
			oneErrorLine(t, r, tc.cause...)
			if strings.Contains(r.stderr, "internal error") {
				t.Errorf("BUG: %s: the command panicked (recovered as an internal error): %s", file, r.stderr)
			}
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}
	t.Run("points_with_structures", func(t *testing.T) {
		p := csvFile("points.csv", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,2\n")
		out := t.TempDir()
		r := vgRun(t, "compare", "--reference-points", p, "--evaluated", f.eval, "--structures", f.rs, "--json", filepath.Join(out, "r.json"))
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "structures cannot be used with reference points")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder: %v", names)
		}
	})
	t.Run("points_with_gamma_map", func(t *testing.T) {
		p := csvFile("points2.csv", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,2\n")
		refused(t, []string{"compare", "--reference-points", p, "--evaluated", f.eval}, "--gamma-map, --difference-map, --report and --report-pdf need a reference grid")
	})
}
