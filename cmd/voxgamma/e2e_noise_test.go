package main

import (
	"encoding/csv"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/metaimage"
	"voxgamma/result"
	"voxgamma/volume"
)

// The noise tests' field: a planar slab 30 mm wide whose error-function
// edges (3 mm 80 %–20 % penumbra) run along the oblique n = (1, 2, 2)/3, so
// that no grid axis sees a constant profile. The evaluated dose is the
// reference scaled by k = 1.02 and shifted by s = 2.5 mm along n: the
// plateau passes 3 %/2 mm (Γ = 2/3) and the edges fail, a true pass rate
// near 70 %. The dose varies along n only, so the exact Γ of a reference
// point at u = n·x is the 1D minimum over u' of
// √((u'−u)²/Δd² + (D_e(u')−D_r(u))²/ΔD²) (the nearest point of any
// evaluated dose level lies on the plane u' at distance |u − u'|).
const (
	noiseA   = 60.0 // Gy, the plateau
	noiseK   = 1.02
	noiseS   = 2.5 // mm
	noiseHW  = 15.0
	noisePen = 3.0
)

var noiseN = [3]float64{1 / 3.0, 2 / 3.0, 2 / 3.0}

// noiseIDs identify the invented phantom of every noise test file.
var noiseIDs = phantomIDs()

// noiseEdge is the slab profile: an error function of 80–20 % width pen on
// each side of |u| = hw (Gaussian σ = pen/(2·0.8416)).
func noiseEdge(u float64) float64 {
	s := noisePen / (2 * 0.8416212335729143)
	return noiseA * 0.5 * math.Erfc((math.Abs(u)-noiseHW)/(math.Sqrt2*s))
}

func noiseRef(u float64) float64  { return noiseEdge(u) }
func noiseEval(u float64) float64 { return noiseK * noiseEdge(u-noiseS) }

// exactGamma1D is Γ at u by a scan at Δd/200 and golden-section refinement
// of the best sample (the distance function along n is smooth between
// scan samples at this step).
func exactGamma1D(u, dr, dta, dd, search float64) float64 {
	g2 := func(v float64) float64 {
		x, y := (v-u)/dta, (noiseEval(v)-dr)/dd
		return x*x + y*y
	}
	step := dta / 200
	best, at := math.Inf(1), u
	for v := u - search; v <= u+search; v += step {
		if x := g2(v); x < best {
			best, at = x, v
		}
	}
	a, b := at-step, at+step
	const phi = 0.6180339887498949
	for i := 0; i < 60; i++ {
		c, d := b-phi*(b-a), a+phi*(b-a)
		if g2(c) < g2(d) {
			b = d
		} else {
			a = c
		}
	}
	return math.Min(math.Sqrt(math.Min(best, g2((a+b)/2))), search/dta)
}

// noiseCase writes the reference and a noisy evaluated dose (σ at the
// maximum sigmaPct %, growing as √D like Monte Carlo variance; 0 for none)
// on a 2 mm grid 60 mm wide, and returns their paths, the true σ per voxel
// and the exact pass rate and mean Γ (3 %/2 mm global to 60 Gy, 10 %
// threshold, search 6 mm) over the reference voxels.
func noiseCase(t *testing.T, dir string, sigmaPct float64) (ref, eval string, sigma *volume.Grid, truePass, trueMean float64) {
	t.Helper()
	dims := [3]int{31, 31, 31}
	origin := [3]float64{-30, -30, -30}
	sp := [3]float64{2, 2, 2}
	ids := noiseIDs
	ref = filepath.Join(dir, "ref.dcm")
	eval = filepath.Join(dir, "eval.dcm")
	rd := writeTestDose(t, ref, dims, origin, sp, func(p [3]float64) float64 { return noiseRef(dot3(noiseN, p)) }, ids)
	g := testGrid(t, dims, origin, sp)
	sigma = g.EmptyLike()
	rng := rand.New(rand.NewPCG(14, uint64(100*sigmaPct)))
	for n := range g.Data {
		i, j, k := g.IJK(n)
		d := noiseEval(dot3(noiseN, g.WorldOf(i, j, k)))
		s := sigmaPct / 100 * noiseA * math.Sqrt(d/noiseA)
		sigma.Data[n] = float32(s)
		g.Data[n] = float32(math.Max(0, d+s*rng.NormFloat64()))
	}
	if _, err := dicomio.WriteDose(eval, g, ids, dicomio.DoseOptions("synthetic noisy dose, Gy")); err != nil {
		t.Fatal(err)
	}
	// Exact truth over the reference voxels at or above 10 % of 60 Gy.
	pass, sum, cnt := 0, 0.0, 0
	for n, dr := range rd.grid.Data {
		if float64(dr) < 6 {
			continue
		}
		i, j, k := rd.grid.IJK(n)
		gm := exactGamma1D(dot3(noiseN, rd.grid.WorldOf(i, j, k)), float64(dr), 2, 1.8, 6)
		if gm <= 1 {
			pass++
		}
		sum += gm
		cnt++
	}
	return ref, eval, sigma, 100 * float64(pass) / float64(cnt), sum / float64(cnt)
}

