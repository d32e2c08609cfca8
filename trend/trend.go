package trend

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"time"

	"voxgamma/record"
	"voxgamma/spc"
)

// Metric is one quantity followed per plan.
type Metric struct {
	// Name is the metric's name on the command line and in JSON.
	Name string
	// Title says what it is, in words.
	Title string
	// Unit is "%" for pass rates, "" for Γ.
	Unit string
	// HigherIsWorse is true for Γ, false for pass rates.
	HigherIsWorse bool
	// Kind is the ROI kind of a per-kind pass rate ("" for overall).
	Kind string
	// Subject and RuleMetric are the protocol rule's subject and metric
	// that check it ("" when no protocol rule can: body and other ROIs).
	Subject, RuleMetric string
	// value reads the metric of a plan; ok is false when it has none.
	value func(p *record.Point) (float64, bool)
}

// IsPassRate reports whether the metric is a pass rate (TG-218's action
// limit applies).
func (m Metric) IsPassRate() bool { return m.Unit == "%" }

func kindMetric(kind, title, subject string) Metric {
	return Metric{Name: kind + "_pass_rate", Title: title, Unit: "%", Kind: kind, Subject: subject, RuleMetric: "pass_rate",
		value: func(p *record.Point) (float64, bool) { return p.Worst(kind) }}
}

// Metrics are the metrics followed, in the order shown. A plan's per-kind
// pass rate is that of its worst ROI of the kind among the structure set's
// evaluated ROIs: the value a protocol rule on "each target" (or each organ
// at risk) is decided by.
var Metrics = []Metric{
	{Name: "overall_pass_rate", Title: "overall pass rate", Unit: "%", Subject: "overall", RuleMetric: "pass_rate",
		value: func(p *record.Point) (float64, bool) { return deref(p.PassRate) }},
	kindMetric("target", "worst target's pass rate", "targets"),
	kindMetric("oar", "worst organ at risk's pass rate", "oars"),
	kindMetric("body", "body outline's pass rate", ""),
	kindMetric("other", "worst other structure's pass rate", ""),
	{Name: "gamma_mean", Title: "overall mean Γ", HigherIsWorse: true, Subject: "overall", RuleMetric: "gamma_mean",
		value: func(p *record.Point) (float64, bool) { return deref(p.GammaMean) }},
}

func deref(p *float64) (float64, bool) {
	if p == nil {
		return 0, false
	}
	return *p, true
}

// MetricByName returns the metric of that name.
func MetricByName(name string) (Metric, bool) {
	for _, m := range Metrics {
		if m.Name == strings.ToLower(strings.TrimSpace(name)) {
			return m, true
		}
	}
	return Metric{}, false
}

// MetricNames lists the metrics' names.
func MetricNames() []string {
	var n []string
	for _, m := range Metrics {
		n = append(n, m.Name)
	}
	return n
}

// Group is a set of plans whose limits are computed together: the same
// values of the grouping labels and the same criteria (limits across
// different criteria mean nothing).
type Group struct {
	// Labels holds the grouping labels' values (only the keys grouped by).
	Labels record.Labels
	// By are the label keys grouped by.
	By []string
	// Criteria is the criteria label with the low-dose threshold.
	Criteria string
	// Points are the group's plans in time order.
	Points []record.Point
	// allLabels is set when grouped by every label (the default): empty
	// labels are then left out of the name.
	allLabels bool
}

// Name is the group in words: its labels and criteria.
func (g *Group) Name() string {
	var parts []string
	for _, k := range g.By {
		v := g.Labels.Get(k)
		if v == "" {
			if g.allLabels {
				continue
			}
			v = "(none)"
		}
		parts = append(parts, k+"="+v)
	}
	if len(parts) == 0 {
		return g.Criteria
	}
	return strings.Join(parts, ", ") + " · " + g.Criteria
}

// Series is one metric of one group, with its chart.
type Series struct {
	Group  *Group
	Metric Metric
	// Points are the group's plans that have the metric, in time order, and
	// Values their values.
	Points []*record.Point
	Values []float64
	// Chart is the individuals chart; ChartErr is set when it cannot be
	// made (fewer than two plans).
	Chart    spc.IChart
	ChartErr error
	// Action is TG-218's lower action limit (pass rates only, nil else).
	Action, ActionWidth *float64
	// Signals are the Western Electric rule signals.
	Signals []spc.Signal
	// Warnings are what a physicist must know about these limits.
	Warnings []string
}

// Tolerance is the control limit on the side where values are worse: the
// LCL of a pass rate (at least 0, at most 100), the UCL of Γ (at least 0);
// nil without a chart.
func (s *Series) Tolerance() *float64 {
	if s.ChartErr != nil {
		return nil
	}
	v := s.Chart.LCL
	if s.Metric.HigherIsWorse {
		v = math.Max(0, s.Chart.UCL)
	} else {
		v = math.Min(100, math.Max(0, v))
	}
	return &v
}

// Flagged returns the indices of the points with a signal, ascending,
// and the rules met at each.
func (s *Series) Flagged() ([]int, map[int][]int) {
	rules := map[int][]int{}
	var idx []int
	for _, sg := range s.Signals {
		if _, ok := rules[sg.Index]; !ok {
			idx = append(idx, sg.Index)
		}
		rules[sg.Index] = append(rules[sg.Index], sg.Rule)
	}
	sort.Ints(idx)
	return idx, rules
}

