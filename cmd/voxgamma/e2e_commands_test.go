package main

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/metaimage"
	"voxgamma/phantom"
)

// TestInspect: inspect describes a dose (grid in columns × rows × frames
// and spacing along x, y, z as written), a structure set (its ROI names)
// and a folder (what it holds and what compare would use).
func TestInspect(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	// Not square and not cubic, so an axis mix-up shows: 12 columns of
	// 2 mm (x), 10 rows of 2.5 mm (y), 8 frames of 3 mm (z).
	dose := filepath.Join(dir, "RD_plan.dcm")
	writeTestDose(t, dose, [3]int{12, 10, 8}, [3]float64{-11, -11.25, -10.5}, [3]float64{2, 2.5, 3}, phantom.Uniform(2), ids)
	rs := filepath.Join(dir, "RS_plan.dcm")
	writeTestStructures(t, rs, ids,
		sphereROI(t, "PTV_Met", "PTV", 1, phantom.Sphere{Radius: 4}, ids.FrameOfReferenceUID),
		sphereROI(t, "Brainstem", "ORGAN", 2, phantom.Sphere{Centre: [3]float64{0, 6, 0}, Radius: 2}, ids.FrameOfReferenceUID))

	r := vgExit(t, exitPass, "inspect", dose)
	for _, want := range []string{"RT Dose", "grid 12×10×8 (columns × rows × frames)", "spacing 2 × 2.5 × 3 mm", "units GY", "summation PLAN", ids.FrameOfReferenceUID} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("inspect dose: no %q in\n%s", want, r.stdout)
		}
	}
	r = vgExit(t, exitPass, "inspect", rs)
	for _, want := range []string{"RT Structure Set", "2 ROIs", "PTV_Met", "Brainstem", "kind target", "kind oar"} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("inspect structures: no %q in\n%s", want, r.stdout)
		}
	}
	rx, ms := 18.0, 612.5
	plan := &dicomio.Plan{Label: "SRS_1", Name: "one met",
		DoseReferences: []dicomio.DoseReference{{Number: 1, Type: "TARGET", Description: "PTV_Met", TargetPrescriptionGy: &rx}},
		Beams:          []dicomio.Beam{{Number: 1, Name: "Arc A"}},
		FractionGroups: []dicomio.FractionGroup{{Number: 1, FractionsPlanned: 3, Beams: []dicomio.ReferencedBeam{{BeamNumber: 1, Meterset: &ms}}}}}
	if _, err := dicomio.WritePlan(filepath.Join(dir, "RP_plan.dcm"), plan, ids); err != nil {
		t.Fatal(err)
	}
	r = vgExit(t, exitPass, "inspect", filepath.Join(dir, "RP_plan.dcm"))
	for _, want := range []string{`RT Plan "SRS_1" (one met)`, "prescription 18 Gy; PTV_Met 18 Gy", "fraction group 1: 3 fractions, beams 1 (612.5)", `beam 1 "Arc A"`} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("inspect plan: no %q in\n%s", want, r.stdout)
		}
	}
	r = vgExit(t, exitPass, "inspect", dir)
	for _, want := range []string{"folder with 1 RT Dose, 1 RT Structure Set and 1 RT Plan files", "RD_plan.dcm", "RS_plan.dcm", "12×10×8", "would use:", `chose plan RP_plan.dcm: label "SRS_1"`} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("inspect folder: no %q in\n%s", want, r.stdout)
		}
	}
	if strings.Contains(r.stdout, "PHANTOM^TEST") {
		t.Errorf("inspect printed the patient name without --verbose:\n%s", r.stdout)
	}
	// A path that cannot be read: status 1, one line on stderr naming it.
	bad := filepath.Join(dir, "notes.txt")
	if err := os.WriteFile(bad, []byte("not DICOM\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	r = vgExit(t, exitError, "inspect", bad)
	oneErrorLine(t, r, "notes.txt")
}

// TestSweep: sweep prints one row per criteria set and writes as many JSON
// rows, and a CSV of one line per row and ROI (the overall line plus
// PTV_Met and the derived "all targets"), each row with the closed form of
// the flat case: Γ = |k−1|·D/ΔD (Low et al. 1998, see
// TestCompareUniformScale). With the default normalisation to the
// reference maximum D, global and local ΔD are both δ·D, so Γ = 2.5/δ(%)
// for k = 1.025: 2.5, 1.25 and 0.833 at 1, 2 and 3 %, whatever the DTA.
func TestSweep(t *testing.T) {
	const k = 1.025
	c := newUniformCase(t, 2, k)
	rs := filepath.Join(c.dir, "RS.dcm")
	writeTestStructures(t, rs, c.ids, sphereROI(t, "PTV_Met", "PTV", 1, phantom.Sphere{Radius: 5}, c.ids.FrameOfReferenceUID))
	jsonOut, csvOut := filepath.Join(c.dir, "sweep.json"), filepath.Join(c.dir, "sweep.csv")
	r := vgExit(t, exitPass, "sweep", "--reference", c.ref, "--evaluated", c.eval, "--structures", rs,
		"--doses", "1,2,3", "--dtas", "1,2", "--normalisations", "global,local", "--json", jsonOut, "--csv", csvOut)

	type combo struct {
		dose, dta float64
		norm      string
	}
	var combos []combo
	for _, n := range []string{"global", "local"} {
		for _, d := range []float64{1, 2, 3} {
			for _, a := range []float64{1, 2} {
				combos = append(combos, combo{d, a, n})
			}
		}
	}
	// Printed table: one row per criteria set, starting with its label.
	for _, cb := range combos {
		label := fmt.Sprintf("%g%%/%gmm %s", cb.dose, cb.dta, cb.norm)
		rows := 0
		for _, line := range strings.Split(r.stdout, "\n") {
			if strings.HasPrefix(line, label+" ") {
				rows++
			}
		}
		if rows != 1 {
			t.Errorf("%d printed rows for %s, want 1:\n%s", rows, label, r.stdout)
		}
	}

	var doc struct {
		Rows []struct {
			Criteria struct {
				DosePercent   float64 `json:"dose_percent"`
				DTAmm         float64 `json:"dta_mm"`
				Normalisation string  `json:"normalisation"`
				SearchMM      float64 `json:"search_mm"`
			} `json:"criteria"`
			Overall struct {
				Evaluated int      `json:"evaluated"`
				PassRate  *float64 `json:"pass_rate"`
				GammaMean *float64 `json:"gamma_mean"`
				GammaMax  *float64 `json:"gamma_max"`
			} `json:"overall"`
			ROIs []struct {
				Name     string   `json:"name"`
				PassRate *float64 `json:"pass_rate"`
			} `json:"rois"`
		} `json:"rows"`
	}
	if err := json.Unmarshal(mustReadFile(t, jsonOut), &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Rows) != len(combos) {
		t.Fatalf("%d JSON rows, want %d", len(doc.Rows), len(combos))
	}
	qr, qe := c.refFile.quantBound(), c.evalFile.quantBound()
	for _, row := range doc.Rows {
		cr := row.Criteria
		what := fmt.Sprintf("%g%%/%gmm %s", cr.DosePercent, cr.DTAmm, cr.Normalisation)
		found := false
		for _, cb := range combos {
			found = found || (cb.dose == cr.DosePercent && cb.dta == cr.DTAmm && cb.norm == cr.Normalisation)
		}
		if !found {
			t.Errorf("unexpected row %s", what)
		}
		if cr.SearchMM != 3*cr.DTAmm {
			t.Errorf("%s: search %g mm, want 3 × DTA", what, cr.SearchMM)
		}
		delta := cr.DosePercent / 100
		gamma := (k - 1) / delta
		// ΔD = δ·D with D the stored flat dose (both normalisations); the
		// doses move Γ by at most (q_r + q_e)/ΔD, and ΔD's own error by
		// Γ·q_r/D (see TestCompareLinearGradientShift).
		tol := (qr+qe)/(delta*(2-qr)) + gamma*qr/(2-qr) + engineTol
		checkNear(t, what+" gamma_mean", row.Overall.GammaMean, gamma, tol)
		checkNear(t, what+" gamma_max", row.Overall.GammaMax, gamma, tol)
		wantRate := 0.0
		if gamma < 1 {
			wantRate = 100
		}
		checkNear(t, what+" pass_rate", row.Overall.PassRate, wantRate, 0)
		if row.Overall.Evaluated != c.refFile.grid.Len() {
			t.Errorf("%s: evaluated %d, want %d", what, row.Overall.Evaluated, c.refFile.grid.Len())
		}
		if len(row.ROIs) != 2 || row.ROIs[0].Name != "PTV_Met" || row.ROIs[1].Name != "all targets" {
			t.Errorf("%s: ROIs %+v, want PTV_Met and all targets", what, row.ROIs)
		} else {
			checkNear(t, what+" PTV_Met pass_rate", row.ROIs[0].PassRate, wantRate, 0)
		}
	}

	f, err := os.Open(csvOut)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if want := 1 + len(combos)*3; len(recs) != want {
		t.Errorf("%d CSV lines, want the header and %d rows × (overall + 2 ROIs) = %d", len(recs), len(combos), want)
	}
	if len(recs) > 0 && strings.Join(recs[0], ",") != "dose_percent,dta_mm,normalisation,roi,kind,evaluated,pass_rate,gamma_mean" {
		t.Errorf("CSV header %v", recs[0])
	}
}

// TestDemo: demo --out DIR exits 0 and writes every output; its JSON shows
// the demo's point (README): the overall pass rate meets TG-218's 95 %
// tolerance limit (Miften et al., Med Phys 45 (2018) e53) while the
// smallest target, PTV_Small, fails.
func TestDemo(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	vgExit(t, exitPass, "demo", "--out", dir, "--quiet")
	for _, name := range []string{"reference.dcm", "evaluated.dcm", "structures.dcm", "plan.dcm", "result.json", "result.csv", "gamma.dcm", "gamma.mha", "difference.dcm", "report.html", "report.pdf"} {
		st, err := os.Stat(filepath.Join(dir, name))
		if err != nil || st.Size() == 0 {
			t.Errorf("%s: %v (size %v)", name, err, st)
		}
	}
	res := readResultJSON(t, filepath.Join(dir, "result.json"))
	if pr := jsonNum(res.Overall.PassRate); !(pr >= 95) {
		t.Errorf("overall pass rate %v, the demo's overall passes (≥ 95 %%)", pr)
	}
	small := resultROI(t, res, "PTV_Small")
	if pr := jsonNum(small.PassRate); !(pr < 95) || small.Kind != "target" {
		t.Errorf("PTV_Small: kind %q pass rate %v, the demo's small target fails (< 95 %%)", small.Kind, pr)
	}
	failed := false
	for _, o := range res.Rules {
		if o.Subject == "PTV_Small" && !o.Met {
			failed = true
		}
	}
	if !failed || res.Verdict != "fail" {
		t.Errorf("verdict %q, PTV_Small rule not met: %v", res.Verdict, failed)
	}
	g, _, err := dicomio.ReadDose(filepath.Join(dir, "gamma.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	m, err := metaimage.Read(filepath.Join(dir, "gamma.mha"))
	if err != nil {
		t.Fatal(err)
	}
	if g.Dims() != m.Dims() {
		t.Errorf("gamma.dcm %v and gamma.mha %v differ in size", g.Dims(), m.Dims())
	}
	// The MetaImage holds Γ as float32; the RT Dose holds it in 16 bits
	// with NaN (not evaluated) as 0: within half a DoseGridScaling step
	// wherever evaluated, at most the map's maximum / 65535.
	mx, _ := m.Max()
	step := float64(mx) / 65535
	bad := 0
	for n, v := range m.Data {
		if v != v {
			continue
		}
		if math.Abs(float64(g.Data[n]-v)) > step {
			bad++
		}
	}
	if bad > 0 {
		t.Errorf("%d voxels of gamma.dcm differ from gamma.mha by more than a scaling step", bad)
	}
	if _, _, err := dicomio.ReadDose(filepath.Join(dir, "difference.dcm")); err != nil {
		t.Error(err)
	}
	if b := mustReadFile(t, filepath.Join(dir, "report.html")); !strings.Contains(strings.ToLower(string(b[:min(len(b), 512)])), "<html") {
		t.Errorf("report.html does not start as an HTML page")
	}
	recs, err := csv.NewReader(strings.NewReader(string(mustReadFile(t, filepath.Join(dir, "result.csv"))))).ReadAll()
	if err != nil || len(recs) < len(res.ROIs) {
		t.Errorf("result.csv: %d records (%v), the result has %d ROIs", len(recs), err, len(res.ROIs))
	}
}
