package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html/template"
	"image/color"
	"sort"
	"strconv"
	"strings"

	"voxgamma/result"
	"voxgamma/volume"
)

// Page is everything the HTML review page is made from. Every number it
// shows comes from Result or is computed from the grids and masks.
type Page struct {
	// Result is the comparison's outcome: every number shown comes from
	// here.
	Result *result.Result
	// Reference is the reference dose (Gy).
	Reference *volume.Grid
	// Gamma is Γ on the reference grid's geometry, NaN where a point was
	// not evaluated. Its number of non-NaN values must equal
	// Result.Overall.Evaluated.
	Gamma *volume.Grid
	// ROIs are the masks for the slice outlines and the per-ROI Γ
	// histograms, matched to Result.ROIs by name.
	ROIs []PageROI
	// Generated is the date shown in the header, as the caller wants it
	// shown; empty omits it (de-identified reports).
	Generated string
}

// PageROI is one ROI's mask and display colour.
type PageROI struct {
	// Name matches result.ROI.Name.
	Name string
	// Color is the outline and curve colour (the structure set's display
	// colour, typically).
	Color [3]uint8
	// Mask is the voxel-centre mask on the reference grid.
	Mask *volume.Mask
}

// figure is one rendered figure, or the reason there is none.
type figure struct {
	SVG     template.HTML
	Caption string
	// Missing says why there is no figure (SVG empty).
	Missing string
	// Legend is shown under the figure.
	Legend []swatch
}

// swatch is one legend entry.
type swatch struct {
	Style template.CSS
	Label string
}

type inputRow struct {
	Role, Path, SHA256, Modality, FrameOfReference string
	Patient, Dose, Grid, Description               string
}

type ruleRow struct {
	Met                                bool
	Class, Mark                        string
	Rule, Level, Subject, Value, Limit string
	Reason                             string
	Conditions                         []string
}

type ruleMark struct {
	Met         bool
	Class, Mark string
	Text        string
}

type roiRow struct {
	ID, Name, Swatch                      string
	SwatchStyle                           template.CSS
	Kind, Source                          string
	VolumeCC, Voxels, Evaluated, PassRate string
	GammaMean, GammaP95, GammaMax         string
	DMean, D95, D2, Status                string
	NotEvaluated                          bool
	Rules                                 []ruleMark
}

type roiPanel struct {
	ID, Name  string
	Histogram figure
	DVH       figure
}

type clusterRow struct {
	Number                               int
	VolumeCC, Voxels, Centroid, GammaMax string
	ROIs                                 string
}

// model is the page with every value formatted, as the template shows it.
type model struct {
	Title, Heading     string
	PatientIDs         []string
	PatientNames       []string
	Generated          string
	Version, Schema    string
	Caution            string
	VerdictPass        bool
	VerdictKnown       bool
	Verdict, VerdictOf string
	CriteriaLabel      string
	CriteriaDetails    []string
	ProtocolName       string
	ProtocolJSON       string
	Frames             []string
	Inputs             []inputRow
	Warnings, Notes    []string
	NotEvaluated       []string
	Rules              []ruleRow
	Overall            roiRow
	ROIRows            []roiRow
	OverallHistogram   figure
	DVHAll             figure
	Panels             []roiPanel
	SliceCaption       string
	Slices             []figure
	SliceLegend        []swatch
	Clusters           []clusterRow
	ClustersMore       int
	Run                string
	Script             template.JS
	CSP                string
}

// maxClusterRows bounds the failing-cluster table; the JSON has them all.
const maxClusterRows = 50

