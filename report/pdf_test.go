package report

import (
	"bytes"
	"fmt"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"unicode"

	"codeberg.org/go-fonts/liberation/liberationmonoregular"
	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"golang.org/x/image/font/sfnt"

	"voxgamma/internal/reftool"
	"voxgamma/result"
)

const popplerHint = "apt-get install poppler-utils"

// pdfText extracts a PDF's text with poppler-utils' pdftotext, keeping the
// layout (one table row on one line).
func extractPDF(t *testing.T, path string) string {
	t.Helper()
	out, err := exec.Command(reftool.Program(t, "pdftotext", popplerHint), "-layout", "-enc", "UTF-8", path, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext %s: %v", path, err)
	}
	return string(out)
}

// squash collapses runs of white space, so that wrapped text compares with
// the text written.
func squash(s string) string { return strings.Join(strings.Fields(s), " ") }

// writeSynthPDF writes the synthetic case's PDF.
func writeSynthPDF(t *testing.T, page Page) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "review.pdf")
	if err := WritePDF(path, page); err != nil {
		t.Fatal(err)
	}
	return path
}

// numbersOn returns the numbers (and n/a) of the first line of text that
// starts with name (a row of the ROI table).
func numbersOn(text, name string) ([]string, bool) {
	re := regexp.MustCompile(`(?m)^[ \t]*` + regexp.QuoteMeta(name) + `[ \t]+(.*)$`)
	m := re.FindStringSubmatch(text)
	if m == nil {
		return nil, false
	}
	return regexp.MustCompile(`[+-]?\d+(?:\.\d+)?|n/a`).FindAllString(m[1], -1), true
}

