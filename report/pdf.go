package report

import (
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"codeberg.org/go-fonts/liberation/liberationmonoregular"
	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"codeberg.org/go-pdf/fpdf"

	"voxgamma/internal/atomicfile"
	"voxgamma/result"
)

// The PDF review: the page's content for an archive (a record-and-verify
// system or document store keeps a signed PDF), paginated A4, written with
// codeberg.org/go-pdf/fpdf. Its fonts are Liberation Sans and Liberation
// Mono (codeberg.org/go-fonts/liberation), embedded as subsets, so Γ, Δ and
// ≥ print the same everywhere. Figures are the page's plots rendered to
// PNG at figureDPI. Every number is formatted as the HTML page formats it,
// from the same result.

// figureDPI is the resolution of the figures in the PDF.
const figureDPI = 200

// maxPDFClusterSlices bounds the failing regions whose slices the PDF
// shows (the largest first); the table lists up to maxClusterRows.
const maxPDFClusterSlices = 5

// pdfMargin is the page margin, mm.
const pdfMargin = 15.0

// Colours of the PDF's text marks.
var (
	pdfMet    = [3]int{23, 102, 58}
	pdfNotMet = [3]int{163, 22, 27}
	pdfMuted  = [3]int{85, 92, 99}
	pdfInk    = [3]int{28, 30, 33}
	pdfWarn   = [3]int{122, 78, 0}
)

// RenderPDF writes the review of in as a PDF to w. It returns an error, and
// writes nothing, when the inputs disagree (see [RenderHTML]).
func RenderPDF(w io.Writer, in Page) error {
	d, err := buildPDF(in)
	if err != nil {
		return fmt.Errorf("report: PDF: %w", err)
	}
	if err := d.f.Output(w); err != nil {
		return fmt.Errorf("report: PDF: %w", err)
	}
	return nil
}

// WritePDF writes the review (see [RenderPDF]) to the file at path,
// atomically. The document is made before the file is opened.
func WritePDF(path string, in Page) error {
	d, err := buildPDF(in)
	if err != nil {
		return fmt.Errorf("report: PDF %s: %w", path, err)
	}
	if err := atomicfile.Write(path, func(w io.Writer) error { return d.f.Output(w) }); err != nil {
		return fmt.Errorf("report: PDF: %w", err)
	}
	return nil
}

// pdfDoc is a PDF being written.
type pdfDoc struct {
	f    *fpdf.Fpdf
	w    float64 // text width
	imgs int
}