// buildModel checks the page's inputs against each other and computes
// everything the template shows.
func buildModel(in Page) (*model, error) {
	r := in.Result
	if r == nil {
		return nil, fmt.Errorf("no result")
	}
	if in.Reference == nil || in.Gamma == nil {
		return nil, fmt.Errorf("the reference dose and the Γ grid are both needed for the figures")
	}
	if in.Reference.Len() == 0 {
		return nil, fmt.Errorf("the reference grid is empty")
	}
	if !in.Gamma.SameGeometry(in.Reference) {
		return nil, fmt.Errorf("the Γ grid %v does not have the reference grid's geometry %v", in.Gamma.Dims(), in.Reference.Dims())
	}
	for _, pr := range in.ROIs {
		if pr.Mask == nil {
			return nil, fmt.Errorf("ROI %q: no mask", pr.Name)
		}
		if pr.Mask.Dims() != in.Reference.Dims() || len(pr.Mask.Bits) != len(in.Reference.Data) {
			return nil, fmt.Errorf("ROI %q: mask %v does not match the reference grid %v", pr.Name, pr.Mask.Dims(), in.Reference.Dims())
		}
	}

	m := &model{
		Version:   r.Version,
		Schema:    r.SchemaVersion,
		Caution:   r.Caution,
		Generated: in.Generated,
		Warnings:  r.Warnings,
		Notes:     r.Notes,
		Script:    template.JS(pageScript),
		CSP:       contentSecurityPolicy,
	}
	if m.Caution == "" {
		// A result must carry it; a page never goes out without it.
		m.Caution = result.Caution
	}
	fillHeader(m, r)

	// Match page ROIs (masks, colours) to result ROIs by name, in order.
	pageROI := make([]*PageROI, len(r.ROIs))
	taken := make([]bool, len(in.ROIs))
	for i, roi := range r.ROIs {
		for j := range in.ROIs {
			if !taken[j] && in.ROIs[j].Name == roi.Name {
				taken[j] = true
				pageROI[i] = &in.ROIs[j]
				break
			}
		}
	}
	colors := make([]color.RGBA, len(r.ROIs))
	for i := range r.ROIs {
		if pr := pageROI[i]; pr != nil {
			colors[i] = color.RGBA{R: pr.Color[0], G: pr.Color[1], B: pr.Color[2], A: 255}
		} else {
			colors[i] = roiPalette[i%len(roiPalette)]
		}
	}

	// Tables.
	m.Overall = overallRow(r)
	for i, roi := range r.ROIs {
		m.ROIRows = append(m.ROIRows, roiTableRow(r, i, roi, colors[i]))
	}

	// Histograms.
	gcap := gammaCap(r.Criteria, in.Gamma)
	overall, err := histogramOf(in.Gamma, nil, gcap)
	if err != nil {
		return nil, err
	}
	if overall.Total != r.Overall.Evaluated {
		return nil, fmt.Errorf("the Γ grid has %d evaluated points but the result says %d: the grid and the result are not from the same comparison",
			overall.Total, r.Overall.Evaluated)
	}
	if overall.Total == 0 {
		m.OverallHistogram.Missing = "No point was evaluated: there is no Γ to show."
	} else {
		svg, err := histogramSVG(overall, "Γ histogram: all evaluated points")
		if err != nil {
			return nil, err
		}
		m.OverallHistogram = figure{SVG: template.HTML(svg), Caption: histogramCaption(overall, gcap, r.Overall.Capped)}
	}

	// DVHs and per-ROI panels.
	var all []dvhSeries
	for i, roi := range r.ROIs {
		panel := roiPanel{ID: m.ROIRows[i].ID, Name: roi.Name}
		if pr := pageROI[i]; pr == nil {
			panel.Histogram.Missing = "No mask was given for this ROI, so its Γ histogram is not drawn."
		} else {
			h, err := histogramOf(in.Gamma, pr.Mask, gcap)
			if err != nil {
				return nil, fmt.Errorf("ROI %q: %w", roi.Name, err)
			}
			if h.Total == 0 {
				panel.Histogram.Missing = "No voxel of this ROI has a Γ (status: " + statusText(roi) + ")."
			} else {
				title := "Γ histogram: " + roi.Name
				svg, err := histogramSVG(h, title)
				if err != nil {
					return nil, err
				}
				panel.Histogram.SVG = template.HTML(svg)
				panel.Histogram.Caption = histogramCaption(h, gcap, -1)
				if h.Total != roi.Evaluated {
					panel.Histogram.Caption += " " + mismatchNote(h.Total, roi)
				}
			}
		}
		if roi.DVH == nil {
			panel.DVH.Missing = "The result holds no DVH for this ROI."
		} else if err := checkCurves(roi.DVH.Curves); err != nil {
			panel.DVH.Missing = "No DVH figure: " + err.Error() + "."
		} else {
			s := dvhSeries{Name: roi.Name, Color: colors[i], Curves: roi.DVH.Curves}
			all = append(all, s)
			title := "Cumulative DVH: " + roi.Name
			svg, err := dvhSVG([]dvhSeries{s}, title, 300, 190)
			if err != nil {
				return nil, err
			}
			panel.DVH.SVG = template.HTML(svg)
			col := hexColor(lineColor(colors[i]))
			panel.DVH.Legend = []swatch{
				{Style: template.CSS("border-top-color:" + col), Label: "reference"},
				{Style: template.CSS("border-top-style:dashed;border-top-color:" + col), Label: "evaluated"},
			}
		}
		m.Panels = append(m.Panels, panel)
	}
	if len(all) == 0 {
		m.DVHAll.Missing = "The result holds no DVH curves."
	} else {
		svg, err := dvhSVG(all, "Cumulative DVHs: every ROI", 460, 280)
		if err != nil {
			return nil, err
		}
		m.DVHAll.SVG = template.HTML(svg)
		m.DVHAll.Caption = "Reference solid, evaluated dashed, one colour per ROI."
		m.DVHAll.Legend = []swatch{
			{Style: template.CSS("border-top-color:#000"), Label: "reference"},
			{Style: template.CSS("border-top-style:dashed;border-top-color:#000"), Label: "evaluated"},
		}
		for _, s := range all {
			m.DVHAll.Legend = append(m.DVHAll.Legend, swatch{
				Style: template.CSS("border-top-color:" + hexColor(lineColor(s.Color))),
				Label: s.Name,
			})
		}
	}

	if err := fillSlices(m, in, r, pageROI, colors); err != nil {
		return nil, err
	}

	for i, c := range r.Clusters {
		if i == maxClusterRows {
			m.ClustersMore = len(r.Clusters) - i
			break
		}
		m.Clusters = append(m.Clusters, clusterRow{
			Number:   i + 1,
			VolumeCC: cc(c.VolumeCC),
			Voxels:   strconv.Itoa(c.Voxels),
			Centroid: mm3(c.CentroidMM),
			GammaMax: fixed(c.GammaMax, 2),
			ROIs:     strings.Join(c.ROIs, ", "),
		})
	}
	return m, nil
}