// TestPDFNumbersEqualResult checks the PDF against the result it was made
// from, through poppler-utils (pdftotext extracts the text, pdfinfo counts
// the pages, pdffonts lists the fonts, pdftoppm renders every page): the
// verdict, the caution, the criteria, every input's SHA-256, every rule's
// measured value as the result states it, every ROI row's numbers, the
// failing regions, the sign-off block; the fonts embedded; every page
// rendered and not blank; every character printed has a glyph in the
// embedded fonts.
func TestPDFNumbersEqualResult(t *testing.T) {
	page := synthCase(t, smallCase)
	r := page.Result
	for i := range r.Rules {
		if r.Rules[i].Value != nil {
			r.Rules[i].ValueText = result.FormatPercent(*r.Rules[i].Value, 2)
		}
	}
	path := writeSynthPDF(t, page)
	text := extractPDF(t, path)
	flat := squash(text)

	for _, want := range []string{"Verdict: FAIL", squash(r.Caution), r.Criteria.Label, "PHANTOM, HEAD", "PHANTOM-001",
		"Review and sign-off", "Reviewer", "Decision", "accepted with remarks", "Signature",
		"ΔDmean", "pass rate ≥ 95 %", "Results per ROI"} {
		if !strings.Contains(flat, want) {
			t.Errorf("the PDF's text lacks %q", want)
		}
	}
	for _, in := range r.Inputs {
		if !strings.Contains(text, in.SHA256) {
			t.Errorf("input %s: SHA-256 %s not in the PDF", in.Role, in.SHA256)
		}
	}
	for _, rule := range r.Rules {
		want := rule.ValueText
		if rule.Value == nil {
			want = "not measured"
		}
		// The rule's row: its level, subject and measured value in
		// columns on one line (the rule's words may wrap).
		line := regexp.MustCompile(`(?m)^.*[ \t]+` + regexp.QuoteMeta(rule.Level) + `[ \t]+` + regexp.QuoteMeta(rule.Subject) + `[ \t]+(.*)$`).FindStringSubmatch(text)
		if line == nil || !strings.HasPrefix(strings.TrimSpace(line[1]), want) {
			t.Errorf("rule %q on %s: the PDF's row %q does not start with the result's value %q", rule.Rule, rule.Subject, line, want)
		}
	}
	lay := layoutROIs(r, page.Reference, page.ROIs)
	for _, i := range lay.order {
		roi := r.ROIs[i]
		row := roiTableRow(r, i, lay)
		got, ok := numbersOn(text, roi.Name)
		if !ok {
			t.Errorf("ROI %s: no row in the PDF", roi.Name)
			continue
		}
		var want []string
		for _, v := range []string{row.VolumeCC, row.Evaluated, roi.PassRateText, fixedPtr(roi.GammaMean, 2), fixedPtr(roi.GammaP95, 2), fixedPtr(roi.GammaMax, 2), row.DMean, row.D95, row.D2} {
			want = append(want, v)
		}
		if len(got) < len(want) || strings.Join(got[:len(want)], " ") != strings.Join(want, " ") {
			t.Errorf("ROI %s: the PDF shows %q, the result %q", roi.Name, got, want)
		}
	}
	for i, c := range r.Clusters {
		if !strings.Contains(flat, fmt.Sprintf("Failing region %d: centroid %s mm, %s cc, maximum Γ %s", i+1, mm3(c.CentroidMM), cc(c.VolumeCC), fixed(c.GammaMax, 2))) {
			t.Errorf("failing region %d not shown with the result's numbers", i+1)
		}
	}

	// Fonts: every font embedded (pdffonts' "emb" column).
	fonts, err := exec.Command(reftool.Program(t, "pdffonts", popplerHint), path).Output()
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(fonts)), "\n")
	if len(lines) < 3 {
		t.Fatalf("pdffonts lists no font:\n%s", fonts)
	}
	for _, l := range lines[2:] {
		f := strings.Fields(l)
		if len(f) < 5 || !strings.Contains(l, " yes ") {
			t.Errorf("font not embedded: %s", l)
		}
	}

	// Glyphs: every character of the text is in Liberation Sans (regular
	// and bold) or Liberation Mono.
	var fs []*sfnt.Font
	for _, ttf := range [][]byte{liberationsansregular.TTF, liberationsansbold.TTF, liberationmonoregular.TTF} {
		f, err := sfnt.Parse(ttf)
		if err != nil {
			t.Fatal(err)
		}
		fs = append(fs, f)
	}
	var buf sfnt.Buffer
	missing := map[rune]bool{}
	for _, r := range text {
		if unicode.IsSpace(r) || missing[r] {
			continue
		}
		found := false
		for _, f := range fs {
			if g, err := f.GlyphIndex(&buf, r); err == nil && g != 0 {
				found = true
				break
			}
		}
		if !found {
			missing[r] = true
			t.Errorf("character %q (U+%04X) has no glyph in the embedded fonts", r, r)
		}
	}

	// Pages: pdfinfo's count, every one rendered by pdftoppm, none blank.
	info, err := exec.Command(reftool.Program(t, "pdfinfo", popplerHint), path).Output()
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`(?m)^Pages:\s+(\d+)`).FindSubmatch(info)
	if m == nil {
		t.Fatalf("pdfinfo: %s", info)
	}
	pages, _ := strconv.Atoi(string(m[1]))
	checkRendered(t, path, pages)
	if !strings.Contains(flat, fmt.Sprintf("page %d of %d", pages, pages)) {
		t.Errorf("the last page's footer does not say page %d of %d", pages, pages)
	}
}

// checkRendered renders every page with pdftoppm and checks that each is
// an A4 page (at 50 dpi: 413 × 585 px, give or take a pixel) with ink on
// it; the images are kept as CI artefacts when VOXGAMMA_ARTIFACTS is set.
func checkRendered(t *testing.T, path string, pages int) {
	t.Helper()
	dir := t.TempDir()
	if a := os.Getenv("VOXGAMMA_ARTIFACTS"); a != "" {
		dir = filepath.Join(a, "pdf-"+strings.TrimSuffix(filepath.Base(path), ".pdf"))
		os.MkdirAll(dir, 0o755)
	}
	out, err := exec.Command(reftool.Program(t, "pdftoppm", popplerHint), "-r", "50", "-png", path, filepath.Join(dir, "page")).CombinedOutput()
	if err != nil {
		t.Fatalf("pdftoppm: %v\n%s", err, out)
	}
	pngs, _ := filepath.Glob(filepath.Join(dir, "page-*.png"))
	if len(pngs) != pages || pages < 2 {
		t.Fatalf("pdftoppm rendered %d pages, pdfinfo counts %d", len(pngs), pages)
	}
	for _, p := range pngs {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%s: %v", p, err)
		}
		bd := img.Bounds()
		if bd.Dx() < 411 || bd.Dx() > 415 || bd.Dy() < 583 || bd.Dy() > 587 {
			t.Errorf("%s: %d×%d px, want A4 at 50 dpi", filepath.Base(p), bd.Dx(), bd.Dy())
		}
		ink := 0
		for y := bd.Min.Y; y < bd.Max.Y; y += 2 {
			for x := bd.Min.X; x < bd.Max.X; x += 2 {
				if r, g, b, _ := img.At(x, y).RGBA(); r < 0xc000 || g < 0xc000 || b < 0xc000 {
					ink++
				}
			}
		}
		if ink < 200 {
			t.Errorf("%s looks blank (%d dark samples)", filepath.Base(p), ink)
		}
	}
}

