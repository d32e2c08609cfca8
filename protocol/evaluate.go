package protocol

import (
	"errors"
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"

	"voxgamma/result"
)

// Verdicts returned by [Protocol.Evaluate].
const (
	// Pass: at least one rule was met and none was not met.
	Pass = "pass"
	// Fail: at least one rule was not met, or none could be checked.
	Fail = "fail"
)

// Values of [result.ROI] fields that evaluation depends on.
const (
	kindTarget          = "target"
	kindOAR             = "oar"
	sourceStructureSet  = "structure set"
	sourceIsodose       = "isodose"
	reasonROINotFound   = "ROI not found"
	reasonNotEvaluated  = "not evaluated: "
	reasonNoResult      = "no comparison result"
	reasonInvalidPrefix = "invalid rule: "
	reasonNoStructures  = "run without a structure set (--no-structures): no ROI of the structure set to check"
)

// Evaluate checks the result against the protocol: first the overall
// coverage (see [Coverage]), then every rule. It returns the outcomes, in
// that order and, within a rule, in the order of r.ROIs, with the verdict:
// [Pass] when no outcome is [result.NotMet] and at least one is
// [result.Met], [Fail] otherwise. The package documentation sets out how
// each subject is matched and what happens to a value that could not be
// measured.
func (p *Protocol) Evaluate(r *result.Result) (outcomes []result.RuleOutcome, verdict string) {
	if p == nil || len(p.Rules) == 0 {
		return []result.RuleOutcome{finish(result.RuleOutcome{
			Rule:    "the protocol has at least one rule",
			Level:   "action",
			Subject: "protocol",
			Outcome: result.NotMet,
			Reason:  "the protocol has no rules: nothing was checked",
		}, metric{})}, Fail
	}
	if c := p.Coverage.OverallPercent; c > 0 {
		rule := Rule{Level: "action", Subject: "overall", Metric: coverageMetric, Op: string(opGE), Limit: c}
		outcomes = append(outcomes, p.evaluateRule(rule, r)...)
	}
	for _, rule := range p.Rules {
		outcomes = append(outcomes, p.evaluateRule(rule, r)...)
	}
	return outcomes, Verdict(outcomes)
}

// Verdict returns [Pass] when no outcome is [result.NotMet] and at least
// one is [result.Met]: rules that were all not applicable checked nothing.
func Verdict(outcomes []result.RuleOutcome) string {
	met := false
	for _, o := range outcomes {
		switch o.Outcome {
		case result.Met:
			met = true
		case result.NotApplicable:
		default:
			return Fail
		}
	}
	if !met {
		return Fail
	}
	return Pass
}

// evaluateRule returns the outcomes of one rule: one per matching ROI, or
// one for the rule as a whole.
func (p *Protocol) evaluateRule(rule Rule, r *result.Result) []result.RuleOutcome {
	base := result.RuleOutcome{Rule: rule.String(), Level: rule.level(), Subject: strings.TrimSpace(rule.Subject), Limit: rule.Limit, Outcome: result.NotMet}
	s, serr := parseSubject(rule.Subject)
	m, merr := parseMetric(rule.Metric)
	o, oerr := parseOp(rule.Op)
	if err := errors.Join(serr, merr, oerr); err != nil {
		base.Reason = reasonInvalidPrefix + strings.ReplaceAll(err.Error(), "\n", "; ")
		return []result.RuleOutcome{finish(base, m)}
	}
	for _, fe := range rule.check(nil) {
		// Ranges and combinations. Whether an isodose level is listed in
		// isodose_rois is left to Parse and Validate: here the ROI is
		// looked for in the result.
		if fe.field != "subject" {
			base.Reason = reasonInvalidPrefix + fe.field + ": " + fe.err.Error()
			return []result.RuleOutcome{finish(base, m)}
		}
	}
	base.Subject = s.String()
	if r == nil {
		base.Reason = reasonNoResult
		return []result.RuleOutcome{finish(base, m)}
	}
	common := globalConditions(r)
	if s.kind == subjOverall {
		base.Subject = "overall"
		base.Conditions = common
		v := m.overallValue(&r.Overall)
		if v == nil || math.IsNaN(*v) {
			base.Reason = reasonNotEvaluated + "no reference point was evaluated"
			return []result.RuleOutcome{finish(base, m)}
		}
		return []result.RuleOutcome{finish(measured(base, m, o, *v), m)}
	}
	var out []result.RuleOutcome
	for i := range r.ROIs {
		roi := &r.ROIs[i]
		if s.matches(roi) {
			b := base
			b.Conditions = append(append([]string{}, common...), roiConditions(roi)...)
			out = append(out, finish(p.evaluateROI(b, m, o, roi), m))
		}
	}
	if len(out) > 0 {
		return out
	}
	base.Conditions = common
	var missing string
	switch s.kind {
	case subjTargets:
		missing = "no target ROI in this comparison"
	case subjOARs:
		missing = "no organ-at-risk ROI in this comparison"
	default:
		missing = reasonROINotFound
	}
	switch {
	case r.Choices.NoStructures && s.kind != subjIsodose:
		base.Outcome, base.Reason = result.NotApplicable, reasonNoStructures
	case rule.whenMissing() == MissingSkip:
		base.Outcome, base.Reason = result.NotApplicable, missing+" (when_missing: skip)"
	default:
		base.Reason = missing + ": nothing to check, and the rule requires it (when_missing: fail)"
	}
	return []result.RuleOutcome{finish(base, m)}
}

