package protocol

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"voxgamma/result"
)

// subjectKind is what a rule applies to.
type subjectKind int

const (
	subjOverall subjectKind = iota
	subjTargets
	subjOARs
	subjROI
	subjIsodose
)

// subject is a parsed Rule.Subject.
type subject struct {
	kind  subjectKind
	name  string  // ROI name, for subjROI
	level float64 // percent, for subjIsodose
}

func parseSubject(s string) (subject, error) {
	t := strings.TrimSpace(s)
	lower := strings.ToLower(t)
	switch {
	case lower == "overall":
		return subject{kind: subjOverall}, nil
	case lower == "targets":
		return subject{kind: subjTargets}, nil
	case lower == "oars":
		return subject{kind: subjOARs}, nil
	case strings.HasPrefix(lower, "roi:"):
		name := strings.TrimSpace(t[len("roi:"):])
		if name == "" {
			return subject{}, fmt.Errorf("subject %q: no ROI name after roi:", s)
		}
		return subject{kind: subjROI, name: name}, nil
	case strings.HasPrefix(lower, "isodose:"):
		num := strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(t[len("isodose:"):]), "%"))
		v, err := strconv.ParseFloat(num, 64)
		if err != nil || !(v > 0) || math.IsInf(v, 0) {
			return subject{}, fmt.Errorf("subject %q: want isodose:PERCENT with a positive percentage, e.g. isodose:50", s)
		}
		return subject{kind: subjIsodose, level: v}, nil
	}
	return subject{}, fmt.Errorf("subject %q: want overall, targets, oars, roi:NAME or isodose:PERCENT", s)
}

// String returns the canonical form of the subject.
func (s subject) String() string {
	switch s.kind {
	case subjTargets:
		return "targets"
	case subjOARs:
		return "oars"
	case subjROI:
		return "roi:" + s.name
	case subjIsodose:
		return "isodose:" + num(s.level)
	}
	return "overall"
}

// words returns the subject as a phrase.
func (s subject) words() string {
	switch s.kind {
	case subjTargets:
		return "each target"
	case subjOARs:
		return "each organ at risk"
	case subjROI:
		return fmt.Sprintf("ROI %q", s.name)
	case subjIsodose:
		return "the " + num(s.level) + " % isodose"
	}
	return "overall"
}

// gammaMetrics are the metrics read from [result.GammaStats], in the
// order documented.
var gammaMetrics = []string{"pass_rate", "gamma_mean", "gamma_median", "gamma_p95", "gamma_p99", "gamma_max"}

// dvhMetrics are the DVH metrics a dvh_diff rule may name.
var dvhMetrics = []string{"mean", "max", "min", "d98", "d95", "d50", "d2", "d0_03cc"}

// coverageMetric is the share of the subject the comparison could look at:
// for overall, the percentage of the reference points at or above the
// threshold that were compared; for an ROI, the percentage of its volume
// inside both dose grids.
const coverageMetric = "coverage"

// metric is a parsed Rule.Metric.
type metric struct {
	base string // one of gammaMetrics, coverageMetric, or "dvh_diff_percent", "dvh_diff_gy"
	dvh  string // one of dvhMetrics, for the dvh_diff metrics
}

func parseMetric(s string) (metric, error) {
	t := strings.ToLower(strings.TrimSpace(s))
	if slices.Contains(gammaMetrics, t) || t == coverageMetric {
		return metric{base: t}, nil
	}
	base, m, ok := strings.Cut(t, ":")
	if ok && (base == "dvh_diff_percent" || base == "dvh_diff_gy") {
		m = strings.TrimSpace(m)
		if slices.Contains(dvhMetrics, m) {
			return metric{base: base, dvh: m}, nil
		}
		return metric{}, fmt.Errorf("metric %q: want %s:M with M one of %s", s, base, strings.Join(dvhMetrics, ", "))
	}
	return metric{}, fmt.Errorf("metric %q: want one of %s, %s, dvh_diff_percent:M or dvh_diff_gy:M (M one of %s)",
		s, strings.Join(gammaMetrics, ", "), coverageMetric, strings.Join(dvhMetrics, ", "))
}