// fillHeader fills the identification, criteria, protocol, inputs, rules and
// verdict.
func fillHeader(m *model, r *result.Result) {
	var ids, names, frames []string
	seen := map[string]bool{}
	addOnce := func(list *[]string, kind, v string) {
		if v != "" && !seen[kind+"\x00"+v] {
			seen[kind+"\x00"+v] = true
			*list = append(*list, v)
		}
	}
	for _, in := range r.Inputs {
		addOnce(&ids, "id", in.PatientID)
		addOnce(&names, "name", in.PatientName)
		addOnce(&frames, "for", in.FrameOfReferenceUID)
		row := inputRow{
			Role: in.Role, Path: in.Path, SHA256: in.SHA256, Modality: in.Modality,
			FrameOfReference: in.FrameOfReferenceUID, Description: in.Description,
		}
		row.Patient = strings.TrimSpace(in.PatientID + " " + in.PatientName)
		row.Dose = strings.Join(nonEmpty(in.DoseUnits, in.DoseType, in.DoseSummationType), ", ")
		if g := in.Grid; g != nil {
			row.Grid = fmt.Sprintf("%d×%d×%d voxels, %s × %s × %s mm, origin %s mm, maximum %s Gy",
				g.Dims[0], g.Dims[1], g.Dims[2], exact(g.SpacingMM[0]), exact(g.SpacingMM[1]), exact(g.SpacingMM[2]),
				mm3(g.OriginMM), fixed(g.MaxDoseGy, 2))
			if !g.UniformFrames {
				row.Grid += "; irregular frame offsets (mean spacing shown)"
			}
		}
		m.Inputs = append(m.Inputs, row)
	}
	m.PatientIDs, m.PatientNames, m.Frames = ids, names, frames

	c := r.Criteria
	m.CriteriaLabel = c.Label
	m.CriteriaDetails = []string{
		"dose difference " + exact(c.DosePercent) + " %, " + nonBlank(c.Normalisation, "normalisation not stated"),
		"distance to agreement " + exact(c.DTAmm) + " mm",
		"normalisation dose " + fixed(c.NormDoseGy, 3) + " Gy (" + nonBlank(c.NormDoseSource, "source not stated") + ")",
		"low-dose threshold " + exact(c.ThresholdPercent) + " % of the normalisation dose",
		"search distance " + exact(c.SearchMM) + " mm",
		"search method: " + nonBlank(c.Method, "not stated"),
	}

	m.Title = "voxgamma dose comparison"
	m.Heading = "Dose comparison review"
	if len(ids) > 0 {
		m.Title += ": " + strings.Join(ids, ", ")
	}
	if c.Label != "" {
		m.Title += " (" + c.Label + ")"
	}
	m.ProtocolName, m.ProtocolJSON = protocolText(r.Protocol)

	o := r.Overall
	m.NotEvaluated = []string{
		fmt.Sprintf("%d reference points below the low-dose threshold", o.BelowThreshold),
		fmt.Sprintf("%d reference points outside the evaluated grid", o.OutsideEvaluated),
		fmt.Sprintf("%d evaluated points capped at the search distance (Γ reported as the search distance over the DTA; they count as failing)", o.Capped),
	}
	for _, roi := range r.ROIs {
		if !roi.Status.Evaluated() {
			m.NotEvaluated = append(m.NotEvaluated, fmt.Sprintf("ROI %q: %s", roi.Name, nonBlank(statusText(roi), "status not stated")))
		}
		if c := roi.CoveredPercent; c != nil && *c < 100 {
			m.NotEvaluated = append(m.NotEvaluated, fmt.Sprintf("ROI %q: only %s %% of its volume lies inside both dose grids", roi.Name, result.FormatPercent(*c, 2)))
		}
	}

	met, na := 0, 0
	for _, rule := range r.Rules {
		row := ruleRow{
			Met: rule.Met, Class: outcomeClass(rule.Outcome), Mark: outcomeMark(rule.Outcome), Rule: rule.Rule, Level: rule.Level, Subject: rule.Subject,
			Limit: exact(rule.Limit), Reason: rule.Reason, Conditions: rule.Conditions,
		}
		switch {
		case rule.Value == nil:
			row.Value = "not measured"
		case rule.ValueText != "":
			row.Value = rule.ValueText
		default:
			row.Value = ruleValue(*rule.Value, rule.Limit)
		}
		switch rule.Outcome {
		case result.Met:
			met++
		case result.NotApplicable:
			na++
		}
		m.Rules = append(m.Rules, row)
	}
	switch r.Verdict {
	case "pass":
		m.VerdictKnown, m.VerdictPass, m.Verdict = true, true, "✔ PASS"
	case "fail":
		m.VerdictKnown, m.Verdict = true, "✘ FAIL"
	case "":
		m.Verdict = "? no verdict in the result"
	default:
		m.Verdict = "? " + r.Verdict
	}
	m.VerdictOf = fmt.Sprintf("%d of %d protocol rule checks met", met, len(r.Rules))
	if na > 0 {
		m.VerdictOf += fmt.Sprintf(", %d not applicable", na)
	}

	run := r.Run
	m.Run = fmt.Sprintf("Comparison took %s s (Γ search %s s) with %d workers.", fixed(run.Seconds, 1), fixed(run.GammaSeconds, 1), run.Workers)
}