// A result without ROIs, clusters or a plan still makes a complete PDF
// with its sign-off block, and de-identified (no date) it states the Unix
// epoch as its creation date rather than today.
func TestPDFMinimal(t *testing.T) {
	page := synthCase(t, synthOptions{Dims: [3]int{20, 20, 12}, Spacing: [3]float64{3, 3, 3}})
	page.Result.ROIs, page.ROIs, page.Result.Clusters = nil, nil, nil
	page.Generated = ""
	path := writeSynthPDF(t, page)
	text := squash(extractPDF(t, path))
	for _, want := range []string{"Review and sign-off", "No connected region of failing points", "Verdict:"} {
		if !strings.Contains(text, want) {
			t.Errorf("minimal PDF lacks %q", want)
		}
	}
	info, _ := exec.Command(reftool.Program(t, "pdfinfo", popplerHint), "-isodates", path).Output()
	if !strings.Contains(string(info), "1970-01-01") {
		t.Errorf("a PDF without a date must not carry today's:\n%s", info)
	}
}

// The plan, when the result has one, is in the PDF with its prescription
// and beams.
func TestPDFPlan(t *testing.T) {
	page := synthCase(t, smallCase)
	rx, fx, ms := 60.0, 30, 251.25
	e, g := 6.0, 181.0
	page.Result.Plan = &result.Plan{Label: "SYN_PLAN", Name: "synthetic plan", Source: "--plan", PrescriptionGy: &rx,
		Prescriptions: []result.PlanPrescription{{Description: "PTV_60", DoseGy: 60, ROINumber: 1}}, FractionsPlanned: &fx,
		FractionGroups: []result.PlanFractionGroup{{Number: 1, FractionsPlanned: &fx, Beams: []int{1}}},
		Beams:          []result.PlanBeam{{Number: 1, Name: "Arc 1", Type: "DYNAMIC", RadiationType: "PHOTON", DeliveryType: "TREATMENT", EnergyNominal: &e, GantryDeg: &g, Meterset: &ms, MetersetUnit: "MU", FractionGroup: 1}},
		ReferenceDose:  "names this plan"}
	text := squash(extractPDF(t, writeSynthPDF(t, page)))
	for _, want := range []string{"SYN_PLAN: synthetic plan", "60 Gy (PTV_60 60 Gy)", "30, 2.00 Gy per fraction", "Arc 1 DYNAMIC PHOTON TREATMENT", "251.2 MU", "names this plan"} {
		if !strings.Contains(text, want) {
			t.Errorf("PDF lacks %q", want)
		}
	}
}

// Text from the input files reaches the PDF visibly: a control character
// and a right-to-left override in an ROI name, and characters the embedded
// fonts have no glyph for, are printed as escapes (\u001b, \u202e), never
// as invisible or reordering characters or empty boxes.
func TestPDFTextVisible(t *testing.T) {
	page := synthCase(t, smallCase)
	r := page.Result
	r.ROIs[1].Name = "CORD\x1b[31m\u202eLIAT"
	page.ROIs[1].Name = r.ROIs[1].Name
	r.Warnings = append(r.Warnings, "a warning in another script: 脊髄")
	text := extractPDF(t, writeSynthPDF(t, page))
	for _, want := range []string{`CORD\u001b[31m\u202eLIAT`, `\u810a\u9ac4`} {
		if !strings.Contains(text, want) {
			t.Errorf("the PDF does not show %q", want)
		}
	}
	for _, bad := range []string{"\x1b", "\u202e", "脊"} {
		if strings.Contains(text, bad) {
			t.Errorf("the PDF holds %q itself", bad)
		}
	}
}
