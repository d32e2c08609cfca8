package trend

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"voxgamma/internal/atomicfile"
	"voxgamma/protocol"
	"voxgamma/result"
	"voxgamma/spc"
)

// LimitsSchemaVersion is the version of the limits document's layout.
const LimitsSchemaVersion = "1.0"

// Limits is the limits document: one row per group and metric.
type Limits struct {
	SchemaVersion string `json:"schema_version"`
	Caution       string `json:"caution"`
	// Method says how the limits are computed, with sources.
	Method []string `json:"method"`
	// Plans counts the plans selected; First and Last bound their times
	// (RFC 3339, UTC).
	Plans int      `json:"plans"`
	First string   `json:"first"`
	Last  string   `json:"last"`
	Rows  []Limit  `json:"limits"`
	Notes []string `json:"notes"`
}

// Limit is the process-based limits of one metric of one group.
type Limit struct {
	// Group holds the grouping labels (by key) and Criteria the criteria.
	Group    map[string]string `json:"group"`
	Criteria string            `json:"criteria"`
	// Metric and Title name the metric; Unit is "%" or "".
	Metric string `json:"metric"`
	Title  string `json:"title"`
	Unit   string `json:"unit"`
	// Worse is "lower" (pass rates) or "higher" (Γ).
	Worse string `json:"worse"`
	// Plans counts the plans with the metric; First and Last their times.
	Plans int    `json:"plans"`
	First string `json:"first"`
	Last  string `json:"last"`
	// Centre is x̄, MRBar the mean moving range, SigmaMR = MRBar/1.128,
	// SD the sample standard deviation; LCL and UCL = x̄ ∓ 3·SigmaMR.
	Centre  *float64 `json:"centre"`
	MRBar   *float64 `json:"mr_bar"`
	SigmaMR *float64 `json:"sigma_mr"`
	SD      *float64 `json:"sd"`
	LCL     *float64 `json:"lcl"`
	UCL     *float64 `json:"ucl"`
	// Tolerance is the control limit on the worse side (LCL within 0–100
	// for a pass rate, UCL for Γ).
	Tolerance *float64 `json:"tolerance"`
	// ActionWidth is TG-218's ΔA and Action = 100 − ΔA/2 (pass rates).
	ActionWidth *float64 `json:"action_width"`
	Action      *float64 `json:"action"`
	// OutOfControl counts the plans flagged by a Western Electric rule.
	OutOfControl int `json:"out_of_control"`
	// Warnings: fewer than 20 plans, no variation, no limits.
	Warnings []string `json:"warnings"`
	// allLabels is set when grouped by every label (the default): empty
	// labels are then left out of the group's name.
	allLabels bool
}

// Method describes the computation, with its sources, for every output.
var Method = []string{
	"Individuals chart (I-chart) per group and metric, plans in the order they were compared: centre line x̄; σ̂ = mR̄/1.128 from the mean moving range of consecutive plans; control limits x̄ ± 3σ̂ (NIST/SEMATECH e-Handbook of Statistical Methods, 6.3.2.2; TG-218 quotes the lower limit as x̄ − 2.660·mR̄). The tolerance limit is the control limit on the worse side.",
	"Action limit of a pass rate: 100 − ΔA/2 with ΔA = β·√(σ² + (x̄ − T)²), β = 6, T = 100 %, σ the sample standard deviation: AAPM TG-218 (Miften et al., Med Phys 45 (2018) e53), formula quoted from memory; it is the interval of capability index C_pm = 1 (Sanghangthum et al., Phys Med Biol 58 (2013) 7025).",
	"Out-of-control plans: the four Western Electric rules (Western Electric Co., Statistical Quality Control Handbook, 1956): 1 one point beyond 3σ̂; 2 two of three consecutive beyond 2σ̂ on one side; 3 four of five consecutive beyond 1σ̂ on one side; 4 eight consecutive on one side of the centre line.",
	"A plan's target (organ-at-risk, body, other) pass rate is that of its worst evaluated structure-set ROI of that kind. Groups share labels and criteria; limits are computed from every plan selected (out-of-control plans included).",
	fmt.Sprintf("Limits from fewer than %d plans are flagged: trial control limits are commonly set from 20 to 25 subgroups (common SPC practice).", spc.MinPlans),
}

func fptr(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

func stamp(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339)
}

// Limits returns the limits document of the analysis.
func (a *Analysis) Limits() *Limits {
	l := &Limits{SchemaVersion: LimitsSchemaVersion, Caution: result.Caution, Method: Method, Plans: a.Plans,
		First: stamp(a.First), Last: stamp(a.Last), Rows: []Limit{}, Notes: []string{}}
	for _, s := range a.Series {
		l.Rows = append(l.Rows, s.limit())
	}
	return l
}

