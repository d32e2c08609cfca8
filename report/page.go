package report

import (
	"fmt"
	"html/template"
	"math"
	"strconv"
	"strings"

	"voxgamma/result"
	"voxgamma/volume"
)

// Page is everything the HTML review page (and the PDF) is made from.
// Every number it shows comes from Result or is computed from the grids and
// masks.
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
	// Difference is evaluated − reference (Gy) on the reference grid's
	// geometry, NaN outside the evaluated grid; nil leaves the dose
	// difference out of the slice browser.
	Difference *volume.Grid
	// ROIs are the masks for the slice outlines and the per-ROI Γ
	// histograms, matched to Result.ROIs by name.
	ROIs []PageROI
	// Generated is the date shown in the header, as the caller wants it
	// shown; empty omits it (de-identified reports).
	Generated string
}

// PageROI is one ROI's mask.
type PageROI struct {
	// Name matches result.ROI.Name.
	Name string
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
	Role, SHA256, Modality, FrameOfReference string
	Path                                     template.HTML
	Patient, Dose, Grid, Description         string
}

type ruleRow struct {
	Class                              string
	Mark                               string
	Rule, Level, Subject, Value, Limit string
	Reason                             string
	// Conditions are the choices that changed how the rule's subject was
	// sampled (result.RuleOutcome.Conditions).
	Conditions []string
}

type ruleMark struct {
	Class string
	Mark  string
	Text  string
}

type roiRow struct {
	ID, Name                              string
	SwatchStyle                           template.CSS
	Kind, Source                          string
	VolumeCC, Voxels, Evaluated, PassRate string
	GammaMean, GammaP95, GammaMax         string
	DMean, D95, D2, Status                string
	NotEvaluated, Failing                 bool
	Rules                                 []ruleMark
	// AlsoAs names derived ROIs with the same numbers, not listed again.
	AlsoAs string
	// Goto is the point (mm, "x,y,z") the slice browser centres on, and
	// Extent the size (mm) of the region to show; empty when unknown.
	Goto, Extent string
}

type roiPanel struct {
	ID, Name  string
	Failing   bool
	Histogram figure
	DVH       figure
}

// noiseView is the evaluated dose's noise as the page shows it.
type noiseView struct {
	Summary, Judged, Method string
	Rows                    []noiseRow
}

type noiseRow struct {
	Subject, Raw, Corrected, Shift string
	RawMean, CorrectedMean         string
	// Moved is set when the pass rate moves by more than 1 point.
	Moved bool
}

type clusterRow struct {
	Number                               int
	VolumeCC, Voxels, Centroid, GammaMax string
	ROIs                                 string
	Goto, Extent                         string
}

// protoLine is one line of the protocol as shown: a key (or list marker)
// and its value, indented by depth.
type protoLine struct {
	Depth      int
	Key, Value string
	// Item marks a list item's number (no colon after it).
	Item bool
	// Note says how a value left to its default was resolved.
	Note string
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
	Failures           []string
	CriteriaLabel      string
	CriteriaDetails    []string
	ProtocolName       string
	ProtocolLines      []protoLine
	Frames             []string
	Plan               *planView
	Inputs             []inputRow
	Warnings, Notes    []string
	NotEvaluated       []string
	Rules              []ruleRow
	Overall            roiRow
	ROIRows            []roiRow
	OverallHistogram   figure
	Panels             []roiPanel
	DefaultPanel       string
	ViewerData         template.HTML
	ViewerNote         string
	ViewerDiff         bool
	DiffRanges         []diffRange
	IsodoseLegend      []swatch
	ROILegend          []swatch
	SliceCaption       string
	Slices             []figure
	SliceLegend        []swatch
	Clusters           []clusterRow
	Noise              *noiseView
	ClustersMore       int
	Run                string
	Script             template.JS
	CSP                string
}

// diffRange is one choice of the dose difference colour scale's range.
type diffRange struct {
	Value, Label string
	Selected     bool
}

// maxClusterRows bounds the failing-cluster table; the JSON has them all.
const maxClusterRows = 50

// dvhAllPanel is the id of the panel that overlays every ROI's DVH.
const dvhAllPanel = "dvh-all"

