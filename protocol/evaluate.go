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
	// Pass: every rule outcome was met.
	Pass = "pass"
	// Fail: at least one rule outcome was not met.
	Fail = "fail"
)

// Values of [result.ROI] fields that evaluation depends on.
const (
	kindTarget          = "target"
	kindOAR             = "oar"
	sourceStructureSet  = "structure set"
	sourceIsodose       = "isodose"
	statusEvaluated     = "evaluated"
	statusBelowThresh   = "all below threshold"
	reasonROINotFound   = "ROI not found"
	reasonNotEvaluated  = "not evaluated: "
	reasonNoResult      = "no comparison result"
	reasonInvalidPrefix = "invalid rule: "
)

// Evaluate checks the result against every rule of the protocol and
// returns the outcomes, in rule order and, within a rule, in the order of
// r.ROIs, with the verdict: [Pass] when every outcome was met, [Fail]
// otherwise. The package documentation sets out how each subject is
// matched and what happens to a value that could not be measured.
func (p *Protocol) Evaluate(r *result.Result) (outcomes []result.RuleOutcome, verdict string) {
	if p == nil || len(p.Rules) == 0 {
		return []result.RuleOutcome{{
			Rule:    "the protocol has at least one rule",
			Level:   "action",
			Subject: "protocol",
			Met:     false,
			Reason:  "the protocol has no rules: nothing was checked",
		}}, Fail
	}
	for _, rule := range p.Rules {
		outcomes = append(outcomes, evaluateRule(rule, r)...)
	}
	verdict = Pass
	for _, o := range outcomes {
		if !o.Met {
			verdict = Fail
		}
	}
	return outcomes, verdict
}

// evaluateRule returns the outcomes of one rule: one per matching ROI, or
// one for the rule as a whole.
func evaluateRule(rule Rule, r *result.Result) []result.RuleOutcome {
	base := result.RuleOutcome{Rule: rule.String(), Level: rule.level(), Subject: strings.TrimSpace(rule.Subject), Limit: rule.Limit}
	s, serr := parseSubject(rule.Subject)
	m, merr := parseMetric(rule.Metric)
	o, oerr := parseOp(rule.Op)
	if err := errors.Join(serr, merr, oerr); err != nil {
		base.Reason = reasonInvalidPrefix + strings.ReplaceAll(err.Error(), "\n", "; ")
		return []result.RuleOutcome{base}
	}
	for _, fe := range rule.check(nil) {
		// Ranges and combinations. Whether an isodose level is listed in
		// isodose_rois is left to Parse and Validate: here the ROI is
		// looked for in the result.
		if fe.field != "subject" {
			base.Reason = reasonInvalidPrefix + fe.field + ": " + fe.err.Error()
			return []result.RuleOutcome{base}
		}
	}
	base.Subject = s.String()
	if r == nil {
		base.Reason = reasonNoResult
		return []result.RuleOutcome{base}
	}
	if s.kind == subjOverall {
		base.Subject = "overall"
		v := m.gammaValue(&r.Overall)
		if v == nil || math.IsNaN(*v) {
			base.Reason = reasonNotEvaluated + "no reference point was evaluated"
			return []result.RuleOutcome{base}
		}
		return []result.RuleOutcome{measured(base, m, o, *v)}
	}
	var out []result.RuleOutcome
	for i := range r.ROIs {
		roi := &r.ROIs[i]
		if s.matches(roi) {
			out = append(out, evaluateROI(base, m, o, roi))
		}
	}
	if len(out) > 0 {
		return out
	}
	switch s.kind {
	case subjTargets:
		base.Met = true
		base.Reason = "no target ROI in this comparison"
	case subjOARs:
		base.Met = true
		base.Reason = "no organ-at-risk ROI in this comparison"
	default:
		base.Reason = reasonROINotFound
	}
	return []result.RuleOutcome{base}
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

// evaluateROI checks one ROI.
func evaluateROI(base result.RuleOutcome, m metric, o op, roi *result.ROI) result.RuleOutcome {
	base.Subject = roi.Name
	var v *float64
	if m.isDVH() {
		v = m.dvhValue(roi.DVH)
	} else {
		v = m.gammaValue(&roi.GammaStats)
	}
	if v != nil && !math.IsNaN(*v) {
		return measured(base, m, o, *v)
	}
	status := strings.TrimSpace(roi.Status)
	switch {
	case m.isDVH() && roi.DVH == nil && status != "" && status != statusEvaluated:
		base.Reason = "no DVH: " + status
	case m.isDVH() && roi.DVH == nil:
		base.Reason = "no DVH for this ROI in the result"
	case m.isDVH():
		base.Reason = "no " + m.words() + " in the result"
	case status != "" && status != statusEvaluated:
		base.Reason = reasonNotEvaluated + status
		// An organ at risk lying wholly in low dose is not a failure; a
		// target that could not be evaluated is.
		base.Met = strings.EqualFold(roi.Kind, kindOAR) && status == statusBelowThresh
	default:
		base.Reason = reasonNotEvaluated + "no point of this ROI was evaluated"
	}
	return base
}

// measured returns the outcome for a measured value.
func measured(base result.RuleOutcome, m metric, o op, v float64) result.RuleOutcome {
	base.Value = &v
	base.Met = o.holds(v, base.Limit)
	if !base.Met {
		what := ""
		if o == opAbsLE {
			what = "|value| "
		}
		text := measuredText(v)
		if text == num(base.Limit) {
			text = num(v) // all digits, so it does not read as the limit
		}
		base.Reason = fmt.Sprintf("measured %s%s, %snot %s %s%s", text, m.unit(), what, o.symbol(), num(base.Limit), m.unit())
	}
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
	if want.NormDose > 0 {
		differ("normalisation dose", applied.NormDoseGy, want.NormDose, " Gy")
	} else if src := strings.TrimSpace(applied.NormDoseSource); !strings.EqualFold(src, "reference maximum") {
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