// noiseArgs are the compare options of the noise tests: 3 %/2 mm global
// normalised to 60 Gy, 10 % threshold, the engine's default interpolation.
func noiseArgs(ref, eval, dir string, extra ...string) []string {
	return append([]string{"compare", "--reference", ref, "--evaluated", eval, "--criteria", "3%/2mm", "--norm-dose", "60",
		"--threshold", "10", "--json", filepath.Join(dir, "r.json"), "--csv", filepath.Join(dir, "r.csv"), "--report", filepath.Join(dir, "r.html")}, extra...)
}

// quickArgs are noiseArgs with the piecewise-linear (simplex) interpolation,
// whose search is many times faster on a noisy dose than the default cubic
// spline's: for the tests of what is reported, not of accuracy.
func quickArgs(ref, eval, dir string, extra ...string) []string {
	return noiseArgs(ref, eval, dir, append([]string{"--interpolation", "linear-simplex"}, extra...)...)
}

// TestNoiseAutoCorrects: 3 % Monte Carlo-like noise raises the pass rate
// against the exact truth; the automatic handling estimates σ within 25 %,
// brings the pass rate back within 2.5 points of the truth and the mean Γ
// within 0.05 (issue 14's targets), and every output says so, with the raw
// and corrected pass rates side by side. The noise-free truth is the exact
// Γ when the engine's own result on the noise-free dose agrees with it
// within 0.5 points; otherwise (an interpolant of the evaluated grid less
// accurate than that) the engine's noise-free result, so that the test
// measures the noise correction and not the interpolant.
func TestNoiseAutoCorrects(t *testing.T) {
	dir := t.TempDir()
	ref, eval, _, truePass, trueMean := noiseCase(t, dir, 3)
	clean := t.TempDir()
	cref, ceval, _, _, _ := noiseCase(t, clean, 0)
	vgRun(t, noiseArgs(cref, ceval, clean, "--evaluated-noise", "off")...)
	engine := readResultJSON(t, filepath.Join(clean, "r.json"))
	if p := jsonNum(engine.Overall.PassRate); math.Abs(p-truePass) > 0.5 {
		t.Logf("the engine's noise-free result %.2f %% (mean Γ %.3f) differs from the exact truth %.2f %% (%.3f): it is the truth here",
			p, jsonNum(engine.Overall.GammaMean), truePass, trueMean)
		truePass, trueMean = p, jsonNum(engine.Overall.GammaMean)
	}
	r := vgRun(t, noiseArgs(ref, eval, dir)...)
	if r.code != 0 && r.code != 2 {
		t.Fatalf("%s", r)
	}
	res := readResultJSON(t, filepath.Join(dir, "r.json"))
	n := res.Noise
	if n == nil {
		t.Fatal("no noise object in the result")
	}
	if n.Source != "estimated" || n.Handling != "auto" || !n.Corrected || n.Judged != "corrected" {
		t.Errorf("noise %+v", n)
	}
	if s := jsonNum(n.SigmaPercent); math.Abs(s/3-1) > 0.25 {
		t.Errorf("σ estimated at %.3g %%, true 3 %%", s)
	}
	if n.SigmaUncertaintyPercent == nil || *n.SigmaUncertaintyPercent <= 0 {
		t.Errorf("no uncertainty of the estimate: %v", n.SigmaUncertaintyPercent)
	}
	corr, raw := jsonNum(res.Overall.PassRate), jsonNum(n.RawOverall.PassRate)
	t.Logf("truth %.2f %% (mean Γ %.3f), raw %.2f %% (%.3f), corrected %.2f %% (%.3f)", truePass, trueMean, raw, jsonNum(n.RawOverall.GammaMean), corr, jsonNum(res.Overall.GammaMean))
	if math.Abs(corr-truePass) > 2.5 {
		t.Errorf("corrected pass rate %.2f %%, exact truth %.2f %%", corr, truePass)
	}
	if d := jsonNum(res.Overall.GammaMean) - trueMean; math.Abs(d) > 0.05 {
		t.Errorf("corrected mean Γ off the exact truth by %.3f", d)
	}
	if math.Abs(raw-truePass) <= 2.5 && math.Abs(jsonNum(n.RawOverall.GammaMean)-trueMean) <= 0.05 {
		t.Errorf("raw pass rate %.2f %% and mean Γ %.3f already near the truth %.2f %%, %.3f: the case does not test the correction",
			raw, jsonNum(n.RawOverall.GammaMean), truePass, trueMean)
	}
	if !n.Warning || n.PassRateShiftPP == nil || math.Abs(*n.PassRateShiftPP-(corr-raw)) > 1e-6 {
		t.Errorf("warning %v, shift %v, want %.3f", n.Warning, n.PassRateShiftPP, corr-raw)
	}
	if len(n.ROIs) != len(res.ROIs) {
		t.Errorf("%d raw ROI entries for %d ROIs", len(n.ROIs), len(res.ROIs))
	}
	// Every output warns, gives σ and both pass rates.
	warned := false
	for _, w := range res.Warnings {
		if strings.Contains(w, "Monte Carlo noise") && strings.Contains(w, n.RawOverall.PassRateText) && strings.Contains(w, res.Overall.PassRateText) {
			warned = true
		}
	}
	if !warned {
		t.Errorf("no noise warning with both pass rates in %q", res.Warnings)
	}
	if !strings.Contains(r.stdout, "evaluated-dose noise: σ") || !strings.Contains(r.stdout, "raw "+n.RawOverall.PassRateText+" % → corrected "+res.Overall.PassRateText+" %") {
		t.Errorf("console does not give σ and both pass rates:\n%s", r.stdout)
	}
	if !strings.Contains(r.stderr, "warning: Monte Carlo noise") {
		t.Errorf("console does not warn:\n%s", r.stderr)
	}
	rows := readCSV(t, filepath.Join(dir, "r.csv"))
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	if rows[1][0] != "overall" || rows[1][col["raw_pass_rate"]] == "" || !strings.Contains(rows[1][col["noise_warning"]], "Monte Carlo noise") {
		t.Errorf("CSV overall row %q", rows[1])
	}
	html, err := os.ReadFile(filepath.Join(dir, "r.html"))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`id="noise"`, "Monte Carlo noise", "judged the noise-corrected figures", n.RawOverall.PassRateText} {
		if !strings.Contains(string(html), want) {
			t.Errorf("report lacks %q", want)
		}
	}
}

