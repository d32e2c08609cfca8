package main

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/metaimage"
)

// TestInterpolationOption runs compare with every --interpolation on a
// linear dose stored on a coarse (3 × 3 × 2.5 mm) evaluated grid, shifted by
// s along the oblique direction n. Every interpolation reproduces a linear
// dose exactly (the natural cubic spline, trilinear and the simplex
// interpolant all do), so each must give, at every interior reference
// voxel, the closed form Γ² = s²/(Δd² + (ΔD/g)²) (derivation from the
// definition of Low et al., Med Phys 25 (1998) 656: gamma/gamma_test.go
// TestLinearGradientShift); the JSON's criteria and the review page name
// the interpolation; the default is cubic-bspline; the coarse-grid warning
// (3 mm is more than a third of the 2 mm DTA) is in the JSON, the review
// page and on stderr; an unknown name is refused with one line that lists
// the names.
func TestInterpolationOption(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	ref := writeTestDose(t, filepath.Join(dir, "ref.dcm"), rampRefDims, rampRefOrigin, [3]float64{2, 2, 2}, rampDose, ids)
	const s = 1.3
	eval := writeTestDose(t, filepath.Join(dir, "eval.dcm"), [3]int{19, 19, 20}, [3]float64{-26.2, -25.9, -22.8}, [3]float64{3, 3, 2.5},
		func(p [3]float64) float64 { return rampDose(p) - rampG*s }, ids)
	dd := cfDelta * cfNorm
	want := shiftGamma(s, cfDTA, dd, rampG)
	// Stored doses are within quantBound of the analytic ones, which moves
	// Γ by at most their sum over ΔD (TestCompareLinearGradientShift).
	tol := (ref.quantBound()+eval.quantBound())/dd + 2e-5
	for _, name := range []string{"", "cubic-bspline", "trilinear", "linear-simplex"} {
		t.Run("interpolation "+name, func(t *testing.T) {
			out := filepath.Join(dir, "r"+name+".json")
			gm := filepath.Join(dir, "g"+name+".mha")
			page := filepath.Join(dir, "p"+name+".html")
			args := []string{"compare", "--reference", ref.path, "--evaluated", eval.path, "--criteria", "3%/2mm",
				"--norm-dose", "10", "--threshold", "0", "--json", out, "--gamma-map", gm, "--report", page}
			if name != "" {
				args = append(args, "--interpolation", name)
			}
			r := vgRun(t, args...)
			if r.code != exitPass && r.code != exitRuleFail {
				t.Fatalf("%s", r)
			}
			res := readResultJSON(t, out)
			wantName := name
			if wantName == "" {
				wantName = "cubic-bspline"
			}
			if res.Criteria.Interpolation != wantName {
				t.Errorf("criteria.interpolation %q, want %q", res.Criteria.Interpolation, wantName)
			}
			// Given on the command line, it is a choice beside the protocol.
			if res.Choices.Interpolation != name {
				t.Errorf("choices.interpolation %q, want %q", res.Choices.Interpolation, name)
			}
			g, err := metaimage.Read(gm)
			if err != nil {
				t.Fatal(err)
			}
			checked := 0
			for n, v := range g.Data {
				i, j, k := g.IJK(n)
				// Interior voxels: the search ball (6 mm) stays in the
				// evaluated grid ([-26.2, 27.8] × [-25.9, 28.1] × [-22.8, 24.7]).
				if i < 2 || j < 2 || k < 2 || i > 13 || j > 13 || k > 9 {
					continue
				}
				if math.Abs(float64(v)-want) > tol {
					t.Fatalf("voxel (%d,%d,%d): Γ = %.7f, closed form %.7f (tolerance %.2g)", i, j, k, v, want, tol)
				}
				checked++
			}
			if checked < 500 {
				t.Fatalf("only %d voxels checked", checked)
			}
			warned := false
			for _, w := range res.Warnings {
				if strings.Contains(w, "coarse for the 2 mm DTA") && strings.Contains(w, "Low and Dempsey") && strings.Contains(w, "from memory") {
					warned = true
				}
			}
			if !warned {
				t.Errorf("no coarse-grid warning in %q", res.Warnings)
			}
			if !strings.Contains(r.stderr, "coarse for the 2 mm DTA") {
				t.Errorf("no coarse-grid warning on stderr:\n%s", r)
			}
			html, err := os.ReadFile(page)
			if err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(string(html), "coarse for the 2 mm DTA") || !strings.Contains(string(html), "("+wantName+")") {
				t.Errorf("the review page does not name the interpolation %q and the coarse-grid warning", wantName)
			}
		})
	}
	r := vgExit(t, exitError, "compare", "--reference", ref.path, "--evaluated", eval.path, "--interpolation", "bicubic", "--json", filepath.Join(dir, "bad.json"))
	oneErrorLine(t, r, "--interpolation", "bicubic", "cubic-bspline", "trilinear", "linear-simplex")
}

// TestNoCoarseWarningOnFineGrid: an evaluated grid of 1 mm with a 3 mm DTA
// is at a third of the DTA: no coarse-grid warning.
func TestNoCoarseWarningOnFineGrid(t *testing.T) {
	c := newUniformCase(t, 2, 1.01)
	out := filepath.Join(c.dir, "r.json")
	// newUniformCase's grids are 2 mm: a 6 mm DTA puts them at a third.
	vgRun(t, "compare", "--reference", c.ref, "--evaluated", c.eval, "--criteria", "3%/6mm", "--search", "20", "--json", out, "--quiet")
	res := readResultJSON(t, out)
	for _, w := range res.Warnings {
		if strings.Contains(w, "coarse") {
			t.Errorf("warning %q on a grid at a third of the DTA", w)
		}
	}
}