// buildPDF lays out the whole document.
func buildPDF(in Page) (*pdfDoc, error) {
	if err := checkPage(in); err != nil {
		return nil, err
	}
	r := in.Result
	m := &model{Caution: r.Caution, Version: r.Version, Schema: r.SchemaVersion, Generated: in.Generated, Warnings: r.Warnings, Notes: r.Notes}
	if m.Caution == "" {
		m.Caution = result.Caution
	}
	fillHeader(m, r)
	fillClusters(m, r)
	lay := layoutROIs(r, in.Reference, in.ROIs)
	gcap := gammaCap(r.Criteria, in.Gamma)
	overall, err := histogramOf(in.Gamma, nil, gcap)
	if err != nil {
		return nil, err
	}
	if overall.Total != r.Overall.Evaluated {
		return nil, fmt.Errorf("the Γ grid has %d evaluated points but the result says %d: the grid and the result are not from the same comparison",
			overall.Total, r.Overall.Evaluated)
	}

	f := fpdf.New("P", "mm", "A4", "")
	d := &pdfDoc{f: f}
	pw, _ := f.GetPageSize()
	d.w = pw - 2*pdfMargin
	f.SetMargins(pdfMargin, pdfMargin, pdfMargin)
	f.SetCellMargin(0.8)
	f.SetAutoPageBreak(true, pdfMargin+6)
	f.AddUTF8FontFromBytes("sans", "", liberationsansregular.TTF)
	f.AddUTF8FontFromBytes("sans", "B", liberationsansbold.TTF)
	f.AddUTF8FontFromBytes("mono", "", liberationmonoregular.TTF)
	f.SetTitle(m.Title, true)
	f.SetSubject("Dose comparison review: "+r.Criteria.Label, true)
	f.SetCreator("voxgamma "+r.Version, true)
	f.SetProducer("voxgamma "+r.Version+" (codeberg.org/go-pdf/fpdf)", true)
	f.SetLang("en")
	// A PDF states a creation date; the run's start, or (de-identified
	// reports carry no date) the Unix epoch.
	when := time.Unix(0, 0).UTC()
	if t, err := time.Parse(time.RFC3339, in.Generated); err == nil {
		when = t.UTC()
	}
	f.SetCreationDate(when)
	f.SetModificationDate(when)
	f.AliasNbPages("{nb}")
	ids := strings.Join(m.PatientIDs, ", ")
	f.SetFooterFunc(func() {
		f.SetY(-pdfMargin)
		d.font("", 7)
		d.color(pdfMuted)
		left := "voxgamma " + r.Version + " · " + nonBlank(ids, "no patient ID") + " · " + r.Criteria.Label + " · verdict " + strings.ToUpper(nonBlank(r.Verdict, "none")) +
			" · a verification aid: see the caution on page 1"
		f.CellFormat(d.w-25, 4, pdfText(left), "T", 0, "L", false, 0, "")
		f.CellFormat(25, 4, fmt.Sprintf("page %d of {nb}", f.PageNo()), "T", 0, "R", false, 0, "")
	})

	f.AddPage()
	d.titleBlock(m, r)
	d.identification(m)
	d.inputs(m)
	d.rules(m)
	d.noise(noiseOf(r))
	d.roiTable(r, lay)
	d.clusters(m)
	if err := d.figures(in, r, lay, overall, gcap); err != nil {
		return nil, err
	}
	if err := d.slices(in, r, lay); err != nil {
		return nil, err
	}
	d.plan(m.Plan)
	d.messages(m)
	d.protocol(m)
	d.signOff()
	if err := f.Error(); err != nil {
		return nil, err
	}
	return d, nil
}

func (d *pdfDoc) titleBlock(m *model, r *result.Result) {
	f := d.f
	d.font("B", 17)
	d.color(pdfInk)
	f.CellFormat(d.w, 8, "Dose comparison review", "", 1, "L", false, 0, "")
	sub := "voxgamma " + r.Version + ": volumetric gamma index (Low et al., Med Phys 25 (1998) 656) per structure"
	if m.Generated != "" {
		sub += " · " + m.Generated
	}
	d.paragraph(sub, 8.5, pdfMuted)
	c := pdfInk
	switch {
	case m.VerdictKnown && m.VerdictPass:
		c = pdfMet
	case m.VerdictKnown:
		c = pdfNotMet
	}
	d.font("B", 15)
	d.color(c)
	x, y := f.GetXY()
	f.SetDrawColor(c[0], c[1], c[2])
	f.SetLineWidth(0.8)
	label := "Verdict: " + pdfText(m.Verdict)
	bw := f.GetStringWidth(label) + 8
	f.Rect(x, y, bw, 9, "D")
	f.SetLineWidth(0.2)
	f.CellFormat(bw, 9, label, "", 0, "C", false, 0, "")
	d.font("", 10)
	d.color(pdfInk)
	f.CellFormat(d.w-bw, 9, "  "+pdfText(m.VerdictOf), "", 1, "L", false, 0, "")
	f.Ln(2)
	if len(m.Failures) > 0 {
		d.box("Rules not met (the tables and figures below start with these):", "NOT MET: "+strings.Join(m.Failures, "\nNOT MET: "), pdfNotMet, pdfNotMet, 9)
	}
	d.box("Caution.", m.Caution, pdfWarn, pdfInk, 9)
}