// outcomeMark is the word-and-symbol mark of a rule outcome: not
// applicable reads as such, never as met.
func outcomeMark(o result.RuleState) string {
	switch o {
	case result.Met:
		return "✔ met"
	case result.NotApplicable:
		return "– not applicable"
	}
	return "✘ not met"
}

// outcomeClass is the CSS class of a rule outcome.
func outcomeClass(o result.RuleState) string {
	switch o {
	case result.Met:
		return "met"
	case result.NotApplicable:
		return "na"
	}
	return "notmet"
}

// statusText is an ROI's status with its detail.
func statusText(roi result.ROI) string {
	s := string(roi.Status)
	if roi.StatusDetail != "" {
		s += " (" + roi.StatusDetail + ")"
	}
	return s
}

func nonEmpty(v ...string) []string {
	var out []string
	for _, s := range v {
		if s != "" {
			out = append(out, s)
		}
	}
	return out
}

func nonBlank(s, instead string) string {
	if strings.TrimSpace(s) == "" {
		return instead
	}
	return s
}

// protocolText returns the protocol's name (its "name" field, whatever its
// case, or the protocol itself when it is a string) and the protocol in
// full as indented JSON.
func protocolText(p any) (name, full string) {
	if p == nil {
		return "none given", ""
	}
	if s, ok := p.(string); ok {
		return s, ""
	}
	// No HTML escaping here: the page's template escapes the text, and
	// "\u003e=" would hide a rule's ">=" from the reader.
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false)
	enc.SetIndent("", "  ")
	if err := enc.Encode(p); err != nil {
		return "(protocol cannot be shown: " + err.Error() + ")", ""
	}
	b := bytes.TrimRight(buf.Bytes(), "\n")
	var fields map[string]any
	if json.Unmarshal(b, &fields) == nil {
		keys := make([]string, 0, len(fields))
		for k := range fields {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			if strings.EqualFold(k, "name") {
				if s, ok := fields[k].(string); ok && s != "" {
					name = s
					break
				}
			}
		}
	}
	if name == "" {
		name = "unnamed"
	}
	return name, string(b)
}

