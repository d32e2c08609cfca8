package main

// End-to-end tests of doses given in parts (issue 18, item 1): per-beam
// doses summed, per-fraction doses scaled only when asked, through the real
// command. Invented phantom data only.

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"voxgamma/dicomio"
	"voxgamma/phantom"
)

// writePartDose writes a dose of the given DoseSummationType (with the
// fraction group and beam it names) filled with f.
func writePartDose(t *testing.T, path string, dims [3]int, origin, spacing [3]float64, f phantom.DoseFunc, ids dicomio.Identifiers,
	summation string, fg, beam int, mod func(*dicomio.WriteOptions)) testDose {
	t.Helper()
	g := testGrid(t, dims, origin, spacing)
	if err := phantom.Fill(g, f); err != nil {
		t.Fatal(err)
	}
	opt := dicomio.DoseOptions("invented " + strings.ToLower(summation) + " dose, Gy")
	opt.DoseSummationType, opt.ReferencedFractionGroupNumber, opt.ReferencedBeamNumber = summation, fg, beam
	if mod != nil {
		mod(&opt)
	}
	info, err := dicomio.WriteDose(path, g, ids, opt)
	if err != nil {
		t.Fatal(err)
	}
	mx, _ := g.Max()
	return testDose{path: path, grid: g, info: info, max: float64(mx)}
}

// beamCase is three uniform beam doses (0.7 + 0.8 + 0.5 = 2 Gy) on the
// 12 × 12 × 8 reference grid, in a folder of their own, and a plan dose of
// k × 2 Gy on a larger grid.
type beamCase struct {
	dir, beams, eval string
	parts            []string
	ids              dicomio.Identifiers
}

var beamDoses = []float64{0.7, 0.8, 0.5}

func newBeamCase(t *testing.T, k float64) beamCase {
	t.Helper()
	dir := t.TempDir()
	c := beamCase{dir: dir, beams: filepath.Join(dir, "beams"), eval: filepath.Join(dir, "RD_mc.dcm"), ids: phantomIDs()}
	if err := os.Mkdir(c.beams, 0o755); err != nil {
		t.Fatal(err)
	}
	for b, d := range beamDoses {
		p := filepath.Join(c.beams, "RD_beam"+string(rune('1'+b))+".dcm")
		writePartDose(t, p, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(d), c.ids, "BEAM", 1, b+1, nil)
		c.parts = append(c.parts, p)
	}
	writePartDose(t, c.eval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2*k), c.ids, "PLAN", 0, 0, nil)
	return c
}

// Per-beam reference doses given as files, and as their folder, are
// summed. Closed form (uniform scale in a flat region, domain notes): the
// beams sum to D_r = 2 Gy, the evaluated dose is 1.02 × that, so with
// 3 %/2 mm global normalised to the reference maximum 2 Gy, Γ = |k − 1|·D_r
// /(0.03·D_r) = 0.02/0.03 = 0.667 at every point; all pass.
func TestSummedBeamsThroughCompare(t *testing.T) {
	c := newBeamCase(t, 1.02)
	args := func(ref ...string) []string {
		a := []string{"compare"}
		for _, r := range ref {
			a = append(a, "--reference", r)
		}
		return append(a, "--evaluated", c.eval, "--no-structures")
	}
	for name, ref := range map[string][]string{
		"files":              {c.parts[2], c.parts[0], c.parts[1]},
		"folder":             {c.beams},
		"files in any order": {c.parts[1], c.parts[2], c.parts[0]},
	} {
		t.Run(name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "r.json")
			r := vgExit(t, exitPass, append(args(ref...), "--json", out)...)
			mustContain(t, "stderr", r.stderr, "the reference dose is the sum of 3 BEAM doses (beams 1, 2, 3) and the evaluated dose is PLAN")
			res := readResultJSON(t, out)
			if len(res.DoseSums) != 1 {
				t.Fatalf("dose_sums %+v", res.DoseSums)
			}
			s := res.DoseSums[0]
			if s.Role != "reference" || s.Parts != 3 || s.SummationType != "BEAM" || dicomio.FormatNumbers(s.Beams) != "1, 2, 3" || s.Resampled || s.Grid == nil || s.Grid.Dims != [3]int{12, 12, 8} {
				t.Errorf("dose_sums[0] %+v", s)
			}
			checkNear(t, "sum maximum", &s.Grid.MaxDoseGy, 2, 1e-4)
			parts := 0
			for _, in := range res.Inputs {
				if in.Role == "reference" {
					parts++
					if in.Part != parts || !strings.Contains(in.Description, "part ") {
						t.Errorf("reference input %d: part %d, %q", parts, in.Part, in.Description)
					}
				}
			}
			if parts != 3 {
				t.Errorf("%d reference inputs, want the 3 beams", parts)
			}
			gamma := 0.02 / 0.03
			checkGammaStats(t, "overall", res.Overall, repeat(gamma, 12*12*8), 1e-3)
		})
	}
}