func (d *pdfDoc) identification(m *model) {
	join := func(v []string, none string) string {
		if len(v) == 0 {
			return none
		}
		return strings.Join(v, "; ")
	}
	rows := [][]pdfCell{
		{cell("Patient ID"), cell(join(m.PatientIDs, "not given"))},
		{cell("Patient name"), cell(join(m.PatientNames, "not given"))},
	}
	if p := m.Plan; p != nil {
		name := p.Label
		if p.Name != "" {
			name += ": " + p.Name
		}
		rows = append(rows,
			[]pdfCell{cell("Plan"), {Text: name, Color: pdfInk, Bold: true}},
			[]pdfCell{cell("Prescription"), cell(p.Prescription)},
			[]pdfCell{cell("Fractions"), cell(p.Fractions)})
	}
	rows = append(rows,
		[]pdfCell{cell("Frame of reference"), {Text: join(m.Frames, "not given"), Color: pdfInk, Mono: true}},
		[]pdfCell{cell("Criteria"), cell(m.CriteriaLabel + ": " + strings.Join(m.CriteriaDetails, "; "))},
		[]pdfCell{cell("Protocol"), cell(m.ProtocolName)},
		[]pdfCell{cell("voxgamma version"), cell(m.Version + " (result schema " + m.Schema + ")")})
	if m.Generated != "" {
		rows = append(rows, []pdfCell{cell("Date"), cell(m.Generated)})
	}
	d.table(nil, []float64{0.2, 0.8}, "LL", rows, 8.5)
}

func (d *pdfDoc) inputs(m *model) {
	d.heading("Input files", 1)
	var rows [][]pdfCell
	for _, in := range m.Inputs {
		rows = append(rows, []pdfCell{cell(in.Role), {Text: htmlText(string(in.Path)), Color: pdfInk, Mono: true, Path: true},
			cell(in.Modality), cell(in.Patient), cell(strings.TrimSpace(in.Dose + " " + in.Grid + " " + in.Description))})
		rows = append(rows, []pdfCell{cell(""), {Text: "SHA-256 " + in.SHA256 + "\nframe of reference " + nonBlank(in.FrameOfReference, "not given"), Color: pdfInk, Mono: true}})
	}
	d.table([]string{"role", "file", "modality", "patient", "dose and grid"}, []float64{0.09, 0.38, 0.1, 0.15, 0.28}, "LLLLL", rows, 7.5)
}

// htmlText undoes the page's path markup (escapes and <wbr>).
func htmlText(h string) string {
	return strings.NewReplacer("<wbr>", "", "&lt;", "<", "&gt;", ">", "&#34;", `"`, "&#39;", "'", "&amp;", "&").Replace(h)
}

func outcomeColor(class string) [3]int {
	switch class {
	case "met":
		return pdfMet
	case "notmet":
		return pdfNotMet
	}
	return pdfMuted
}

func (d *pdfDoc) rules(m *model) {
	d.heading("Protocol rules", 0)
	if len(m.Rules) == 0 {
		d.paragraph("The result lists no protocol rules.", 9, pdfInk)
		return
	}
	var rows [][]pdfCell
	for _, r := range m.Rules {
		remark := r.Reason
		for _, c := range r.Conditions {
			remark += "; under: " + c
		}
		rows = append(rows, []pdfCell{{Text: strings.ToUpper(pdfText(r.Mark)), Color: outcomeColor(r.Class), Bold: true}, cell(r.Rule), cell(r.Level), cell(r.Subject),
			cell(r.Value), cell(r.Limit), cell(strings.TrimPrefix(remark, "; "))})
	}
	d.table([]string{"outcome", "rule", "level", "applied to", "measured", "limit", "remark"}, []float64{0.1, 0.28, 0.1, 0.13, 0.09, 0.06, 0.24}, "LLLLRRL", rows, 8)
	d.paragraph("Rules not met first, then the others in the protocol's order.", 7.5, pdfMuted)
}

// noise writes the evaluated dose's noise: σ, what was done, which
// figures the rules judged, and the raw and corrected pass rates side by
// side; nothing when noise handling was off.
func (d *pdfDoc) noise(v *noiseView) {
	if v == nil {
		return
	}
	d.ensure(40)
	d.heading("Evaluated-dose noise", 0)
	d.paragraph(v.Summary, 9, pdfInk)
	d.paragraph(v.Judged, 9, pdfInk)
	if len(v.Rows) > 0 {
		var rows [][]pdfCell
		for _, r := range v.Rows {
			c := pdfInk
			if r.Moved {
				c = pdfNotMet
			}
			rows = append(rows, []pdfCell{cell(r.Subject), cell(r.Raw), cell(r.Corrected), {Text: r.Shift, Color: c, Bold: r.Moved}, cell(r.RawMean), cell(r.CorrectedMean)})
		}
		d.table([]string{"applied to", "raw pass rate (%)", "corrected pass rate (%)", "change (points)", "raw mean Γ", "corrected mean Γ"},
			[]float64{0.3, 0.14, 0.16, 0.14, 0.12, 0.14}, "LRRRRR", rows, 8)
	}
	d.paragraph(v.Method, 7.5, pdfMuted)
}