// finish fills the fields every outcome carries: Met from Outcome, the
// value as shown, and a non-nil condition list.
func finish(o result.RuleOutcome, m metric) result.RuleOutcome {
	o.Met = o.Outcome == result.Met
	o.ValueText = valueText(o.Value, m)
	if o.Conditions == nil {
		o.Conditions = []string{}
	}
	return o
}

// valueText writes a measured value as every output shows it: percentages
// rounded down to two decimals (never 100.00 unless it is 100), other
// values with four significant digits.
func valueText(v *float64, m metric) string {
	switch {
	case v == nil:
		return "n/a"
	case m.isPercent():
		return result.FormatPercent(*v, 2)
	}
	return strconv.FormatFloat(*v, 'g', 4, 64)
}

// globalConditions lists the choices that changed how every rule of r was
// judged.
func globalConditions(r *result.Result) []string {
	c := append([]string{}, r.Choices.Overrides...)
	if r.Choices.UnusualNormDose {
		c = append(c, fmt.Sprintf("normalisation dose %.4g Gy accepted outside the plausible band (--accept-norm-dose)", r.Criteria.NormDoseGy))
	}
	if r.Choices.Method != "" {
		c = append(c, "search method "+r.Choices.Method+" (--"+r.Choices.Method+")")
	}
	if x := r.Choices.EvaluatedScale; x != nil && *x != 1 {
		c = append(c, fmt.Sprintf("evaluated dose multiplied by %s (%s)", strconv.FormatFloat(*x, 'g', -1, 64), r.Choices.EvaluatedScaleSource))
	}
	if n := r.Noise; n != nil && n.Corrected {
		sigma := "unknown"
		if n.SigmaPercent != nil {
			sigma = strconv.FormatFloat(*n.SigmaPercent, 'g', 3, 64) + " %"
		}
		if n.Judged == NoiseJudgeRaw {
			c = append(c, "Γ against the evaluated dose as given, its noise (σ "+sigma+" at the maximum, "+n.Source+") included (evaluated_noise: judge raw)")
		} else {
			c = append(c, "Γ against the evaluated dose corrected for its noise (σ "+sigma+" at the maximum, "+n.Source+"); the raw figures are in the result (evaluated_noise: judge corrected)")
		}
	}
	return c
}

// roiConditions lists the choices that changed how one ROI was sampled or
// classified.
func roiConditions(roi *result.ROI) []string {
	var c []string
	if roi.SubGridMM != nil {
		c = append(c, fmt.Sprintf("sampled on a %g mm sub-grid of reference points, not on the reference voxels (--subgrid)", *roi.SubGridMM))
	}
	if strings.HasPrefix(roi.KindSource, "command-line") {
		c = append(c, "kind "+roi.Kind+" from the "+roi.KindSource+" (--kind)")
	}
	return c
}

var isodoseName = regexp.MustCompile(`^isodose\s+([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*%`)

// matches reports whether an ROI of the result is (one of) the subject.
func (s subject) matches(roi *result.ROI) bool {
	switch s.kind {
	case subjTargets:
		return strings.EqualFold(roi.Kind, kindTarget) && strings.EqualFold(roi.Source, sourceStructureSet)
	case subjOARs:
		return strings.EqualFold(roi.Kind, kindOAR) && strings.EqualFold(roi.Source, sourceStructureSet)
	case subjROI:
		return strings.EqualFold(strings.TrimSpace(roi.Name), s.name)
	case subjIsodose:
		if !strings.EqualFold(roi.Source, sourceIsodose) {
			return false
		}
		m := isodoseName.FindStringSubmatch(strings.ToLower(strings.TrimSpace(roi.Name)))
		if m == nil {
			return false
		}
		v, err := strconv.ParseFloat(m[1], 64)
		return err == nil && v == s.level
	}
	return false
}