func overallRow(r *result.Result) roiRow {
	o := r.Overall
	return roiRow{
		ID:        "overall",
		Name:      "overall (every evaluated point)",
		Kind:      "",
		VolumeCC:  "",
		Voxels:    "",
		Evaluated: strconv.Itoa(o.Evaluated),
		PassRate:  o.PassRateText,
		GammaMean: fixedPtr(o.GammaMean, 2),
		GammaP95:  fixedPtr(o.GammaP95, 2),
		GammaMax:  fixedPtr(o.GammaMax, 2),
		Rules:     rulesFor(r, "overall"),
	}
}

func roiTableRow(r *result.Result, i int, roi result.ROI, col color.RGBA) roiRow {
	row := roiRow{
		ID:          "roi-" + strconv.Itoa(i),
		Name:        roi.Name,
		SwatchStyle: template.CSS("background-color:" + hexColor(col)),
		Kind:        roi.Kind,
		Source:      roi.Source,
		VolumeCC:    cc(roi.VolumeCC),
		Voxels:      strconv.Itoa(roi.Voxels),
		Evaluated:   strconv.Itoa(roi.Evaluated),
		PassRate:    roi.PassRateText,
		GammaMean:   fixedPtr(roi.GammaMean, 2),
		GammaP95:    fixedPtr(roi.GammaP95, 2),
		GammaMax:    fixedPtr(roi.GammaMax, 2),
		DMean:       notAvailable,
		D95:         notAvailable,
		D2:          notAvailable,
		Status:      nonBlank(statusText(roi), "not stated"),
		Rules:       rulesFor(r, roi.Name),
	}
	if roi.InterpretedType != "" {
		row.Kind += " (" + roi.InterpretedType + ")"
	}
	row.NotEvaluated = !roi.Status.Evaluated()
	if roi.SubGridMM != nil {
		row.Status += "; on a " + exact(*roi.SubGridMM) + " mm sub-grid"
	}
	if d := roi.DVH; d != nil {
		row.DMean = signedPtr(d.DifferencePercent.MeanGy, 1)
		row.D95 = signedPtr(d.DifferencePercent.D95Gy, 1)
		row.D2 = signedPtr(d.DifferencePercent.D2Gy, 1)
	}
	return row
}

// rulesFor lists the outcomes of the rules applied to subject.
func rulesFor(r *result.Result, subject string) []ruleMark {
	var out []ruleMark
	for _, rule := range r.Rules {
		if rule.Subject != subject {
			continue
		}
		text := rule.Rule
		if rule.Level != "" {
			text += " (" + rule.Level + ")"
		}
		for _, c := range rule.Conditions {
			text += "; " + c
		}
		out = append(out, ruleMark{Met: rule.Met, Class: outcomeClass(rule.Outcome), Mark: outcomeMark(rule.Outcome), Text: text})
	}
	return out
}

// histogramCaption describes a histogram's counts. capped < 0 leaves the
// capped count out (it is known for the overall statistics only).
func histogramCaption(h *gammaHistogram, gcap float64, capped int) string {
	s := fmt.Sprintf("%d voxels with a Γ, %d of them above 1 (bars right of the dashed line at Γ = 1). Bins 0.1 wide, closed on the right; the last bin ends at the search cap Γ = %s and holds the capped points",
		h.Total, h.Failing, fixed(gcap, 2))
	if capped >= 0 {
		s += fmt.Sprintf(" (%d)", capped)
	}
	return s + "."
}

// mismatchNote explains a per-ROI histogram whose count differs from the
// ROI's statistics.
func mismatchNote(count int, roi result.ROI) string {
	s := fmt.Sprintf("The table's statistics for this ROI cover %d points, the histogram the %d reference voxels whose centre is inside", roi.Evaluated, count)
	if roi.SubGridMM != nil {
		s += fmt.Sprintf(": the ROI was evaluated on a %s mm sub-grid", exact(*roi.SubGridMM))
	}
	return s + "."
}