// buildModel checks the page's inputs against each other and computes
// everything the template shows.
func buildModel(in Page) (*model, error) {
	r := in.Result
	if err := checkPage(in); err != nil {
		return nil, err
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
	m.Noise = noiseOf(r)
	lay := layoutROIs(r, in.Reference, in.ROIs)
	norm, _, _ := normOf(in, r)
	for _, iso := range isodoseLevels {
		m.IsodoseLegend = append(m.IsodoseLegend, swatch{
			Style: template.CSS("border-top-style:dashed;border-top-color:" + hexColor(iso.Color)),
			Label: fmt.Sprintf("%s %% isodose (%s Gy)", exact(iso.Percent), fixed(iso.Percent/100*norm, 2)),
		})
	}
	for _, i := range lay.order {
		if lay.mask[i] != nil {
			m.ROILegend = append(m.ROILegend, swatch{Style: template.CSS("border-top-color:" + hexColor(lay.color[i])), Label: r.ROIs[i].Name})
		}
	}
	for _, e := range lay.extra {
		m.ROILegend = append(m.ROILegend, swatch{Style: template.CSS("border-top-color:" + hexColor(e.color)), Label: e.mask.Name + " (not in the result)"})
	}

	// Tables, failing ROIs first.
	m.Overall = overallRow(r)
	for _, i := range lay.order {
		m.ROIRows = append(m.ROIRows, roiTableRow(r, i, lay))
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

	// Per-ROI panels in table order, and the overlay of every DVH.
	var all []dvhSeries
	for _, i := range lay.order {
		roi := r.ROIs[i]
		panel := roiPanel{ID: lay.id[i], Name: roi.Name, Failing: lay.failing[i]}
		if pr := lay.mask[i]; pr == nil {
			panel.Histogram.Missing = "No mask was given for this ROI, so its Γ histogram is not drawn."
		} else {
			h, err := histogramOf(in.Gamma, pr.Mask, gcap)
			if err != nil {
				return nil, fmt.Errorf("ROI %q: %w", roi.Name, err)
			}
			if h.Total == 0 {
				panel.Histogram.Missing = "No voxel of this ROI has a Γ (status: " + statusText(roi) + ")."
			} else {
				svg, err := histogramSVG(h, "Γ histogram: "+roi.Name)
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
			s := dvhSeries{Name: roi.Name, Color: lay.color[i], Curves: roi.DVH.Curves}
			all = append(all, s)
			svg, err := dvhSVG([]dvhSeries{s}, "Cumulative DVH: "+roi.Name, 300, 190, false)
			if err != nil {
				return nil, err
			}
			panel.DVH.SVG = template.HTML(svg)
			col := hexColor(lay.color[i])
			panel.DVH.Legend = []swatch{
				{Style: template.CSS("border-top-color:" + col), Label: "reference"},
				{Style: template.CSS("border-top-style:dashed;border-top-color:" + col), Label: "evaluated"},
			}
		}
		m.Panels = append(m.Panels, panel)
	}
	overlay := roiPanel{ID: dvhAllPanel, Name: "every ROI: DVHs overlaid"}
	overlay.Histogram.Missing = "The Γ histogram of every evaluated point is shown above."
	if len(all) == 0 {
		overlay.DVH.Missing = "The result holds no DVH curves."
	} else {
		svg, err := dvhSVG(all, "Cumulative DVHs: every ROI", 560, 340, true)
		if err != nil {
			return nil, err
		}
		overlay.DVH = figure{SVG: template.HTML(svg),
			Caption: "Reference solid, evaluated dashed; each ROI in its colour (Kelly's colours of maximum contrast) and named where its reference curve crosses 50 %."}
		overlay.DVH.Legend = []swatch{
			{Style: template.CSS("border-top-color:#000"), Label: "reference"},
			{Style: template.CSS("border-top-style:dashed;border-top-color:#000"), Label: "evaluated"},
		}
		for _, s := range all {
			overlay.DVH.Legend = append(overlay.DVH.Legend, swatch{Style: template.CSS("border-top-color:" + hexColor(s.Color)), Label: s.Name})
		}
	}
	m.Panels = append(m.Panels, overlay)
	m.DefaultPanel = dvhAllPanel
	if len(lay.order) > 0 {
		m.DefaultPanel = lay.id[lay.worst]
	}

	fillClusters(m, r)

	if err := fillSlices(m, in, r, lay); err != nil {
		return nil, err
	}
	if err := fillViewer(m, in, r, lay); err != nil {
		return nil, err
	}
	return m, nil
}

// fillClusters lists the failing regions, the largest first.
func fillClusters(m *model, r *result.Result) {
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
			Goto:     gotoAttr(c.CentroidMM),
			Extent:   fixed(clusterExtent(c.VolumeCC), 1),
		})
	}
}