func (m metric) isDVH() bool { return m.dvh != "" }

// isPercent reports whether the metric is a percentage of points or volume
// (pass rate, coverage): shown rounded down, never 100 unless it is.
func (m metric) isPercent() bool { return m.base == "pass_rate" || m.base == coverageMetric }

// String returns the canonical form of the metric.
func (m metric) String() string {
	if m.isDVH() {
		return m.base + ":" + m.dvh
	}
	return m.base
}

// words returns the metric as a short phrase.
func (m metric) words() string {
	switch m.base {
	case "pass_rate":
		return "pass rate"
	case "gamma_mean":
		return "mean Γ"
	case "gamma_median":
		return "median Γ"
	case "gamma_p95":
		return "Γ 95th percentile"
	case "gamma_p99":
		return "Γ 99th percentile"
	case "gamma_max":
		return "maximum Γ"
	case coverageMetric:
		return "coverage"
	}
	switch m.dvh {
	case "mean", "max", "min":
		return "ΔD" + m.dvh
	case "d0_03cc":
		return "ΔD0.03cc"
	}
	return "ΔD" + strings.TrimPrefix(m.dvh, "d")
}

// unit returns the unit of the metric's values, with a leading space, or
// "" for Γ.
func (m metric) unit() string {
	switch m.base {
	case "pass_rate", "dvh_diff_percent", coverageMetric:
		return " %"
	case "dvh_diff_gy":
		return " Gy"
	}
	return ""
}

// gammaValue returns the metric from Γ statistics.
func (m metric) gammaValue(g *result.GammaStats) *float64 {
	switch m.base {
	case "pass_rate":
		return g.PassRate
	case "gamma_mean":
		return g.GammaMean
	case "gamma_median":
		return g.GammaMedian
	case "gamma_p95":
		return g.GammaP95
	case "gamma_p99":
		return g.GammaP99
	case "gamma_max":
		return g.GammaMax
	}
	return nil
}

// overallValue returns the metric from the overall statistics.
func (m metric) overallValue(g *result.GammaStats) *float64 {
	if m.base == coverageMetric {
		return g.CoveragePercent
	}
	return m.gammaValue(g)
}

// dvhValue returns the metric's difference from a DVH pair.
func (m metric) dvhValue(p *result.DVHPair) *float64 {
	if p == nil {
		return nil
	}
	d := &p.DifferenceGy
	if m.base == "dvh_diff_percent" {
		d = &p.DifferencePercent
	}
	switch m.dvh {
	case "mean":
		return d.MeanGy
	case "max":
		return d.MaxGy
	case "min":
		return d.MinGy
	case "d98":
		return d.D98Gy
	case "d95":
		return d.D95Gy
	case "d50":
		return d.D50Gy
	case "d2":
		return d.D2Gy
	case "d0_03cc":
		return d.D003ccGy
	}
	return nil
}

// op is a comparison operator.
type op string

const (
	opGE    op = ">="
	opLE    op = "<="
	opAbsLE op = "abs<="
)

func parseOp(s string) (op, error) {
	t := strings.ToLower(strings.Join(strings.Fields(s), ""))
	switch op(t) {
	case opGE, opLE, opAbsLE:
		return op(t), nil
	}
	return "", fmt.Errorf("op %q: want >=, <= or abs<=", s)
}

// holds reports whether v satisfies the operator against limit; false for
// NaN.
func (o op) holds(v, limit float64) bool {
	switch o {
	case opGE:
		return v >= limit
	case opLE:
		return v <= limit
	case opAbsLE:
		return math.Abs(v) <= limit
	}
	return false
}

// symbol returns the operator as a mathematical sign.
func (o op) symbol() string {
	if o == opGE {
		return "≥"
	}
	return "≤"
}

// fieldError is a problem with one field of a rule.
type fieldError struct {
	field string
	err   error
}