// Options configure an analysis.
type Options struct {
	// By are the label keys to group by; nil means every label.
	By []string
	// Metrics are the metric names to follow; nil means all.
	Metrics []string
}

// Analysis is the process control of a set of recorded plans.
type Analysis struct {
	// Plans counts the plans analysed; First and Last bound their times.
	Plans       int
	First, Last time.Time
	Groups      []*Group
	Series      []*Series
}

// Analyze groups points (in time order, as the store returns them) and
// computes, per group and metric, the individuals chart, TG-218's action
// limit (pass rates) and the Western Electric signals. Groups are ordered
// by name, series by group then metric.
func Analyze(points []record.Point, opt Options) (*Analysis, error) {
	by := slices.Clone(opt.By)
	if opt.By == nil {
		by = slices.Clone(record.LabelKeys)
	}
	for i, k := range by {
		if !record.IsLabelKey(k) {
			return nil, fmt.Errorf("unknown label %q: want one of %s", k, strings.Join(record.LabelKeys, ", "))
		}
		by[i] = record.NormaliseKey(k)
	}
	var metrics []Metric
	if opt.Metrics == nil {
		metrics = Metrics
	}
	for _, n := range opt.Metrics {
		m, ok := MetricByName(n)
		if !ok {
			return nil, fmt.Errorf("unknown metric %q: want one of %s", n, strings.Join(MetricNames(), ", "))
		}
		metrics = append(metrics, m)
	}
	a := &Analysis{Plans: len(points)}
	type groupKey struct {
		labels   record.Labels
		criteria string
		thresh   float64
	}
	groups := map[groupKey]*Group{}
	for _, p := range points {
		if a.First.IsZero() || p.ComparedAt.Before(a.First) {
			a.First = p.ComparedAt
		}
		if p.ComparedAt.After(a.Last) {
			a.Last = p.ComparedAt
		}
		var l record.Labels
		for _, k := range by {
			l.Set(k, p.Labels.Get(k))
		}
		key := groupKey{l, p.CriteriaLabel, p.ThresholdPercent}
		g := groups[key]
		if g == nil {
			crit := fmt.Sprintf("%s, threshold %g %%", p.CriteriaLabel, p.ThresholdPercent)
			g = &Group{Labels: l, By: by, Criteria: crit, allLabels: opt.By == nil}
			groups[key] = g
			a.Groups = append(a.Groups, g)
		}
		g.Points = append(g.Points, p)
	}
	slices.SortFunc(a.Groups, func(x, y *Group) int { return strings.Compare(x.Name(), y.Name()) })
	for _, g := range a.Groups {
		for _, m := range metrics {
			s := &Series{Group: g, Metric: m}
			s.Points = make([]*record.Point, 0, len(g.Points))
			s.Values = make([]float64, 0, len(g.Points))
			for i := range g.Points {
				if v, ok := m.value(&g.Points[i]); ok {
					s.Points = append(s.Points, &g.Points[i])
					s.Values = append(s.Values, v)
				}
			}
			if len(s.Values) == 0 {
				continue
			}
			s.Chart, s.ChartErr = spc.NewIChart(s.Values)
			if s.ChartErr != nil {
				s.Warnings = append(s.Warnings, fmt.Sprintf("%d plan: no control limits (they need 2 plans at least)", len(s.Values)))
				a.Series = append(a.Series, s)
				continue
			}
			if len(s.Values) < spc.MinPlans {
				s.Warnings = append(s.Warnings, fmt.Sprintf("only %d plans: limits from fewer than %d plans are uncertain (trial control limits are commonly set from 20 to 25 subgroups: common SPC practice)", len(s.Values), spc.MinPlans))
			}
			if s.Chart.MRBar == 0 {
				s.Warnings = append(s.Warnings, "no variation between consecutive plans: the limits equal the centre line")
			}
			if m.IsPassRate() {
				w := spc.ActionWidth(s.Chart.Mean, s.Chart.SD, spc.Target, spc.Beta)
				act := math.Max(0, spc.Target-w/2)
				s.Action, s.ActionWidth = &act, &w
			}
			s.Signals = spc.WesternElectric(s.Values, s.Chart.Mean, s.Chart.Sigma)
			a.Series = append(a.Series, s)
		}
	}
	return a, nil
}

// NeedDetails returns the plans whose details (case, patient, verdict,
// input files, criteria in full: see record.Store.Details) the page and
// the protocol show: every plan flagged by a rule and each group's latest
// plan. Fill them before WritePage or Protocol when the points came from
// record.Store.Points.
func (a *Analysis) NeedDetails() []*record.Point {
	var out []*record.Point
	for _, g := range a.Groups {
		out = append(out, &g.Points[len(g.Points)-1])
	}
	for _, s := range a.Series {
		idx, _ := s.Flagged()
		for _, i := range idx {
			out = append(out, s.Points[i])
		}
	}
	return out
}

// ErrNoPlans is returned when the store holds no plan the selection
// matches.
var ErrNoPlans = errors.New("no recorded comparison matches the selection")
