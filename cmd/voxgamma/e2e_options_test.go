package main

import (
	"path/filepath"
	"testing"
)

// TestCriteriaNotations: every accepted notation of the criteria ends in
// the JSON's criteria block as the numbers written (README: "3%/2mm", also
// "3%/2 mm", "2%/1mm", "2.5%/1.5mm"), with the search distance at 3 × DTA
// (README: common practice) when --search is not given.
func TestCriteriaNotations(t *testing.T) {
	c := newUniformCase(t, 2, 1.01)
	for i, tc := range []struct {
		notation  string
		dose, dta float64
		label     string
	}{
		{"3%/2mm", 3, 2, "3%/2mm global"},
		{"3%/2 mm", 3, 2, "3%/2mm global"},
		{"2%/1mm", 2, 1, "2%/1mm global"},
		{"2.5%/1.5mm", 2.5, 1.5, "2.5%/1.5mm global"},
	} {
		out := filepath.Join(c.dir, "r"+string(rune('a'+i))+".json")
		r := vgRun(t, "compare", "--reference", c.ref, "--evaluated", c.eval, "--criteria", tc.notation, "--json", out, "--quiet")
		if r.code != exitPass && r.code != exitRuleFail {
			t.Fatalf("%q: %s", tc.notation, r)
		}
		got := readResultJSON(t, out).Criteria
		if got.DosePercent != tc.dose || got.DTAmm != tc.dta || got.SearchMM != 3*tc.dta || got.Label != tc.label {
			t.Errorf("--criteria %q: dose_percent %g dta_mm %g search_mm %g label %q; want %g, %g, %g, %q",
				tc.notation, got.DosePercent, got.DTAmm, got.SearchMM, got.Label, tc.dose, tc.dta, 3*tc.dta, tc.label)
		}
	}
}

// TestDefaultCriteria: with no option the criteria block is TG-218's
// recommendation (Miften et al., Med Phys 45 (2018) e53): 3 %/2 mm, global
// normalisation to the reference maximum, 10 % low-dose threshold; search
// 3 × DTA = 6 mm (common practice, no source); the fast search.
func TestDefaultCriteria(t *testing.T) {
	c := newUniformCase(t, 2, 1.01)
	out := filepath.Join(c.dir, "r.json")
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--json", out, "--quiet")
	res := readResultJSON(t, out)
	got := res.Criteria
	if got.DosePercent != 3 || got.DTAmm != 2 || got.Normalisation != "global" || got.ThresholdPercent != 10 ||
		got.SearchMM != 6 || got.NormDoseSource != "reference maximum" || got.Method != "fast" || got.Label != "3%/2mm global" {
		t.Errorf("default criteria %+v, want TG-218's 3 %%/2 mm global, 10 %% threshold, search 6 mm, normalised to the reference maximum", got)
	}
	// The reference maximum is the flat 2 Gy as stored: within
	// quantBound of 2 Gy.
	if d := got.NormDoseGy - 2; d < -c.refFile.quantBound() || d > c.refFile.quantBound() {
		t.Errorf("norm_dose_gy %g, want the reference maximum 2 Gy ± %.2g", got.NormDoseGy, c.refFile.quantBound())
	}
	if res.Verdict != "pass" {
		t.Errorf("verdict %q: Γ = 0.01/0.03 = 0.33 everywhere passes TG-218's limits", res.Verdict)
	}
	if len(res.Rules) == 0 {
		t.Errorf("no rule outcomes: the default protocol tg218 has three rules")
	}
	if p, ok := res.Protocol.(map[string]any); !ok || p["name"] != "tg218" {
		t.Errorf("protocol %v, want the tg218 preset in full", res.Protocol)
	}
}