// checkPage checks that the grids and masks fit together.
func checkPage(in Page) error {
	if in.Result == nil {
		return fmt.Errorf("no result")
	}
	if in.Reference == nil || in.Gamma == nil {
		return fmt.Errorf("the reference dose and the Γ grid are both needed for the figures")
	}
	if in.Reference.Len() == 0 {
		return fmt.Errorf("the reference grid is empty")
	}
	if !in.Gamma.SameGeometry(in.Reference) {
		return fmt.Errorf("the Γ grid %v does not have the reference grid's geometry %v", in.Gamma.Dims(), in.Reference.Dims())
	}
	if in.Difference != nil && !in.Difference.SameGeometry(in.Reference) {
		return fmt.Errorf("the difference grid %v does not have the reference grid's geometry %v", in.Difference.Dims(), in.Reference.Dims())
	}
	for _, pr := range in.ROIs {
		if pr.Mask == nil {
			return fmt.Errorf("ROI %q: no mask", pr.Name)
		}
		if pr.Mask.Dims() != in.Reference.Dims() || len(pr.Mask.Bits) != len(in.Reference.Data) {
			return fmt.Errorf("ROI %q: mask %v does not match the reference grid %v", pr.Name, pr.Mask.Dims(), in.Reference.Dims())
		}
	}
	return nil
}

// gotoAttr formats a point for the slice browser's data-goto attribute.
func gotoAttr(p [3]float64) string {
	return strconv.FormatFloat(p[0], 'f', 2, 64) + "," + strconv.FormatFloat(p[1], 'f', 2, 64) + "," + strconv.FormatFloat(p[2], 'f', 2, 64)
}

// noiseOf describes the evaluated dose's noise, nil when the result has
// none (noise handling off).
func noiseOf(r *result.Result) *noiseView {
	n := r.Noise
	if n == nil {
		return nil
	}
	v := &noiseView{Method: nonBlank(n.Method, "method not stated")}
	sigma := "unknown"
	if n.SigmaPercent != nil {
		sigma = fixed(*n.SigmaPercent, 2) + " %"
		if n.SigmaUncertaintyPercent != nil {
			sigma += " ± " + fixed(*n.SigmaUncertaintyPercent, 2) + " %"
		}
	}
	source := map[string]string{"estimated": "estimated from the evaluated dose", "given": "given", "map": "from the uncertainty map"}[n.Source]
	if source == "" {
		source = "not estimated"
	}
	v.Summary = fmt.Sprintf("1σ noise at the evaluated maximum (%s Gy): %s, %s; model %s.", fixed(n.MaxDoseGy, 2), sigma, source, nonBlank(n.Model, "not stated"))
	if !n.Corrected {
		v.Summary += " No correction was made."
		v.Judged = "No noise correction: the protocol's rules judged the figures against the evaluated dose as given."
		return v
	}
	v.Summary += fmt.Sprintf(" The comparison was made against the denoised evaluated dose as well: overall pass rate raw %s %%, corrected %s %%.", n.RawOverall.PassRateText, r.Overall.PassRateText)
	if n.Warning {
		v.Summary += " The noise moves a pass rate by more than 1 percentage point."
	}
	v.Judged = "The protocol's rules judged the noise-corrected figures; the tables and figures of this page show them."
	if n.Judged == "raw" {
		v.Judged = "The protocol's rules judged the raw figures (against the evaluated dose as given, noise included); the tables and figures of this page show the noise-corrected ones."
	}
	row := func(subject string, raw, corr result.GammaStats) noiseRow {
		nr := noiseRow{Subject: subject, Raw: raw.PassRateText, Corrected: corr.PassRateText, Shift: notAvailable,
			RawMean: fixedPtr(raw.GammaMean, 2), CorrectedMean: fixedPtr(corr.GammaMean, 2)}
		if raw.PassRate != nil && corr.PassRate != nil {
			d := *corr.PassRate - *raw.PassRate
			nr.Shift = strconv.FormatFloat(d, 'f', 1, 64)
			if d > 0 {
				nr.Shift = "+" + nr.Shift
			}
			nr.Moved = math.Abs(d) > 1
		}
		return nr
	}
	v.Rows = append(v.Rows, row("overall", n.RawOverall, r.Overall))
	for i, roi := range r.ROIs {
		if i < len(n.ROIs) {
			v.Rows = append(v.Rows, row(roi.Name, n.ROIs[i].GammaStats, roi.GammaStats))
		}
	}
	return v
}