// check returns the problems of the rule; isodose is the protocol's list
// of isodose ROIs.
func (r Rule) check(isodose []float64) []*fieldError {
	var errs []*fieldError
	add := func(field string, err error) { errs = append(errs, &fieldError{field, err}) }
	s, serr := parseSubject(r.Subject)
	if serr != nil {
		add("subject", serr)
	} else if s.kind == subjIsodose && !slices.Contains(isodose, s.level) {
		add("subject", fmt.Errorf("subject %q: the %s %% isodose ROI is not in isodose_rois", r.Subject, num(s.level)))
	}
	m, merr := parseMetric(r.Metric)
	if merr != nil {
		add("metric", merr)
	} else if serr == nil && s.kind == subjOverall && m.isDVH() {
		add("metric", fmt.Errorf("metric %q: a DVH difference needs an ROI subject; overall has no DVH", r.Metric))
	}
	o, oerr := parseOp(r.Op)
	if oerr != nil {
		add("op", oerr)
	} else if merr == nil && o == opAbsLE && !m.isDVH() {
		add("op", fmt.Errorf("op abs<= is for the signed dvh_diff metrics; %s is never negative, use <=", m))
	}
	switch {
	case math.IsNaN(r.Limit) || math.IsInf(r.Limit, 0):
		add("limit", fmt.Errorf("%g: want a finite number", r.Limit))
	case merr != nil:
	case m.isPercent() && (r.Limit < 0 || r.Limit > 100):
		add("limit", fmt.Errorf("%g: a %s limit is a percentage from 0 to 100", r.Limit, m.words()))
	case m.isPercent() && r.Limit == 0 && o == opGE:
		add("limit", fmt.Errorf("0: a %s of at least 0 %% checks nothing", m.words()))
	case m.isPercent() && r.Limit > 0 && r.Limit <= 1:
		add("limit", fmt.Errorf("%g: looks like a fraction, not a percentage; write %g for %g %%", r.Limit, 100*r.Limit, 100*r.Limit))
	case !m.isDVH() && r.Limit < 0:
		add("limit", fmt.Errorf("%g: Γ is never negative", r.Limit))
	case oerr == nil && o == opAbsLE && r.Limit < 0:
		add("limit", fmt.Errorf("%g: an absolute value is never below a negative limit", r.Limit))
	}
	switch strings.ToLower(strings.TrimSpace(r.WhenMissing)) {
	case "", MissingFail, MissingSkip:
	default:
		add("when_missing", fmt.Errorf("%q: want %s or %s", r.WhenMissing, MissingFail, MissingSkip))
	}
	return errs
}

// whenMissing returns the rule's when_missing, MissingFail when empty.
func (r Rule) whenMissing() string {
	if w := strings.ToLower(strings.TrimSpace(r.WhenMissing)); w != "" {
		return w
	}
	return MissingFail
}

// level returns the rule's level, "tolerance" when empty.
func (r Rule) level() string {
	if l := strings.TrimSpace(r.Level); l != "" {
		return l
	}
	return "tolerance"
}

// String returns the rule in words, e.g. "each target: pass rate ≥ 95 %",
// "overall: mean Γ ≤ 0.5" or "|ΔD95| of each target ≤ 3 %". A rule that does
// not parse is written with its fields as given.
func (r Rule) String() string {
	s, serr := parseSubject(r.Subject)
	m, merr := parseMetric(r.Metric)
	o, oerr := parseOp(r.Op)
	if err := errors.Join(serr, merr, oerr); err != nil {
		return fmt.Sprintf("%s: %s %s %s (invalid rule)", r.Subject, r.Metric, r.Op, num(r.Limit))
	}
	limit := num(r.Limit) + m.unit()
	if m.isDVH() {
		name := m.words()
		if o == opAbsLE {
			name = "|" + name + "|"
		}
		return fmt.Sprintf("%s of %s %s %s", name, s.words(), o.symbol(), limit)
	}
	if o == opAbsLE {
		return fmt.Sprintf("%s: |%s| %s %s", s.words(), m.words(), o.symbol(), limit)
	}
	return fmt.Sprintf("%s: %s %s %s", s.words(), m.words(), o.symbol(), limit)
}

// num writes a number in the shortest form that reads back exactly.
func num(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// measuredText formats a measured value with 8 significant digits (the
// caller shows all digits when these would read as the limit itself).
func measuredText(v float64) string { return strconv.FormatFloat(v, 'g', 8, 64) }
