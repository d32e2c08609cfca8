package main

// Bad input through the real command (docs/bad-input.md): criteria and
// options out of range, outputs that cannot or must not be written.

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// ---------------------------------------------------------------------------
// Criteria and options.

// TestBadInputOptions: criteria and options out of range. Γ needs Δd > 0
// and ΔD > 0 (Low et al., Med Phys 25 (1998) 656: they divide); the
// low-dose threshold is a percentage of the normalisation dose, from 0 to
// below 100 (README, compare --help); a normalisation dose and a search
// distance are positive lengths and doses. Each refusal names the option.
func TestBadInputOptions(t *testing.T) {
	f := newBadFixture(t)
	base := compareArgs(f.ref, f.eval, f.rs)
	// 400 digits: a number the regular expression accepts but float64
	// cannot hold (it parses as +Inf).
	huge := "1" + strings.Repeat("0", 400)
	for _, tc := range []struct {
		name  string
		opts  []string
		cause []string
	}{
		{"criteria_DTA_zero", []string{"--criteria", "3%/0mm"}, []string{"--criteria", "3%/0mm", "DTA must be above 0 mm"}},
		{"criteria_DTA_negative", []string{"--criteria", "3%/-2mm"}, []string{"--criteria", "3%/-2mm"}},
		{"criteria_dose_zero", []string{"--criteria", "0%/2mm"}, []string{"--criteria", "0%/2mm", "dose criterion must be above 0 %"}},
		{"criteria_dose_negative", []string{"--criteria", "-3%/2mm"}, []string{"--criteria", "-3%/2mm"}},
		{"criteria_no_units", []string{"--criteria", "3/2"}, []string{"--criteria", `"3/2"`, "want the form DOSE%/DTAmm"}},
		{"criteria_NaN", []string{"--criteria", "NaN%/2mm"}, []string{"--criteria", "NaN%/2mm"}},
		{"criteria_dose_overflows", []string{"--criteria", huge + "%/2mm"}, []string{"--criteria"}},
		{"criteria_DTA_overflows", []string{"--criteria", "3%/" + huge + "mm"}, []string{"--criteria"}},
		{"threshold_100", []string{"--threshold", "100"}, []string{"--threshold 100", "want a percentage from 0 to below 100"}},
		{"threshold_150", []string{"--threshold", "150"}, []string{"--threshold 150"}},
		{"threshold_negative", []string{"--threshold", "-1"}, []string{"--threshold -1"}},
		{"threshold_NaN", []string{"--threshold", "NaN"}, []string{"--threshold NaN"}},
		{"norm_dose_zero", []string{"--norm-dose", "0"}, []string{"--norm-dose 0", "want a dose above 0 Gy"}},
		{"norm_dose_negative", []string{"--norm-dose", "-2"}, []string{"--norm-dose -2"}},
		{"norm_dose_NaN", []string{"--norm-dose", "NaN"}, []string{"--norm-dose NaN"}},
		{"norm_dose_Inf", []string{"--norm-dose", "Inf"}, []string{"--norm-dose"}},
		{"search_zero", []string{"--search", "0"}, []string{"--search 0", "want a distance above 0 mm"}},
		{"search_negative", []string{"--search", "-6"}, []string{"--search -6"}},
		{"search_NaN", []string{"--search", "NaN"}, []string{"--search NaN"}},
		{"search_Inf", []string{"--search", "Inf"}, []string{"--search"}},
		{"workers_negative", []string{"--workers", "-1"}, []string{"--workers -1"}},
		{"subgrid_step_negative", []string{"--subgrid", "PTV_1", "--subgrid-step", "-0.5"}, []string{"--subgrid-step -0.5"}},
		{"isodose_zero", []string{"--isodose", "0"}, []string{"--isodose", "isodose level 0 %"}},
		{"isodose_above_100", []string{"--isodose", "150"}, []string{"--isodose", "isodose level 150 %"}},
		{"v_dose_negative", []string{"--v-dose", "-1"}, []string{"--v-dose -1"}},
		{"min_cluster_negative", []string{"--min-cluster", "-1"}, []string{"--min-cluster -1"}},
		{"kind_unknown", []string{"--kind", "PTV*=tumour"}, []string{"--kind", "PTV*=tumour"}},
		{"protocol_unknown", []string{"--protocol", "no-such-protocol"}, []string{"--protocol", "no-such-protocol"}},
		{"option_unknown", []string{"--tolerance", "3"}, []string{"--tolerance"}},
		{"interpolation_unknown", []string{"--interpolation", "bicubic"}, []string{"--interpolation", `"bicubic"`, "cubic-bspline, trilinear, linear-simplex"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			refused(t, append(append([]string{}, base...), tc.opts...), tc.cause...)
		})
	}
}