// clusterExtent is the size (mm) of the region shown around a failing
// region of the given volume: three times the edge of a cube of that
// volume, at least 20 mm.
func clusterExtent(cc float64) float64 {
	return math.Max(20, 3*math.Cbrt(cc*1000))
}

// overallRow is the first row of the per-ROI table.
func overallRow(r *result.Result) roiRow {
	o := r.Overall
	row := roiRow{
		ID:        "overall",
		Name:      "overall (every evaluated point)",
		Evaluated: strconv.Itoa(o.Evaluated),
		PassRate:  o.PassRateText,
		GammaMean: fixedPtr(o.GammaMean, 2),
		GammaP95:  fixedPtr(o.GammaP95, 2),
		GammaMax:  fixedPtr(o.GammaMax, 2),
		Rules:     rulesFor(r, "overall"),
	}
	row.Failing = anyNotMet(row.Rules)
	return row
}

func roiTableRow(r *result.Result, i int, lay *roiLayout) roiRow {
	roi := r.ROIs[i]
	row := roiRow{
		ID:          lay.id[i],
		Name:        roi.Name,
		SwatchStyle: template.CSS("background-color:" + hexColor(lay.color[i])),
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
		Failing:     lay.failing[i],
	}
	for _, j := range lay.merged[i] {
		row.Rules = append(row.Rules, rulesFor(r, r.ROIs[j].Name)...)
		if row.AlsoAs != "" {
			row.AlsoAs += ", "
		}
		row.AlsoAs += fmt.Sprintf("%q (%s)", r.ROIs[j].Name, r.ROIs[j].Source)
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
	if g, ok := lay.goTo[i]; ok {
		row.Goto, row.Extent = gotoAttr(g.at), fixed(g.extent, 1)
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
		o := outcomeOf(rule)
		out = append(out, ruleMark{Class: o.class, Mark: o.mark, Text: text})
	}
	return out
}

func anyNotMet(marks []ruleMark) bool {
	for _, m := range marks {
		if m.Class == "notmet" {
			return true
		}
	}
	return false
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

// sliceCentre is where the fixed slices go through, and why.
func sliceCentre(in Page, r *result.Result) ([3]float64, string) {
	ref := in.Reference
	refMax, at := ref.Max()
	switch {
	case len(r.Clusters) > 0:
		c := r.Clusters[0]
		return c.CentroidMM, fmt.Sprintf("Slices through the centroid %s mm of the largest failing region (%s cc, maximum Γ %s).",
			mm3(c.CentroidMM), cc(c.VolumeCC), fixed(c.GammaMax, 2))
	case at >= 0:
		i, j, k := ref.IJK(at)
		p := ref.WorldOf(i, j, k)
		return p, fmt.Sprintf("No failing region: slices through the reference dose maximum, %s Gy at %s mm.", fixed(float64(refMax), 2), mm3(p))
	}
	lo, hi := ref.Bounds()
	var p [3]float64
	for a := range p {
		p[a] = (lo[a] + hi[a]) / 2
	}
	return p, fmt.Sprintf("The reference dose has no value: slices through the grid's centre %s mm.", mm3(p))
}

// normOf returns the dose isodoses refer to, and what it is.
func normOf(in Page, r *result.Result) (norm, greyMax float64, note string) {
	refMax, _ := in.Reference.Max()
	greyMax = float64(refMax)
	if !(greyMax > 0) {
		greyMax = 1
	}
	norm, note = r.Criteria.NormDoseGy, "the normalisation dose"
	if !(norm > 0) {
		norm, note = greyMax, "the reference maximum"
	}
	return norm, greyMax, note
}

// sliceFigures returns the three orthogonal slice figures through centre,
// each cropped to a square window mm wide around it (0: the whole slice).
func sliceFigures(in Page, r *result.Result, lay *roiLayout, centre [3]float64, window float64) []*sliceFigure {
	norm, greyMax, _ := normOf(in, r)
	var out []*sliceFigure
	for _, v := range views {
		s := extractSlice(in.Reference, v, centre)
		if window > 0 {
			across, down, _ := v.inPlane()
			s = s.crop(centre[across], centre[down], window)
		}
		f := &sliceFigure{
			Slice: s, Dose: s.values(in.Reference), Gamma: s.values(in.Gamma),
			GreyMax: greyMax, NormDose: norm, Marker: centre, GammaCap: gammaCap(r.Criteria, in.Gamma),
			Title: fmt.Sprintf("%s, %s = %s mm", capitalise(v.String()), patientAxisName[v.fixed()], fixed(s.Plane, 1)),
		}
		for _, i := range lay.order {
			if pr := lay.mask[i]; pr != nil {
				f.Outlines = append(f.Outlines, roiOutline{Color: lay.color[i], In: s.maskValues(pr.Mask)})
			}
		}
		for _, pr := range lay.extra {
			f.Outlines = append(f.Outlines, roiOutline{Color: pr.color, In: s.maskValues(pr.mask.Mask)})
		}
		out = append(out, f)
	}
	return out
}

// fillSlices renders the three fixed slices (shown without the slice
// browser: no script, printing a page whose browser did not run it).
func fillSlices(m *model, in Page, r *result.Result, lay *roiLayout) error {
	centre, caption := sliceCentre(in, r)
	norm, greyMax, normNote := normOf(in, r)
	m.SliceCaption = caption + fmt.Sprintf(" Grey: reference dose, black 0 Gy to white %s Gy (the reference maximum). Γ > 1 in colour from pale orange (just above 1) to dark red (the search cap, Γ = %s); Γ ≤ 1 shows the dose. Dashed lines: isodoses in %% of %s, %s Gy. The ring marks the point the three slices go through; letters name the patient directions (R/L right/left, A/P anterior/posterior, S/I superior/inferior).",
		fixed(greyMax, 2), fixed(gammaCap(r.Criteria, in.Gamma), 2), normNote, fixed(norm, 2))
	for _, f := range sliceFigures(in, r, lay, centre, 0) {
		svg, err := sliceSVG(f)
		if err != nil {
			return err
		}
		m.Slices = append(m.Slices, figure{SVG: template.HTML(svg)})
	}
	m.SliceLegend = append(m.SliceLegend, swatch{Style: template.CSS("border-top-width:8px;border-image:linear-gradient(to right," + strings.Join(gammaClasses, ",") + ") 1"),
		Label: "Γ from 1 to " + fixed(gammaCap(r.Criteria, in.Gamma), 2)})
	m.SliceLegend = append(m.SliceLegend, m.IsodoseLegend...)
	m.SliceLegend = append(m.SliceLegend, m.ROILegend...)
	return nil
}

// fillViewer prepares the slice browser.
func fillViewer(m *model, in Page, r *result.Result, lay *roiLayout) error {
	norm, _, normNote := normOf(in, r)
	centre, startNote := sliceCentre(in, r)
	vin := viewerInput{
		Ref: in.Reference, Gamma: in.Gamma, Diff: in.Difference,
		NormDose: norm, NormNote: normNote, ThresholdPercent: r.Criteria.ThresholdPercent,
		DosePercent: r.Criteria.DosePercent, GammaCap: gammaCap(r.Criteria, in.Gamma),
		Start: centre, StartNote: startNote,
	}
	if len(r.Clusters) > 0 {
		// Open on the largest failing region, with room around it.
		vin.StartExtent = math.Max(60, 3*clusterExtent(r.Clusters[0].VolumeCC))
	}
	for _, i := range lay.order {
		if pr := lay.mask[i]; pr != nil {
			vin.ROIs = append(vin.ROIs, viewerMask{Name: r.ROIs[i].Name, Color: hexColor(lay.color[i]), Row: lay.id[i], Mask: pr.Mask})
		}
	}
	for _, pr := range lay.extra {
		vin.ROIs = append(vin.ROIs, viewerMask{Name: pr.mask.Name, Color: hexColor(pr.color), Mask: pr.mask.Mask})
	}
	v, err := buildViewer(vin)
	if err != nil {
		return fmt.Errorf("slice browser: %w", err)
	}
	if m.ViewerData, err = v.html(); err != nil {
		return fmt.Errorf("slice browser: %w", err)
	}
	m.ViewerNote = v.Note
	m.ViewerDiff = in.Difference != nil
	d := r.Criteria.DosePercent
	if !(d > 0) {
		d = 3
	}
	for _, pct := range []float64{d, 2 * d, 5, 10} {
		m.DiffRanges = append(m.DiffRanges, diffRange{Value: exact(pct), Label: "±" + exact(pct) + " %", Selected: pct == 2*d})
	}
	return nil
}

func capitalise(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// interpolationText describes the interpolation a result names.
func interpolationText(name string) string {
	switch name {
	case "cubic-bspline":
		return "cubic B-spline (cubic-bspline)"
	case "trilinear":
		return "trilinear (trilinear)"
	case "linear-simplex":
		return "piecewise linear on six tetrahedra per cell (linear-simplex)"
	case "":
		return "not stated"
	}
	return name
}