func readCSV(t *testing.T, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

// TestNoiseFreeUnchanged: on a noise-free evaluated dose (16-bit storage
// only) the estimate is ≈ 0, nothing is corrected, and the pass rate is
// the one without noise handling.
func TestNoiseFreeUnchanged(t *testing.T) {
	dir := t.TempDir()
	ref, eval, _, _, _ := noiseCase(t, dir, 0)
	vgRun(t, noiseArgs(ref, eval, dir)...)
	res := readResultJSON(t, filepath.Join(dir, "r.json"))
	n := res.Noise
	if n == nil || n.Source != "estimated" || n.Corrected || n.Warning {
		t.Fatalf("noise %+v", n)
	}
	if s := jsonNum(n.SigmaPercent); !(s >= 0 && s <= 0.05) {
		t.Errorf("noise-free dose estimated at σ %.3g %%", s)
	}
	off := t.TempDir()
	vgRun(t, noiseArgs(ref, eval, off, "--evaluated-noise", "off")...)
	resOff := readResultJSON(t, filepath.Join(off, "r.json"))
	if resOff.Noise != nil {
		t.Errorf("noise handling off still gives a noise object")
	}
	if jsonNum(res.Overall.PassRate) != jsonNum(resOff.Overall.PassRate) {
		t.Errorf("pass rate %v with the automatic handling, %v without", jsonNum(res.Overall.PassRate), jsonNum(resOff.Overall.PassRate))
	}
	// Declared noise-free: given 0 %, nothing corrected.
	zero := t.TempDir()
	vgRun(t, noiseArgs(ref, eval, zero, "--evaluated-noise", "0")...)
	resZero := readResultJSON(t, filepath.Join(zero, "r.json"))
	if n := resZero.Noise; n == nil || n.Source != "given" || jsonNum(n.SigmaPercent) != 0 || n.Corrected ||
		jsonNum(resZero.Overall.PassRate) != jsonNum(resOff.Overall.PassRate) {
		t.Errorf("--evaluated-noise 0: noise %+v, pass rate %v", n, jsonNum(resZero.Overall.PassRate))
	}
}

// TestNoiseGivenAndMaps: σ given as a percentage, as an RT Dose of the
// absolute σ (Gy, the unit its DoseUnits states), and as a MetaImage of the
// relative σ (unit given, then inferred from the dose's own noise): the
// result reports the source and σ at the maximum (the truth: 3 %).
func TestNoiseGivenAndMaps(t *testing.T) {
	dir := t.TempDir()
	ref, eval, sigma, _, _ := noiseCase(t, dir, 3)
	absMap := filepath.Join(dir, "sigma.dcm")
	if _, err := dicomio.WriteDose(absMap, sigma, noiseIDs, dicomio.WriteOptions{Description: "1 sigma, Gy", DoseUnits: "GY", DoseType: "ERROR", Bits: 16}); err != nil {
		t.Fatal(err)
	}
	rel := sigma.Clone()
	for n := range rel.Data {
		i, j, k := sigma.IJK(n)
		d := noiseEval(dot3(noiseN, sigma.WorldOf(i, j, k)))
		rel.Data[n] = 0
		if d > 1e-3 {
			rel.Data[n] = float32(float64(sigma.Data[n]) / d)
		}
	}
	relMap := filepath.Join(dir, "sigma_rel.mha")
	if err := metaimage.Write(relMap, rel); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name, source string
		args         []string
		want         float64
	}{
		{"given", "given", []string{"--evaluated-noise", "2"}, 2},
		{"given far from the data", "given", []string{"--evaluated-noise", "0.5"}, 0.5},
		{"rtdose map", "map", []string{"--evaluated-uncertainty", absMap}, 3},
		{"mha relative", "map", []string{"--evaluated-uncertainty", relMap, "--evaluated-uncertainty-unit", "relative"}, 3},
		{"mha inferred", "map", []string{"--evaluated-uncertainty", relMap}, 3},
		// A scaled evaluated dose scales its absolute σ with it: σ at the
		// maximum in percent stays 3 %.
		{"rtdose map, dose scaled", "map", []string{"--evaluated-uncertainty", absMap, "--scale-evaluated", "1.5"}, 3},
		{"estimated, dose scaled", "estimated", []string{"--scale-evaluated", "1.5"}, 3},
	} {
		t.Run(c.name, func(t *testing.T) {
			out := t.TempDir()
			r := vgRun(t, quickArgs(ref, eval, out, c.args...)...)
			if r.code != 0 && r.code != 2 {
				t.Fatalf("%s", r)
			}
			res := readResultJSON(t, filepath.Join(out, "r.json"))
			n := res.Noise
			if n == nil || n.Source != c.source || !n.Corrected {
				t.Fatalf("noise %+v", n)
			}
			// σ at the maximum from a map: the median over the top 10 %
			// of the dose of σ, which there is 3 % × √(D/D_max) ≥ 2.85 %.
			if s := jsonNum(n.SigmaPercent); math.Abs(s-c.want) > 0.1*c.want {
				t.Errorf("σ %.3g %%, want %g %%", s, c.want)
			}
			// A σ more than a factor of 2 from the dose's own estimate
			// (3 % here) is used, with a warning naming both.
			disagrees := false
			for _, w := range res.Warnings {
				disagrees = disagrees || strings.Contains(w, "disagrees with the evaluated dose's own estimate")
			}
			if disagrees != (c.want < 1.5) && c.source != "estimated" {
				t.Errorf("disagreement warning %v for σ %g %% against about 3 %%: %q", disagrees, c.want, res.Warnings)
			}
			if c.source == "map" {
				found := false
				for _, in := range res.Inputs {
					found = found || in.Role == "evaluated uncertainty"
				}
				if !found {
					t.Error("the map is not listed among the inputs")
				}
			}
		})
	}
}