// evaluateROI checks one ROI: an ROI not covered as the protocol requires
// is not judged on its covered part; a value that could not be measured is
// handled as the package documentation says.
func (p *Protocol) evaluateROI(base result.RuleOutcome, m metric, o op, roi *result.ROI) result.RuleOutcome {
	base.Subject = roi.Name
	var v *float64
	switch {
	case m.isDVH():
		v = m.dvhValue(roi.DVH)
	case m.base == coverageMetric:
		v = roi.CoveredPercent
	default:
		v = m.gammaValue(&roi.GammaStats)
	}
	if v != nil && !math.IsNaN(*v) {
		out := measured(base, m, o, *v)
		if m.base != coverageMetric && out.Outcome == result.Met && !p.covered(roi) {
			out.Outcome = result.NotMet
			out.Reason = p.coverageReason(roi)
		}
		return out
	}
	if !p.covered(roi) {
		base.Reason = p.coverageReason(roi)
		return base
	}
	status := roi.Status
	switch {
	case m.isDVH() && roi.DVH == nil && status != "" && !status.Evaluated():
		base.Reason = "no DVH: " + string(status)
	case m.isDVH() && roi.DVH == nil:
		base.Reason = "no DVH for this ROI in the result"
	case m.isDVH():
		base.Reason = "no " + m.words() + " in the result"
	case status == result.StatusBelowThreshold && strings.EqualFold(roi.Kind, kindOAR):
		// An organ at risk lying wholly in low dose is not a failure: it
		// was looked at, and no point of it reaches the threshold.
		base.Outcome = result.Met
		base.Reason = "every point of this organ at risk is below the low-dose threshold"
	case status != "" && !status.Evaluated():
		base.Reason = reasonNotEvaluated + strings.TrimPrefix(string(status), reasonNotEvaluated)
		if roi.StatusDetail != "" {
			base.Reason += " (" + roi.StatusDetail + ")"
		}
	default:
		base.Reason = reasonNotEvaluated + "no point of this ROI was evaluated"
	}
	return base
}

// covered reports whether the ROI is covered as the protocol requires. An
// ROI whose coverage is unknown (no volume) is left to its status.
func (p *Protocol) covered(roi *result.ROI) bool {
	c := roi.CoveredPercent
	return c == nil || p.Coverage.ROIPercent <= 0 || *c >= p.Coverage.ROIPercent
}

func (p *Protocol) coverageReason(roi *result.ROI) string {
	return fmt.Sprintf("only %s %% of this ROI lies inside both dose grids, and the protocol judges an ROI only when at least %s %% does (coverage.roi_percent)",
		result.FormatPercent(*roi.CoveredPercent, 2), num(p.Coverage.ROIPercent))
}

// measured returns the outcome for a measured value.
func measured(base result.RuleOutcome, m metric, o op, v float64) result.RuleOutcome {
	base.Value = &v
	base.Outcome = result.NotMet
	if o.holds(v, base.Limit) {
		base.Outcome = result.Met
		return base
	}
	what := ""
	if o == opAbsLE {
		what = "|value| "
	}
	text := valueText(&v, m)
	if !m.isPercent() {
		text = measuredText(v)
		if text == num(base.Limit) {
			text = num(v) // all digits, so it does not read as the limit
		}
	}
	base.Reason = fmt.Sprintf("measured %s%s, %snot %s %s%s", text, m.unit(), what, o.symbol(), num(base.Limit), m.unit())
	return base
}

// CheckCriteria reports how the criteria applied in a comparison differ
// from the protocol's (dose and distance criteria, normalisation,
// threshold, search distance, normalisation dose), or nil when they agree.
// The protocol's limits mean nothing for a result obtained with other
// criteria.
func (p *Protocol) CheckCriteria(applied result.Criteria) error {
	want, err := p.GammaCriteria()
	if err != nil {
		return err
	}
	var diffs []string
	differ := func(what string, a, w float64, unit string) {
		if !agree(a, w) {
			diffs = append(diffs, fmt.Sprintf("%s %s%s applied, %s%s in the protocol", what, num(a), unit, num(w), unit))
		}
	}
	differ("dose criterion", applied.DosePercent, want.DosePercent, " %")
	differ("DTA", applied.DTAmm, want.DTA, " mm")
	if !strings.EqualFold(strings.TrimSpace(applied.Normalisation), want.Normalisation.String()) {
		diffs = append(diffs, fmt.Sprintf("normalisation %q applied, %q in the protocol", applied.Normalisation, want.Normalisation))
	}
	differ("threshold", applied.ThresholdPercent, want.ThresholdPercent, " %")
	differ("search distance", applied.SearchMM, want.SearchRadius(), " mm")
	switch src := strings.TrimSpace(applied.NormDoseSource); {
	case want.NormDose > 0:
		differ("normalisation dose", applied.NormDoseGy, want.NormDose, " Gy")
	case p.NormDoseFromPlan():
		if !strings.EqualFold(src, NormDoseFromPrescription) {
			diffs = append(diffs, fmt.Sprintf("normalisation dose from %q applied, the RT Plan's prescription in the protocol", src))
		}
	case !strings.EqualFold(src, "reference maximum"):
		diffs = append(diffs, fmt.Sprintf("normalisation dose from %q applied, the reference maximum in the protocol", src))
	}
	if len(diffs) == 0 {
		return nil
	}
	return fmt.Errorf("protocol %q: criteria differ: %s", p.Name, strings.Join(diffs, "; "))
}

// agree reports whether two criteria values agree to within rounding.
func agree(a, b float64) bool {
	return math.Abs(a-b) <= 1e-9*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}