// fillSlices renders the three orthogonal slices.
func fillSlices(m *model, in Page, r *result.Result, pageROI []*PageROI, colors []color.RGBA) error {
	ref := in.Reference
	refMax, at := ref.Max()
	var centre [3]float64
	switch {
	case len(r.Clusters) > 0:
		c := r.Clusters[0]
		centre = c.CentroidMM
		m.SliceCaption = fmt.Sprintf("Slices through the centroid %s mm of the largest failing region (%s cc, maximum Γ %s).",
			mm3(centre), cc(c.VolumeCC), fixed(c.GammaMax, 2))
	case at >= 0:
		i, j, k := ref.IJK(at)
		centre = ref.WorldOf(i, j, k)
		m.SliceCaption = fmt.Sprintf("No failing region: slices through the reference dose maximum, %s Gy at %s mm.",
			fixed(float64(refMax), 2), mm3(centre))
	default:
		lo, hi := ref.Bounds()
		for a := range centre {
			centre[a] = (lo[a] + hi[a]) / 2
		}
		m.SliceCaption = fmt.Sprintf("The reference dose has no value: slices through the grid's centre %s mm.", mm3(centre))
	}
	greyMax := float64(refMax)
	if !(greyMax > 0) {
		greyMax = 1
	}
	norm := r.Criteria.NormDoseGy
	normNote := "the normalisation dose"
	if !(norm > 0) {
		norm, normNote = greyMax, "the reference maximum"
	}
	m.SliceCaption += fmt.Sprintf(" Grey: reference dose, black 0 Gy to white %s Gy (the reference maximum). Dashed lines: isodoses in %% of %s, %s Gy. The ring marks the point the three slices go through; letters name the patient directions (R/L right/left, A/P anterior/posterior, S/I superior/inferior).",
		fixed(greyMax, 2), normNote, fixed(norm, 2))

	for _, v := range views {
		s := extractSlice(ref, v, centre)
		f := &sliceFigure{
			Slice: s, Dose: s.values(ref), Gamma: s.values(in.Gamma),
			GreyMax: greyMax, NormDose: norm, Marker: centre,
			Title: fmt.Sprintf("%s, %s = %s mm", capitalise(v.String()), patientAxisName[v.fixed()], fixed(s.Plane, 1)),
		}
		for i, pr := range pageROI {
			if pr != nil {
				f.Outlines = append(f.Outlines, roiOutline{Color: colors[i], In: s.maskValues(pr.Mask)})
			}
		}
		// Masks given for ROIs the result does not list still outline.
		for j := range in.ROIs {
			if !used(pageROI, &in.ROIs[j]) {
				pr := &in.ROIs[j]
				f.Outlines = append(f.Outlines, roiOutline{Color: color.RGBA{R: pr.Color[0], G: pr.Color[1], B: pr.Color[2], A: 255}, In: s.maskValues(pr.Mask)})
			}
		}
		svg, err := sliceSVG(f)
		if err != nil {
			return err
		}
		m.Slices = append(m.Slices, figure{SVG: template.HTML(svg)})
	}

	for _, iso := range isodoseLevels {
		m.SliceLegend = append(m.SliceLegend, swatch{
			Style: template.CSS("border-top-style:dashed;border-top-color:" + hexColor(iso.Color)),
			Label: fmt.Sprintf("%s %% isodose (%s Gy)", exact(iso.Percent), fixed(iso.Percent/100*norm, 2)),
		})
	}
	m.SliceLegend = append(m.SliceLegend,
		swatch{Style: template.CSS("border-top-width:8px;border-top-color:" + hexColor(gammaOverlay[0])), Label: "1 < Γ ≤ 1.5"},
		swatch{Style: template.CSS("border-top-width:8px;border-top-color:" + hexColor(gammaOverlay[1])), Label: "Γ > 1.5"},
	)
	for i, pr := range pageROI {
		if pr != nil {
			m.SliceLegend = append(m.SliceLegend, swatch{Style: template.CSS("border-top-color:" + hexColor(colors[i])), Label: r.ROIs[i].Name + " outline"})
		}
	}
	for j := range in.ROIs {
		if !used(pageROI, &in.ROIs[j]) {
			pr := in.ROIs[j]
			m.SliceLegend = append(m.SliceLegend, swatch{
				Style: template.CSS("border-top-color:" + hexColor(color.RGBA{R: pr.Color[0], G: pr.Color[1], B: pr.Color[2], A: 255})),
				Label: pr.Name + " outline (not in the result)",
			})
		}
	}
	return nil
}

func used(list []*PageROI, p *PageROI) bool {
	for _, q := range list {
		if q == p {
			return true
		}
	}
	return false
}

func capitalise(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}