// TestNoiseProtocolJudgesRaw: a protocol whose evaluated_noise.judge is raw
// has its rules judge the raw pass rate, and the report says so.
func TestNoiseProtocolJudgesRaw(t *testing.T) {
	dir := t.TempDir()
	ref, eval, _, _, _ := noiseCase(t, dir, 3)
	proto := filepath.Join(dir, "p.yaml")
	if err := os.WriteFile(proto, []byte("name: raw-judge\ncriteria: {criteria: 3%/2mm, threshold_percent: 10, norm_dose_gy: 60}\n"+
		"evaluated_noise: {judge: raw}\nrules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 50}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	vgRun(t, quickArgs(ref, eval, dir, "--protocol", proto)...)
	res := readResultJSON(t, filepath.Join(dir, "r.json"))
	if res.Noise == nil || res.Noise.Judged != "raw" || !res.Noise.Corrected {
		t.Fatalf("noise %+v", res.Noise)
	}
	var judged *result.RuleOutcome
	for i, o := range res.Rules {
		if strings.Contains(o.Rule, "pass rate") {
			judged = &res.Rules[i]
		}
	}
	if judged == nil || judged.Value == nil || *judged.Value != jsonNum(res.Noise.RawOverall.PassRate) {
		t.Fatalf("rules %+v: the pass-rate rule does not judge the raw pass rate %v", res.Rules, jsonNum(res.Noise.RawOverall.PassRate))
	}
	if len(judged.Conditions) == 0 || !strings.Contains(strings.Join(judged.Conditions, " "), "judge raw") {
		t.Errorf("the rule does not say it judged the raw figures: %q", judged.Conditions)
	}
	html, _ := os.ReadFile(filepath.Join(dir, "r.html"))
	if !strings.Contains(string(html), "judged the raw figures") {
		t.Error("the report does not say the raw figures were judged")
	}
}

// TestNoiseBadInput: options and maps that cannot work end in one line on
// stderr and exit 1.
func TestNoiseBadInput(t *testing.T) {
	dir := t.TempDir()
	ref, eval, sigma, _, _ := noiseCase(t, dir, 1)
	neg := sigma.Clone()
	neg.Data[len(neg.Data)/2] = -1
	negMap := filepath.Join(dir, "neg.mha")
	if err := metaimage.Write(negMap, neg); err != nil {
		t.Fatal(err)
	}
	otherFrame := filepath.Join(dir, "other.dcm")
	ids := noiseIDs
	ids.FrameOfReferenceUID = dicomio.NewUID()
	if _, err := dicomio.WriteDose(otherFrame, sigma, ids, dicomio.DoseOptions("1 sigma")); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name  string
		args  []string
		wants []string
	}{
		{"bad handling", []string{"--evaluated-noise", "lots"}, []string{"--evaluated-noise", "lots"}},
		{"negative percent", []string{"--evaluated-noise", "-1"}, []string{"--evaluated-noise"}},
		{"missing map", []string{"--evaluated-uncertainty", filepath.Join(dir, "none.mha")}, []string{"none.mha"}},
		{"negative map", []string{"--evaluated-uncertainty", negMap}, []string{"uncertainty map", "-1"}},
		{"other frame", []string{"--evaluated-uncertainty", otherFrame}, []string{"frame of reference"}},
		{"bad unit", []string{"--evaluated-uncertainty", negMap, "--evaluated-uncertainty-unit", "furlongs"}, []string{"--evaluated-uncertainty-unit"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := vgExit(t, 1, quickArgs(ref, eval, t.TempDir(), c.args...)...)
			oneErrorLine(t, r, c.wants...)
		})
	}
}