func repeat(v float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = v
	}
	return out
}

// Beams on different grids are resampled onto a common grid, with a
// warning that says how. Beam 2's grid is two voxels wider on each side
// (14 × 14 × 10 on the same 2 mm lattice): the common grid is its grid;
// inside beams 1 and 3 (1152 voxels) the sum is 2 Gy and Γ = 0.667 as
// above; in the 808 voxels of the rim only beam 2's 0.8 Gy (0 Gy outside
// the other grids), so |2.04 − 0.8|/0.06 ≫ 3 and Γ is capped at the search
// distance over the DTA (3) and fails. Pass rate 1152/1960.
func TestSummedBeamsResampledThroughCompare(t *testing.T) {
	c := newBeamCase(t, 1.02)
	wide := filepath.Join(c.beams, "RD_beam2.dcm")
	writePartDose(t, wide, [3]int{14, 14, 10}, [3]float64{-13, -13, -9}, [3]float64{2, 2, 2}, phantom.Uniform(0.8), c.ids, "BEAM", 1, 2, nil)
	out := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitRuleFail, "compare", "--reference", c.beams, "--evaluated", c.eval, "--no-structures", "--json", out)
	mustContain(t, "stderr", r.stderr, "were on different grids and were resampled")
	mustContain(t, "stderr", r.stderr, "interpolated trilinearly onto a common 14×14×10 grid of 2 × 2 × 2 mm spacing")
	res := readResultJSON(t, out)
	if len(res.DoseSums) != 1 || !res.DoseSums[0].Resampled || !strings.Contains(res.DoseSums[0].Method, "0 Gy outside each file's own grid") {
		t.Fatalf("dose_sums %+v", res.DoseSums)
	}
	if res.Overall.Evaluated != 1960 || res.Overall.Passed != 1152 || res.Overall.Capped != 808 {
		t.Errorf("overall evaluated %d passed %d capped %d, closed form 1960, 1152, 808", res.Overall.Evaluated, res.Overall.Passed, res.Overall.Capped)
	}
}