func (s *Series) limit() Limit {
	g := map[string]string{}
	for _, k := range s.Group.By {
		g[k] = s.Group.Labels.Get(k)
	}
	r := Limit{Group: g, Criteria: s.Group.Criteria, Metric: s.Metric.Name, Title: s.Metric.Title, Unit: s.Metric.Unit,
		Worse: "lower", Plans: len(s.Values), First: stamp(s.Points[0].ComparedAt), Last: stamp(s.Points[len(s.Points)-1].ComparedAt),
		Warnings: append([]string{}, s.Warnings...), allLabels: s.Group.allLabels}
	if s.Metric.HigherIsWorse {
		r.Worse = "higher"
	}
	if s.ChartErr == nil {
		c := s.Chart
		r.Centre, r.MRBar, r.SigmaMR, r.SD, r.LCL, r.UCL = fptr(c.Mean), fptr(c.MRBar), fptr(c.Sigma), fptr(c.SD), fptr(c.LCL), fptr(c.UCL)
		r.Tolerance = s.Tolerance()
		r.Action, r.ActionWidth = s.Action, s.ActionWidth
		idx, _ := s.Flagged()
		r.OutOfControl = len(idx)
	}
	return r
}

// EncodeJSON writes the limits document as indented JSON.
func (l *Limits) EncodeJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(l)
}

// WriteJSON writes the limits document to path atomically.
func (l *Limits) WriteJSON(path string) error {
	return atomicfile.Write(path, l.EncodeJSON)
}

func num(p *float64, digits int) string {
	if p == nil {
		return "–"
	}
	return fmt.Sprintf("%.*f", digits, *p)
}

// Table writes the limits as text: per group a heading, then one row per
// metric, then the group's warnings.
func (l *Limits) Table(w io.Writer) {
	fmt.Fprintf(w, "%d plans, %s to %s\n", l.Plans, l.First, l.Last)
	prev := ""
	var warns []string
	flush := func() {
		for _, m := range warns {
			fmt.Fprintf(w, "  warning: %s\n", m)
		}
		warns = nil
	}
	for _, r := range l.Rows {
		if g := groupText(r); g != prev {
			flush()
			fmt.Fprintf(w, "\ngroup %s\n", g)
			fmt.Fprintf(w, "  %-18s %6s %9s %9s %9s %9s %10s %9s %4s\n", "metric", "plans", "centre", "σ̂(mR̄)", "LCL", "UCL", "tolerance", "action", "OOC")
			prev = g
		}
		d := 2
		if r.Unit == "" {
			d = 3
		}
		fmt.Fprintf(w, "  %-18s %6d %9s %9s %9s %9s %10s %9s %4d\n", r.Metric, r.Plans, num(r.Centre, d), num(r.SigmaMR, d+1),
			num(r.LCL, d), num(r.UCL, d), num(r.Tolerance, d), num(r.Action, d), r.OutOfControl)
		for _, m := range r.Warnings {
			warns = append(warns, r.Metric+": "+m)
		}
	}
	flush()
}

func groupText(r Limit) string {
	var parts []string
	for _, k := range sortedKeys(r.Group) {
		if v := r.Group[k]; v != "" {
			parts = append(parts, k+"="+v)
		} else if !r.allLabels {
			parts = append(parts, k+"=(none)")
		}
	}
	if len(parts) == 0 {
		return r.Criteria
	}
	return strings.Join(parts, ", ") + " · " + r.Criteria
}

func sortedKeys(m map[string]string) []string {
	var keys []string
	for _, k := range []string{"machine", "technique", "site", "planning_system", "recalculation_engine"} {
		if _, ok := m[k]; ok {
			keys = append(keys, k)
		}
	}
	return keys
}

// roundStrict rounds a limit to the given decimals toward the stricter
// side: up for a lower limit (≥), down for an upper one (≤).
func roundStrict(v float64, decimals int, lower bool) float64 {
	f := math.Pow(10, float64(decimals))
	if lower {
		return math.Ceil(v*f-1e-9) / f
	}
	return math.Floor(v*f+1e-9) / f
}