func (d *pdfDoc) roiTable(r *result.Result, lay *roiLayout) {
	d.ensure(60)
	d.heading("Results per ROI", 0)
	rowOf := func(row roiRow) []pdfCell {
		c := pdfInk
		name := row.Name
		if row.Failing {
			c = pdfNotMet
		}
		var rules []string
		for _, rm := range row.Rules {
			rules = append(rules, pdfText(rm.Mark)+": "+rm.Text)
		}
		status := row.Status
		if row.AlsoAs != "" {
			status += "; also reported as " + row.AlsoAs + ", with the same numbers"
		}
		return []pdfCell{{Text: name, Color: c, Bold: row.Failing}, cell(row.Kind), cell(row.VolumeCC), cell(row.Evaluated), {Text: row.PassRate, Color: c, Bold: row.Failing},
			cell(row.GammaMean), cell(row.GammaP95), cell(row.GammaMax), cell(row.DMean), cell(row.D95), cell(row.D2), cell(strings.Join(nonEmpty(append([]string{status}, rules...)...), "\n"))}
	}
	rows := [][]pdfCell{rowOf(overallRow(r))}
	for _, i := range lay.order {
		rows = append(rows, rowOf(roiTableRow(r, i, lay)))
	}
	d.table([]string{"ROI", "kind", "volume (cc)", "evaluated points", "pass rate (%)", "mean Γ", "P95 Γ", "max Γ", "ΔDmean (%)", "ΔD95 (%)", "ΔD2 (%)", "status and rules"},
		[]float64{0.11, 0.09, 0.065, 0.075, 0.065, 0.055, 0.05, 0.05, 0.07, 0.06, 0.055, 0.255}, "LLRRRRRRRRRL", rows, 7)
	d.paragraph("ROIs with a rule not met (in red, their rules marked \"not met\") first (the most serious level first, then the lowest pass rate), then the others in the structure set's order. Pass rate: points with Γ ≤ 1 over evaluated points, rounded down to one decimal (never shown as 100.0 unless every point passed). ΔD: evaluated minus reference in % of the reference value of the metric (ICRU Report 83: D95, minimum dose to the hottest 95 % of the ROI; D2, to the hottest 2 %).", 7.5, pdfMuted)
}

func (d *pdfDoc) clusters(m *model) {
	d.heading("Failing regions", 0)
	if len(m.Clusters) == 0 {
		d.paragraph("No connected region of failing points (Γ > 1).", 9, pdfInk)
		return
	}
	var rows [][]pdfCell
	for _, c := range m.Clusters {
		rows = append(rows, []pdfCell{cell(strconv.Itoa(c.Number)), cell(c.VolumeCC), cell(c.Voxels), cell(c.Centroid), cell(c.GammaMax), cell(c.ROIs)})
	}
	d.table([]string{"#", "volume (cc)", "voxels", "centroid x, y, z (mm)", "max Γ", "ROIs touched"}, []float64{0.05, 0.12, 0.1, 0.25, 0.1, 0.38}, "RRRRRL", rows, 8)
	if m.ClustersMore > 0 {
		d.paragraph(fmt.Sprintf("%d smaller regions are not listed here; the JSON result lists them all.", m.ClustersMore), 8, pdfMuted)
	}
}