// Sets that cannot be summed are refused with one line naming the file,
// and nothing is written.
func TestSummedBeamsRefused(t *testing.T) {
	cases := []struct {
		name  string
		setup func(t *testing.T, c beamCase) []string
		want  []string
	}{
		{"duplicated beam", func(t *testing.T, c beamCase) []string {
			p := filepath.Join(c.beams, "RD_beam2_again.dcm")
			writePartDose(t, p, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(0.9), c.ids, "BEAM", 1, 2, nil)
			return []string{"--reference", c.beams}
		}, []string{"beam 2 twice", "RD_beam2_again.dcm", "RD_beam2.dcm"}},
		{"mixed units", func(t *testing.T, c beamCase) []string {
			p := filepath.Join(c.dir, "RD_beam4.dcm")
			writePartDose(t, p, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(0.1), c.ids, "BEAM", 1, 4,
				func(o *dicomio.WriteOptions) { o.DoseUnits = "RELATIVE" })
			return []string{"--reference", c.parts[0], "--reference", p}
		}, []string{"differ in DoseUnits (3004,0002)", "RD_beam4.dcm has RELATIVE"}},
		{"mixed summation types", func(t *testing.T, c beamCase) []string {
			p := filepath.Join(c.beams, "RD_group2.dcm")
			writePartDose(t, p, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(0.1), c.ids, "FRACTION", 2, 0, nil)
			return []string{"--reference", c.beams}
		}, []string{"differ in DoseSummationType (3004,000A)", "RD_group2.dcm"}},
		{"a folder among the files", func(t *testing.T, c beamCase) []string {
			return []string{"--reference", c.parts[0], "--reference", c.beams}
		}, []string{"is a folder", "give one folder, or the RT Dose files to sum"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := newBeamCase(t, 1.02)
			outDir := t.TempDir()
			args := append([]string{"compare"}, tc.setup(t, c)...)
			args = append(args, "--evaluated", c.eval, "--no-structures", "--json", filepath.Join(outDir, "r.json"), "--csv", filepath.Join(outDir, "r.csv"))
			oneErrorLine(t, vgExit(t, exitError, args...), tc.want...)
			if names := testDirNames(t, outDir); len(names) != 0 {
				t.Errorf("outputs written: %v", names)
			}
		})
	}
	// Both sides summed from beams, one side lacking one.
	c := newBeamCase(t, 1)
	evalDir := filepath.Join(c.dir, "mc")
	os.Mkdir(evalDir, 0o755)
	for b, d := range beamDoses[:2] {
		writePartDose(t, filepath.Join(evalDir, "RD_mc_beam"+string(rune('1'+b))+".dcm"), [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2},
			phantom.Uniform(d), c.ids, "BEAM", 1, b+1, nil)
	}
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.beams, "--evaluated", evalDir, "--no-structures"),
		"the doses hold different beams", "beams 1, 2, 3", "beams 1, 2")
}

// A per-fraction evaluated dose against a plan total differs by the
// number of fractions: refused with the likely factor unless scaled, and
// scaled only when asked. Closed form after --scale-evaluated 30: the
// evaluated dose is 30 × 2.04 = 61.2 Gy against 60 Gy, Γ = 1.2/(0.03·60) =
// 0.667 everywhere.
func TestPerFractionScaledOnlyWhenAsked(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	plan := filepath.Join(dir, "RD_plan.dcm")
	fx := filepath.Join(dir, "RD_mc_fraction.dcm")
	writePartDose(t, plan, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(60), ids, "PLAN", 0, 0, nil)
	writePartDose(t, fx, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids, "FRACTION_SESSION", 1, 0, nil)
	base := []string{"compare", "--reference", plan, "--evaluated", fx, "--no-structures"}
	// 60 / 2.04 = 29.41: near the whole number 29; the plan decides.
	oneErrorLine(t, vgExit(t, exitError, base...),
		"the reference is 29.41 × the evaluated dose", "mean 60 Gy against 2.04 Gy", "the evaluated dose is DoseSummationType FRACTION_SESSION, a single session",
		"The likely factor is 29", "--scale-evaluated fractions", "never scales a dose unasked")
	out := filepath.Join(t.TempDir(), "r.json")
	r := vgExit(t, exitPass, append(base, "--scale-evaluated", "30", "--json", out)...)
	mustContain(t, "stderr", r.stderr, "the evaluated dose was multiplied by 30 before the comparison (--scale-evaluated 30)")
	mustContain(t, "stdout", r.stdout, "under: evaluated dose multiplied by 30 (--scale-evaluated 30)")
	res := readResultJSON(t, out)
	if res.Choices.EvaluatedScale == nil || *res.Choices.EvaluatedScale != 30 || res.Choices.EvaluatedScaleSource != "--scale-evaluated 30" {
		t.Errorf("choices %+v", res.Choices)
	}
	checkGammaStats(t, "overall", res.Overall, repeat(1.2/(0.03*60), 12*12*8), 1e-3)
	// A factor that leaves a whole-number ratio is refused as well.
	oneErrorLine(t, vgExit(t, exitError, append(base, "--scale-evaluated", "15")...), "after multiplying it by 15", "The likely factor is 2")
	// The reverse: a per-fraction reference against a plan-total
	// evaluated dose (60.6 / 2 = 30.3), scaled by 1/30: 2.02 against 2 Gy,
	// Γ = 0.02/0.06 = 0.333.
	fxRef := filepath.Join(dir, "RD_plan_fraction.dcm")
	total := filepath.Join(dir, "RD_mc_total.dcm")
	writePartDose(t, fxRef, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids, "FRACTION_SESSION", 1, 0, nil)
	writePartDose(t, total, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(60.6), ids, "PLAN", 0, 0, nil)
	rev := []string{"compare", "--reference", fxRef, "--evaluated", total, "--no-structures"}
	oneErrorLine(t, vgExit(t, exitError, rev...), "the evaluated dose is 30.3 × the reference", "The likely factor is 1/30", "--scale-evaluated 1/30")
	out = filepath.Join(t.TempDir(), "r.json")
	vgExit(t, exitPass, append(rev, "--scale-evaluated", "1/30", "--json", out)...)
	checkGammaStats(t, "overall", readResultJSON(t, out).Overall, repeat(0.02/0.06, 12*12*8), 1e-3)
	// fractions needs a plan; nonsense factors are refused.
	oneErrorLine(t, vgExit(t, exitError, append(base, "--scale-evaluated", "fractions")...), "--scale-evaluated fractions takes the number of fractions from the RT Plan")
	for _, bad := range []string{"0", "-3", "abc", "1/0", "Inf"} {
		oneErrorLine(t, vgExit(t, exitError, append(base, "--scale-evaluated", bad)...), "--scale-evaluated "+bad+": want fractions")
	}
}

