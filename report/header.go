package report

import (
	"encoding/json"
	"fmt"
	"html/template"
	"sort"
	"strconv"
	"strings"

	"voxgamma/result"
)

// fillHeader fills the identification, plan, criteria, protocol, inputs,
// rules, failures and verdict.
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
		addOnce(&names, "name", personName(in.PatientName))
		addOnce(&frames, "for", in.FrameOfReferenceUID)
		row := inputRow{
			Role: in.Role, Path: pathHTML(in.Path), SHA256: in.SHA256, Modality: in.Modality,
			FrameOfReference: in.FrameOfReferenceUID, Description: in.Description,
		}
		row.Patient = strings.TrimSpace(in.PatientID + " " + personName(in.PatientName))
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
	m.Plan = planOf(r.Plan)

	c := r.Criteria
	m.CriteriaLabel = c.Label
	m.CriteriaDetails = []string{
		"dose difference " + exact(c.DosePercent) + " %, " + nonBlank(c.Normalisation, "normalisation not stated"),
		"distance to agreement " + exact(c.DTAmm) + " mm",
		"normalisation dose " + fixed(c.NormDoseGy, 3) + " Gy (" + nonBlank(c.NormDoseSource, "source not stated") + ")",
		"low-dose threshold " + exact(c.ThresholdPercent) + " % of the normalisation dose",
		"search distance " + exact(c.SearchMM) + " mm",
		"search method: " + nonBlank(c.Method, "not stated"),
		"evaluated dose between its grid nodes: " + interpolationText(c.Interpolation),
	}

	m.Title = "voxgamma dose comparison"
	m.Heading = "Dose comparison review"
	if len(ids) > 0 {
		m.Title += ": " + strings.Join(ids, ", ")
	}
	if c.Label != "" {
		m.Title += " (" + c.Label + ")"
	}
	m.ProtocolName, m.ProtocolLines = protocolView(r.Protocol, c)
	m.NotEvaluated = notEvaluated(r)

	met, na := 0, 0
	var notMet, others []ruleRow
	for _, rule := range r.Rules {
		o := outcomeOf(rule)
		row := ruleRow{
			Class: o.class, Mark: o.mark, Rule: rule.Rule, Level: rule.Level, Subject: rule.Subject,
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
		switch o.class {
		case "met":
			met++
		case "na":
			na++
		}
		if o.notMet {
			notMet = append(notMet, row)
			line := fmt.Sprintf("%s: %s", rule.Subject, rule.Rule)
			if rule.Level != "" {
				line += " (" + rule.Level + ")"
			}
			line += ": measured " + row.Value
			if rule.Reason != "" && rule.Value == nil {
				line += ", " + rule.Reason
			}
			m.Failures = append(m.Failures, line)
		} else {
			others = append(others, row)
		}
	}
	// Rules not met first, each group in the protocol's order.
	m.Rules = append(notMet, others...)
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

// notEvaluated lists what was not evaluated, leaving out zero counts.
// Points capped at the search distance are not among them: they were
// evaluated (and failed), and the Γ histogram and notes say so.
func notEvaluated(r *result.Result) []string {
	var out []string
	o := r.Overall
	if o.BelowThreshold > 0 {
		out = append(out, fmt.Sprintf("%d reference points below the low-dose threshold", o.BelowThreshold))
	}
	if o.OutsideEvaluated > 0 {
		out = append(out, fmt.Sprintf("%d reference points at or above the threshold outside the evaluated grid", o.OutsideEvaluated))
	}
	for _, roi := range r.ROIs {
		if !roi.Status.Evaluated() {
			out = append(out, fmt.Sprintf("ROI %q: %s", roi.Name, nonBlank(statusText(roi), "status not stated")))
		}
		if c := roi.CoveredPercent; c != nil && *c < 100 {
			out = append(out, fmt.Sprintf("ROI %q: only %s %% of its volume lies inside both dose grids", roi.Name, result.FormatPercent(*c, 2)))
		}
	}
	return out
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

// personName shows a DICOM person name (PS3.5 section 6.2: components
// family^given^middle^prefix^suffix, component groups separated by "=")
// as "Family, Prefix Given Middle, Suffix", from its first non-empty group.
// A value without "^" (a pseudonym, a free-text name) is shown as it is.
func personName(pn string) string {
	groups := strings.Split(pn, "=")
	g := ""
	for _, x := range groups {
		if strings.TrimSpace(strings.ReplaceAll(x, "^", "")) != "" {
			g = x
			break
		}
	}
	if !strings.Contains(g, "^") {
		return strings.TrimSpace(g)
	}
	c := strings.Split(g, "^")
	for len(c) < 5 {
		c = append(c, "")
	}
	for i := range c {
		c[i] = strings.TrimSpace(c[i])
	}
	given := strings.Join(nonEmpty(c[3], c[1], c[2]), " ")
	out := strings.Join(nonEmpty(c[0], given), ", ")
	if c[4] != "" {
		out += ", " + c[4]
	}
	return out
}

// pathHTML escapes a file path and allows line breaks after each
// separator (and nowhere else), so a long path wraps at folder boundaries.
func pathHTML(p string) template.HTML {
	var b strings.Builder
	for _, r := range p {
		b.WriteString(template.HTMLEscapeString(string(r)))
		if r == '/' || r == '\\' {
			b.WriteString("<wbr>")
		}
	}
	return template.HTML(b.String())
}

// protocolView returns the protocol's name (its "name" field, whatever its
// case, or the protocol itself when it is a string) and the protocol as
// lines to show, with the criteria values left to a default (0 or absent)
// shown as the values applied.
func protocolView(p any, applied result.Criteria) (name string, lines []protoLine) {
	if p == nil {
		return "none given", nil
	}
	if s, ok := p.(string); ok {
		return s, nil
	}
	b, err := json.Marshal(p)
	if err != nil {
		return "(protocol cannot be shown: " + err.Error() + ")", nil
	}
	var v any
	if err := json.Unmarshal(b, &v); err != nil {
		return "(protocol cannot be shown: " + err.Error() + ")", nil
	}
	fields, _ := v.(map[string]any)
	keys := orderedKeys(fields)
	for _, k := range keys {
		if strings.EqualFold(k, "name") {
			if s, ok := fields[k].(string); ok && s != "" {
				name = s
				break
			}
		}
	}
	if name == "" {
		name = "unnamed"
	}
	lines = protoLines(v, 0, "", applied)
	return name, lines
}

// protoKeyOrder puts a protocol's usual keys in reading order; others
// follow alphabetically.
var protoKeyOrder = []string{"name", "description", "source", "criteria", "roi_kinds", "isodose_rois", "rules",
	"level", "subject", "metric", "op", "limit", "pattern", "kind", "override",
	"normalisation", "threshold_percent", "search_mm", "norm_dose_gy"}

func orderedKeys(m map[string]any) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	rank := func(k string) int {
		for i, o := range protoKeyOrder {
			if strings.EqualFold(o, k) {
				return i
			}
		}
		return len(protoKeyOrder)
	}
	sort.Slice(keys, func(i, j int) bool {
		ri, rj := rank(keys[i]), rank(keys[j])
		if ri != rj {
			return ri < rj
		}
		return keys[i] < keys[j]
	})
	return keys
}

// protoLines flattens a decoded JSON value into lines. path is the key
// path ("criteria.search_mm") used to resolve defaults.
func protoLines(v any, depth int, path string, applied result.Criteria) []protoLine {
	var out []protoLine
	switch x := v.(type) {
	case map[string]any:
		for _, k := range orderedKeys(x) {
			child := strings.TrimPrefix(path+"."+k, ".")
			switch y := x[k].(type) {
			case map[string]any:
				out = append(out, protoLine{Depth: depth, Key: k})
				out = append(out, protoLines(y, depth+1, child, applied)...)
			case []any:
				if len(y) == 0 {
					out = append(out, protoLine{Depth: depth, Key: k, Value: "none"})
					continue
				}
				if scalars(y) {
					out = append(out, protoLine{Depth: depth, Key: k, Value: joinScalars(y)})
					continue
				}
				out = append(out, protoLine{Depth: depth, Key: k})
				for i, it := range y {
					num := strconv.Itoa(i+1) + "."
					if flat, ok := flatMap(it); ok {
						// A list item of scalars reads best on one line.
						out = append(out, protoLine{Depth: depth + 1, Key: num, Value: flat, Item: true})
						continue
					}
					out = append(out, protoLine{Depth: depth + 1, Key: num, Item: true})
					out = append(out, protoLines(it, depth+2, child, applied)...)
				}
			default:
				val, note := resolved(child, y, applied)
				out = append(out, protoLine{Depth: depth, Key: k, Value: val, Note: note})
			}
		}
	default:
		out = append(out, protoLine{Depth: depth, Value: scalar(v)})
	}
	return out
}

// flatMap writes a map of scalars as "key: value · key: value".
func flatMap(v any) (string, bool) {
	m, ok := v.(map[string]any)
	if !ok {
		return "", false
	}
	var parts []string
	for _, k := range orderedKeys(m) {
		switch m[k].(type) {
		case map[string]any, []any:
			return "", false
		}
		parts = append(parts, k+": "+scalar(m[k]))
	}
	return strings.Join(parts, " · "), true
}

func scalars(v []any) bool {
	for _, x := range v {
		switch x.(type) {
		case map[string]any, []any:
			return false
		}
	}
	return true
}

func joinScalars(v []any) string {
	parts := make([]string, len(v))
	for i, x := range v {
		parts[i] = scalar(x)
	}
	return strings.Join(parts, ", ")
}

func scalar(v any) string {
	switch x := v.(type) {
	case nil:
		return "none"
	case string:
		return x
	case float64:
		return exact(x)
	case bool:
		if x {
			return "yes"
		}
		return "no"
	}
	return fmt.Sprint(v)
}

// resolved shows a criteria value of the protocol; one left to its default
// (0, absent) is shown as the value applied, with where it came from, and
// one the command line changed is shown with the value applied.
func resolved(path string, v any, c result.Criteria) (string, string) {
	shown := scalar(v)
	num, isNum := v.(float64)
	unset := v == nil || (isNum && num == 0)
	switch strings.ToLower(path) {
	case "criteria.search_mm":
		if unset {
			return exact(c.SearchMM) + " mm", "default: 3 × the distance to agreement"
		}
		if isNum && num != c.SearchMM {
			return shown + " mm", "applied: " + exact(c.SearchMM) + " mm (given on the command line)"
		}
		return shown + " mm", ""
	case "criteria.norm_dose_gy":
		if unset {
			return fixed(c.NormDoseGy, 3) + " Gy", "default: " + nonBlank(c.NormDoseSource, "the reference maximum")
		}
		if isNum && num != c.NormDoseGy {
			return shown + " Gy", "applied: " + fixed(c.NormDoseGy, 3) + " Gy (" + c.NormDoseSource + ")"
		}
		return shown + " Gy", ""
	case "criteria.threshold_percent":
		if v == nil {
			return exact(c.ThresholdPercent) + " %", "default"
		}
		if isNum && num != c.ThresholdPercent {
			return shown + " %", "applied: " + exact(c.ThresholdPercent) + " % (given on the command line)"
		}
		return shown + " %", ""
	case "criteria.normalisation":
		if v == nil || shown == "" {
			return c.Normalisation, "default"
		}
		if shown != c.Normalisation {
			return shown, "applied: " + c.Normalisation + " (given on the command line)"
		}
	case "criteria.criteria":
		if v == nil || shown == "" {
			return c.Label, "default"
		}
		want := exact(c.DosePercent) + "%/" + exact(c.DTAmm) + "mm"
		if strings.ReplaceAll(strings.ToLower(shown), " ", "") != strings.ToLower(want) {
			return shown, "applied: " + want + " (given on the command line)"
		}
	}
	return shown, ""
}

// planView is the plan as the page shows it.
type planView struct {
	Label, Name, Description string
	Source, Approval, Intent string
	Prescription             string
	Fractions                string
	ReferenceDose            string
	Matches                  bool
	Beams                    []planBeamRow
}

type planBeamRow struct {
	Number, Name, Type, Radiation, Delivery, Machine, Energy, Gantry, Meterset, Group string
}

// planOf formats the result's plan; nil without one.
func planOf(p *result.Plan) *planView {
	if p == nil {
		return nil
	}
	v := &planView{Label: p.Label, Name: p.Name, Description: p.Description, Source: p.Source,
		Approval: p.ApprovalStatus, Intent: p.Intent, ReferenceDose: p.ReferenceDose, Matches: p.ReferenceDose == "names this plan"}
	if p.PrescriptionGy == nil {
		v.Prescription = "not stated in the plan"
	} else {
		v.Prescription = exact(*p.PrescriptionGy) + " Gy"
		var levels []string
		for _, rx := range p.Prescriptions {
			levels = append(levels, fmt.Sprintf("%s %s Gy", nonBlank(rx.Description, "target"), exact(rx.DoseGy)))
		}
		if len(levels) > 0 {
			v.Prescription += " (" + strings.Join(levels, "; ") + ")"
		}
	}
	if p.FractionsPlanned == nil {
		v.Fractions = "not stated in the plan"
	} else {
		v.Fractions = strconv.Itoa(*p.FractionsPlanned)
		if len(p.FractionGroups) > 1 {
			var parts []string
			for _, g := range p.FractionGroups {
				n := "not stated"
				if g.FractionsPlanned != nil {
					n = strconv.Itoa(*g.FractionsPlanned)
				}
				parts = append(parts, fmt.Sprintf("group %d: %s", g.Number, n))
			}
			v.Fractions += " (" + strings.Join(parts, "; ") + ")"
		}
		if p.PrescriptionGy != nil && *p.FractionsPlanned > 0 && len(p.FractionGroups) == 1 {
			v.Fractions += fmt.Sprintf(", %s Gy per fraction", fixed(*p.PrescriptionGy/float64(*p.FractionsPlanned), 2))
		}
	}
	for _, b := range p.Beams {
		row := planBeamRow{Number: strconv.Itoa(b.Number), Name: b.Name, Type: b.Type, Radiation: b.RadiationType,
			Delivery: b.DeliveryType, Machine: b.Machine, Energy: notAvailable, Gantry: notAvailable, Meterset: notAvailable, Group: "none"}
		if b.EnergyNominal != nil {
			row.Energy = exact(*b.EnergyNominal)
		}
		if b.GantryDeg != nil {
			row.Gantry = exact(*b.GantryDeg)
		}
		if b.Meterset != nil {
			row.Meterset = fixed(*b.Meterset, 1) + " " + b.MetersetUnit
		}
		if b.FractionGroup != 0 {
			row.Group = strconv.Itoa(b.FractionGroup)
		}
		v.Beams = append(v.Beams, row)
	}
	return v
}