// unwritableDir returns a folder the running process cannot create files
// in: a folder without write permission, or, for root (whom permission
// bits do not stop: CAP_DAC_OVERRIDE, capabilities(7)), /sys, where no
// file can be created (sysfs). Skipped when neither works.
func unwritableDir(t *testing.T) string {
	t.Helper()
	cands := []string{}
	d := t.TempDir()
	if err := os.Chmod(d, 0o555); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.Chmod(d, 0o755) })
	cands = append(cands, d, "/sys")
	for _, c := range cands {
		probe, err := os.CreateTemp(c, "probe-*")
		if err != nil {
			return c
		}
		probe.Close()
		os.Remove(probe.Name())
	}
	t.Skip("no unwritable folder found (running as root, and /sys is writable)")
	return ""
}

// TestBadInputOutputs: outputs that cannot or must not be written. Every
// output is checked before any computation (job.Outputs.Check), so a
// refusal leaves nothing behind and never touches an input.
func TestBadInputOutputs(t *testing.T) {
	f := newBadFixture(t)
	base := compareArgs(f.ref, f.eval, f.rs)
	t.Run("unwritable_folder", func(t *testing.T) {
		dir := unwritableDir(t)
		p := filepath.Join(dir, "vg-result.json")
		r := vgRun(t, append(append([]string{}, base...), "--json", p)...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "output "+p, "directory "+dir+" is not writable")
		if _, err := os.Stat(p); err == nil {
			t.Errorf("%s was written", p)
		}
	})
	inputs := map[string]string{"reference": f.ref, "evaluated": f.eval, "structures": f.rs}
	sums := map[string][32]byte{}
	for _, p := range inputs {
		sums[p] = sha256File(t, p)
	}
	// An alias of the reference: a symbolic link to it, and the same path
	// spelled through "..".
	link := filepath.Join(t.TempDir(), "alias.json")
	if err := os.Symlink(f.ref, link); err != nil {
		t.Fatal(err)
	}
	dotted := filepath.Join(f.dir, "..", filepath.Base(f.dir), filepath.Base(f.eval))
	for _, tc := range []struct {
		name, flag, path string
	}{
		{"json_is_reference", "--json", f.ref},
		{"gamma_map_is_evaluated", "--gamma-map", f.eval},
		{"csv_is_structures", "--csv", f.rs},
		{"difference_map_is_reference_via_dotdot", "--difference-map", filepath.Join(f.dir, "..", filepath.Base(f.dir), filepath.Base(f.ref))},
		{"report_is_symlink_to_reference", "--report", link},
		{"json_is_evaluated_via_dotdot", "--json", dotted},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for _, force := range []bool{false, true} {
				args := append(append([]string{}, base...), tc.flag, tc.path)
				if force {
					args = append(args, "--force")
				}
				r := vgRun(t, args...)
				if r.code != exitError {
					t.Errorf("force %v: exit %d, want 1\n%s", force, r.code, r)
					continue
				}
				oneErrorLine(t, r, "output "+tc.path, "is an input file")
			}
			for _, p := range inputs {
				if sha256File(t, p) != sums[p] {
					t.Errorf("input %s was changed", p)
				}
			}
		})
	}
	t.Run("output_named_twice", func(t *testing.T) {
		out := t.TempDir()
		p := filepath.Join(out, "r.out")
		r := vgRun(t, append(append([]string{}, base...), "--json", p, "--csv", p)...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, p, "named twice")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left: %v", names)
		}
	})
	t.Run("output_is_a_folder", func(t *testing.T) {
		dir := t.TempDir()
		r := vgRun(t, append(append([]string{}, base...), "--json", dir, "--force")...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "output "+dir+" is a directory")
	})
}