func (d *pdfDoc) plan(p *planView) {
	if p == nil {
		return
	}
	d.heading("Plan", 0)
	rows := [][]pdfCell{{cell("Label"), cell(p.Label)}}
	for _, kv := range [][2]string{{"Name", p.Name}, {"Description", p.Description}, {"Intent", p.Intent}, {"Approval", p.Approval},
		{"Prescription", p.Prescription}, {"Fractions planned", p.Fractions}, {"Reference dose", p.ReferenceDose}, {"Found", p.Source}} {
		if kv[1] != "" {
			c := cell(kv[1])
			if kv[0] == "Reference dose" && !p.Matches {
				c.Color = pdfNotMet
			}
			rows = append(rows, []pdfCell{cell(kv[0]), c})
		}
	}
	d.table(nil, []float64{0.2, 0.8}, "LL", rows, 8.5)
	if len(p.Beams) > 0 {
		var br [][]pdfCell
		for _, b := range p.Beams {
			br = append(br, []pdfCell{cell(b.Number), cell(b.Name), cell(b.Type), cell(b.Radiation), cell(b.Delivery), cell(b.Machine), cell(b.Energy), cell(b.Gantry), cell(b.Meterset), cell(b.Group)})
		}
		d.table([]string{"beam", "name", "type", "radiation", "delivery", "machine", "energy", "gantry (°)", "meterset per fraction", "fraction group"},
			[]float64{0.06, 0.17, 0.09, 0.1, 0.11, 0.13, 0.07, 0.08, 0.12, 0.07}, "RLLLLLRRRR", br, 7.5)
	}
	d.paragraph("From the RT Plan: context for the review. The plan changes no number of the comparison.", 7.5, pdfMuted)
}

func (d *pdfDoc) messages(m *model) {
	d.heading("Warnings and notes", 0)
	list := func(title string, items []string, none string, c [3]int) {
		d.heading(title, 1)
		if len(items) == 0 {
			d.paragraph(none, 8.5, pdfInk)
			return
		}
		for _, it := range items {
			d.paragraph("• "+it, 8.5, c)
		}
	}
	list("Warnings", m.Warnings, "None.", pdfWarn)
	list("Not evaluated", m.NotEvaluated, "Nothing: every reference point at or above the threshold was evaluated, and so was every ROI.", pdfInk)
	list("Notes", m.Notes, "None.", pdfInk)
}

func (d *pdfDoc) protocol(m *model) {
	if len(m.ProtocolLines) == 0 {
		return
	}
	d.heading("Protocol in full", 0)
	for _, l := range m.ProtocolLines {
		text := l.Key
		if l.Value != "" {
			if l.Key != "" {
				if l.Item {
					text += " "
				} else {
					text += ": "
				}
			}
			text += l.Value
		}
		if l.Note != "" {
			text += " (" + l.Note + ")"
		}
		indent := 5 * float64(l.Depth)
		d.mono(7.5)
		d.color(pdfInk)
		for _, line := range d.wrap(pdfText(text), d.w-indent, false) {
			d.f.SetX(pdfMargin + indent)
			d.f.CellFormat(d.w-indent, 3.4, line, "", 1, "L", false, 0, "")
		}
	}
	d.paragraph("Values the protocol leaves to their default are shown as applied.", 7.5, pdfMuted)
}

// signOff draws the block a reviewer fills in by hand, kept on one page.
func (d *pdfDoc) signOff() {
	f := d.f
	d.ensure(75)
	d.heading("Review and sign-off", 0)
	line := func(label string, h float64) {
		d.font("", 9.5)
		d.color(pdfInk)
		x, y := f.GetXY()
		f.CellFormat(30, h, label, "", 0, "L", false, 0, "")
		f.SetDrawColor(28, 30, 33)
		f.Line(x+30, y+h-1, x+d.w, y+h-1)
		f.SetXY(x, y+h+1)
	}
	line("Reviewer", 9)
	// Decision: three boxes to tick.
	d.font("", 9.5)
	x, y := f.GetXY()
	f.CellFormat(30, 9, "Decision", "", 0, "L", false, 0, "")
	cx := x + 30
	for _, opt := range []string{"accepted", "accepted with remarks", "not accepted: investigate or re-plan"} {
		f.Rect(cx, y+2.5, 3.8, 3.8, "D")
		f.SetXY(cx+5, y)
		f.CellFormat(f.GetStringWidth(opt)+2, 9, opt, "", 0, "L", false, 0, "")
		cx += 5 + f.GetStringWidth(opt) + 8
	}
	f.SetXY(x, y+10)
	line("Date", 9)
	d.font("", 9.5)
	x, y = f.GetXY()
	f.CellFormat(30, 6, "Comment", "", 0, "L", false, 0, "")
	f.Rect(x+30, y, d.w-30, 24, "D")
	f.SetXY(x, y+26)
	line("Signature", 12)
	d.paragraph("Filled in by the reviewer. voxgamma stores nothing of it.", 7.5, pdfMuted)
}