// backdateTree sets every file under dir to an hour ago: files at rest
// before the watch looked.
func backdateTree(t *testing.T, dir string) {
	t.Helper()
	old := time.Now().Add(-time.Hour)
	filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err == nil && info.Mode().IsRegular() {
			os.Chtimes(p, old, old)
		}
		return nil
	})
}

// A watched case whose reference arrives as one dose per beam is summed
// (the closed form of TestSummedBeamsThroughCompare: Γ = 0.667, pass); two
// whole-plan doses of one role are still a broken case.
func TestWatchSumsBeamDoses(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "results")
	c := newBeamCase(t, 1.02)
	beams := filepath.Join(dir, "beams")
	os.Mkdir(beams, 0o755)
	for b, p := range c.parts {
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		writeBytes(t, filepath.Join(beams, "ref_beam"+string(rune('1'+b))+".dcm"), data)
	}
	data, _ := os.ReadFile(c.eval)
	writeBytes(t, filepath.Join(beams, "eval_mc.dcm"), data)
	twice := filepath.Join(dir, "twoplans")
	os.Mkdir(twice, 0o755)
	ids := phantomIDs()
	for _, n := range []string{"ref_a.dcm", "ref_b.dcm"} {
		writePartDose(t, filepath.Join(twice, n), [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids, "PLAN", 0, 0, nil)
	}
	writePartDose(t, filepath.Join(twice, "eval.dcm"), [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids, "PLAN", 0, 0, nil)
	backdateTree(t, dir)
	r := vgRun(t, "watch", dir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms", "--no-structures")
	if r.code != exitError {
		t.Errorf("exit %d, want 1 (one broken case)\n%s", r.code, r)
	}
	res := readResultJSON(t, filepath.Join(out, "beams", "result.json"))
	if res.Verdict != "pass" || len(res.DoseSums) != 1 || res.DoseSums[0].Parts != 3 || dicomio.FormatNumbers(res.DoseSums[0].Beams) != "1, 2, 3" {
		t.Errorf("verdict %s, dose_sums %+v", res.Verdict, res.DoseSums)
	}
	checkGammaStats(t, "overall", res.Overall, repeat(0.02/0.03, 12*12*8), 1e-3)
	why, err := os.ReadFile(filepath.Join(dir, ".failed", "twoplans", "error.txt"))
	if err != nil || !strings.Contains(string(why), "2 reference doses") {
		t.Errorf("two plan doses: %v\n%s", err, why)
	}
}

func writeBytes(t *testing.T, path string, data []byte) {
	t.Helper()
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
}