// Protocol makes a protocol whose rules are the process-based limits of
// one group: for each metric that a protocol rule can check (overall,
// targets and organs at risk pass rates; the overall mean Γ), a tolerance
// rule at the control limit on the worse side and, for pass rates, an
// action rule at TG-218's action limit; limits rounded to 0.01 % (Γ:
// 0.001) toward the stricter side. The criteria are the group's as
// recorded; the ROI classes, isodose ROIs, coverage requirements and the
// rules' when_missing come from the base protocol (the one the group's
// latest plan used), else their defaults. Metrics without limits (fewer
// than two plans) give no rule; a group without any rule is an error.
func (a *Analysis) Protocol(g *Group, base *protocol.Protocol, name string) (*protocol.Protocol, error) {
	last := g.Points[len(g.Points)-1]
	p := &protocol.Protocol{Name: name, Coverage: protocol.DefaultCoverage()}
	// whenMissing keeps the base protocol's choice for a rule on a subject
	// the comparison lacks; "fail" (the default) otherwise.
	whenMissing := func(subject, metric string) string {
		if base != nil {
			for _, r := range base.Rules {
				if r.Subject == subject && r.Metric == metric && r.WhenMissing != "" {
					return r.WhenMissing
				}
			}
		}
		return protocol.MissingFail
	}
	if base != nil {
		p.KindRules, p.Isodose, p.Coverage = base.KindRules, base.Isodose, base.Coverage
	}
	p.Criteria = protocol.Criteria{Criteria: fmt.Sprintf("%g%%/%gmm", last.DosePercent, last.DTAmm), Normalisation: last.Normalisation,
		ThresholdPercent: last.ThresholdPercent, SearchMM: last.SearchMM, NormDoseFrom: protocol.NormDoseReferenceMax}
	if last.NormDoseSource != "reference maximum" {
		p.Criteria.NormDoseGy, p.Criteria.NormDoseFrom = last.NormDoseGy, protocol.NormDoseValue
	}
	var counts []string
	for _, s := range a.Series {
		if s.Group != g || s.ChartErr != nil || s.Metric.Subject == "" {
			continue
		}
		tol := *s.Tolerance()
		if s.Metric.HigherIsWorse {
			p.Rules = append(p.Rules, protocol.Rule{Level: "tolerance", Subject: s.Metric.Subject, Metric: s.Metric.RuleMetric, Op: "<=", Limit: roundStrict(tol, 3, false),
				WhenMissing: whenMissing(s.Metric.Subject, s.Metric.RuleMetric)})
		} else {
			p.Rules = append(p.Rules, protocol.Rule{Level: "tolerance", Subject: s.Metric.Subject, Metric: s.Metric.RuleMetric, Op: ">=", Limit: roundStrict(tol, 2, true),
				WhenMissing: whenMissing(s.Metric.Subject, s.Metric.RuleMetric)})
			if s.Action != nil {
				p.Rules = append(p.Rules, protocol.Rule{Level: "action", Subject: s.Metric.Subject, Metric: s.Metric.RuleMetric, Op: ">=", Limit: roundStrict(math.Min(100, *s.Action), 2, true),
					WhenMissing: whenMissing(s.Metric.Subject, s.Metric.RuleMetric)})
			}
		}
		counts = append(counts, fmt.Sprintf("%s %d", s.Metric.Name, len(s.Values)))
	}
	if len(p.Rules) == 0 {
		return nil, fmt.Errorf("group %s: no metric with limits (each needs 2 plans at least)", g.Name())
	}
	p.Description = fmt.Sprintf("Process-based limits of the group %s, from the plans recorded %s to %s.",
		g.Name(), stamp(g.Points[0].ComparedAt), stamp(last.ComparedAt))
	p.Source = "Computed by voxgamma limits from this clinic's recorded comparisons (plans per metric: " + strings.Join(counts, ", ") +
		"). Tolerance rules: individuals-chart control limit on the worse side, x̄ ∓ 3·mR̄/1.128 (NIST/SEMATECH e-Handbook 6.3.2.2). " +
		"Action rules: 100 − ΔA/2, ΔA = 6·√(σ² + (x̄ − 100)²) (AAPM TG-218, Miften et al., Med Phys 45 (2018) e53; formula from memory). " +
		"Review them before use: they describe this process as it was, not what is clinically acceptable."
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("group %s: the limits do not make a valid protocol: %w", g.Name(), err)
	}
	return p, nil
}

// WriteProtocol writes p as a YAML protocol file atomically, with a
// comment heading it.
func WriteProtocol(path string, p *protocol.Protocol) error {
	data, err := yaml.Marshal(p)
	if err != nil {
		return fmt.Errorf("protocol %s: %w", path, err)
	}
	head := "# Process-based limits written by voxgamma limits. " + result.Caution + "\n"
	return atomicfile.WriteBytes(path, append([]byte(head), data...))
}
