package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"voxgamma/protocol"
	"voxgamma/record"
	"voxgamma/trend"
)

// selectFlags choose the recorded plans of limits and trend and how they
// are grouped.
type selectFlags struct {
	store        string
	groups       []string
	by           string
	since, until string
	metrics      []string
}

func (f *selectFlags) register(cmd *cobra.Command) {
	fl := cmd.Flags()
	fl.StringVar(&f.store, "record", "", "the results store: an SQLite file or a postgres:// URL (default $"+record.EnvVar+")")
	fl.StringArrayVar(&f.groups, "group", nil, "only plans with this label, KEY=VALUE, e.g. technique=VMAT (repeatable; keys: "+strings.Join(record.LabelKeys, ", ")+")")
	fl.StringVar(&f.by, "by", "", `labels to group plans by, comma-separated, or "none" (default: the --group keys, else every label); plans are always grouped by criteria too`)
	fl.StringVar(&f.since, "since", "", "only plans compared on or after this date (YYYY-MM-DD, UTC, or an RFC 3339 time)")
	fl.StringVar(&f.until, "until", "", "only plans compared up to and including this date (YYYY-MM-DD) or before this RFC 3339 time")
	fl.StringSliceVar(&f.metrics, "metric", nil, "metrics to follow (default all): "+strings.Join(trend.MetricNames(), ", "))
}

// parseWhen reads a date (the day, UTC) or an RFC 3339 time; a date as an
// end of range means the end of that day.
func parseWhen(flag, s string, end bool) (time.Time, error) {
	if s == "" {
		return time.Time{}, nil
	}
	if d, err := time.Parse("2006-01-02", s); err == nil {
		if end {
			d = d.Add(24 * time.Hour)
		}
		return d, nil
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, fmt.Errorf("%s %q: want a date YYYY-MM-DD or an RFC 3339 time such as 2025-01-31T08:00:00Z", flag, s)
	}
	return t, nil
}

// analyse reads the selected plans from the store and analyses them. It
// returns the analysis, the store's name and the selection in words.
func (f *selectFlags) analyse(cmd *cobra.Command) (*trend.Analysis, *record.Store, string, error) {
	dsn := f.store
	if dsn == "" {
		dsn = os.Getenv(record.EnvVar)
	}
	if dsn == "" {
		return nil, nil, "", fmt.Errorf("--record is required (or set %s): the results store to read", record.EnvVar)
	}
	for _, m := range f.metrics {
		if _, ok := trend.MetricByName(m); !ok {
			return nil, nil, "", fmt.Errorf("--metric: unknown metric %q: want one of %s", m, strings.Join(trend.MetricNames(), ", "))
		}
	}
	var filter record.Filter
	var err error
	if filter.Since, err = parseWhen("--since", f.since, false); err != nil {
		return nil, nil, "", err
	}
	if filter.Until, err = parseWhen("--until", f.until, true); err != nil {
		return nil, nil, "", err
	}
	var words []string
	var groupKeys []string
	for _, g := range f.groups {
		k, v, ok := strings.Cut(g, "=")
		if !ok || !record.IsLabelKey(k) {
			return nil, nil, "", fmt.Errorf("--group %q: want KEY=VALUE with KEY one of %s", g, strings.Join(record.LabelKeys, ", "))
		}
		if filter.Labels == nil {
			filter.Labels = map[string]string{}
		}
		k = record.NormaliseKey(k)
		filter.Labels[k] = strings.TrimSpace(v)
		groupKeys = append(groupKeys, k)
		words = append(words, k+"="+strings.TrimSpace(v))
	}
	var by []string
	switch {
	case f.by == "none":
		by = []string{}
	case f.by != "":
		for _, k := range strings.Split(f.by, ",") {
			if !record.IsLabelKey(k) {
				return nil, nil, "", fmt.Errorf("--by %q: want label keys among %s, or none", f.by, strings.Join(record.LabelKeys, ", "))
			}
			by = append(by, record.NormaliseKey(k))
		}
	case len(groupKeys) > 0:
		by = groupKeys
	}
	if f.since != "" {
		words = append(words, "since "+f.since)
	}
	if f.until != "" {
		words = append(words, "until "+f.until)
	}
	selection := "every plan recorded"
	if len(words) > 0 {
		selection = "plans with " + strings.Join(words, ", ")
	}
	st, err := record.Open(cmdContext(cmd), dsn)
	if err != nil {
		return nil, nil, "", err
	}
	pts, err := st.Points(cmdContext(cmd), filter)
	if err != nil {
		st.Close()
		return nil, nil, "", err
	}
	if len(pts) == 0 {
		st.Close()
		return nil, nil, "", fmt.Errorf("%w in %s (%s)", trend.ErrNoPlans, st.Name(), selection)
	}
	a, err := trend.Analyze(pts, trend.Options{By: by, Metrics: f.metrics})
	if err == nil {
		err = st.Details(cmdContext(cmd), a.NeedDetails())
	}
	if err != nil {
		st.Close()
		return nil, nil, "", err
	}
	return a, st, selection, nil
}

// checkNewFile refuses an output that exists (unless force) or whose
// folder does not.
func checkNewFile(flag, path string, force bool) error {
	if st, err := os.Stat(path); err == nil {
		if st.IsDir() {
			return fmt.Errorf("%s %s is a folder", flag, path)
		}
		if !force {
			return fmt.Errorf("%s %s exists (pass --force to overwrite)", flag, path)
		}
	}
	if st, err := os.Stat(filepath.Dir(path)); err != nil || !st.IsDir() {
		return fmt.Errorf("%s %s: folder %s does not exist", flag, path, filepath.Dir(path))
	}
	return nil
}

func newLimits(g *globals) *cobra.Command {
	f := &selectFlags{}
	var jsonOut, protoOut, name string
	var force bool
	cmd := &cobra.Command{
		Use:   "limits --record DB [--group KEY=VALUE] [--by KEYS] [--since DATE] [--protocol-out FILE]",
		Short: "Process-based tolerance and action limits from the recorded history (TG-218)",
		Long: `limits reads the recorded comparisons (see compare, batch and watch --record),
groups them by their labels and criteria, and computes per group and metric:

  - the individuals chart (I-chart): centre line x̄, σ̂ = mR̄/1.128 from the mean
    moving range of consecutive plans, control limits x̄ ± 3σ̂ (NIST/SEMATECH
    e-Handbook of Statistical Methods, 6.3.2.2). The control limit on the worse
    side (the LCL of a pass rate, the UCL of mean Γ) is the tolerance limit.
  - TG-218's action limit of a pass rate: 100 − ΔA/2, ΔA = β√(σ² + (x̄ − T)²),
    β = 6, T = 100 % (AAPM TG-218, Miften et al., Med Phys 45 (2018) e53; the
    formula is quoted from memory).
  - the number of plans used, with a warning below 20 (trial control limits are
    commonly set from 20 to 25 subgroups: common SPC practice), and the plans
    flagged by the Western Electric rules (see voxgamma trend).

Metrics: the overall pass rate, the pass rate of each plan's worst target (organ
at risk, body, other ROI) of the structure set, and the overall mean Γ.

--protocol-out writes one group's limits as a protocol file (YAML) whose rules
are those limits, with the group's criteria and the ROI classes of the protocol
its plans used: a clinic's own limits become its rules. Review it before use:
process-based limits describe the process as it was.`,
		Example: `  voxgamma limits --record qa.db
  voxgamma limits --record qa.db --group technique=VMAT --since 2025-01-01
  voxgamma limits --record qa.db --group technique=VMAT --group machine=LA1 --protocol-out vmat-la1.yaml
  voxgamma limits --record postgres://qa@db/qa --by technique,site --json limits.json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			for _, o := range []struct{ flag, path string }{{"--json", jsonOut}, {"--protocol-out", protoOut}} {
				if o.path != "" {
					if err := checkNewFile(o.flag, o.path, force); err != nil {
						return err
					}
				}
			}
			a, st, selection, err := f.analyse(cmd)
			if err != nil {
				return err
			}
			defer st.Close()
			lim := a.Limits()
			if !g.quiet {
				fmt.Fprintf(g.stdout, "store %s, %s\n", st.Name(), selection)
				lim.Table(g.stdout)
			}
			if jsonOut != "" {
				if err := lim.WriteJSON(jsonOut); err != nil {
					return err
				}
			}
			if protoOut != "" {
				if len(a.Groups) != 1 {
					var names []string
					for _, gr := range a.Groups {
						names = append(names, gr.Name())
					}
					sort.Strings(names)
					return fmt.Errorf("--protocol-out needs one group, the selection has %d (%s): choose one with --group (and --since)", len(a.Groups), strings.Join(names, "; "))
				}
				gr := a.Groups[0]
				var base *protocol.Protocol
				if pj, err := st.ProtocolJSON(cmdContext(cmd), gr.Points[len(gr.Points)-1].ID); err == nil {
					var p protocol.Protocol
					var keys map[string]json.RawMessage
					if json.Unmarshal([]byte(pj), &p) == nil && json.Unmarshal([]byte(pj), &keys) == nil {
						// A result of an older schema shows no coverage:
						// the defaults, not Go's zeros (which turn the
						// checks off).
						if _, ok := keys["coverage"]; !ok {
							p.Coverage = protocol.DefaultCoverage()
						}
						base = &p
					}
				}
				if name == "" {
					name = "process-limits"
					if base != nil && base.Name != "" {
						name = base.Name + "-process-limits"
					}
				}
				p, err := a.Protocol(gr, base, name)
				if err != nil {
					return err
				}
				if err := trend.WriteProtocol(protoOut, p); err != nil {
					return err
				}
				if !g.quiet {
					fmt.Fprintf(g.stdout, "protocol: %s (%d rules)\n", protoOut, len(p.Rules))
				}
			}
			return nil
		},
	}
	f.register(cmd)
	fl := cmd.Flags()
	fl.StringVar(&jsonOut, "json", "", "write the limits as JSON to this file")
	fl.StringVar(&protoOut, "protocol-out", "", "write the limits of the (one) selected group as a protocol file (YAML)")
	fl.StringVar(&name, "name", "", "name of the protocol written (default: the group's protocol name + \"-process-limits\")")
	fl.BoolVar(&force, "force", false, "overwrite existing output files")
	return cmd
}

func newTrend(g *globals) *cobra.Command {
	f := &selectFlags{}
	var reportOut, jsonOut string
	var maxPoints int
	var force bool
	cmd := &cobra.Command{
		Use:   "trend --record DB --report trend.html [--group KEY=VALUE] [--since DATE]",
		Short: "Control charts of the recorded history, out-of-control plans flagged (Western Electric rules)",
		Long: `trend writes a self-contained page (one HTML file that fetches nothing) with one
control chart per group and metric: the plans in the order they were compared,
the centre line, the control limits x̄ ± 3σ̂ and the 1σ̂ and 2σ̂ zones of the
individuals chart, TG-218's action limit of pass rates (see voxgamma limits),
and the plans flagged by the Western Electric rules (Western Electric Co.,
Statistical Quality Control Handbook, 1956):

  rule 1: one point beyond 3σ̂;
  rule 2: two of three consecutive points beyond 2σ̂ on one side;
  rule 3: four of five consecutive points beyond 1σ̂ on one side;
  rule 4: eight consecutive points on one side of the centre line.

Under each chart a table lists the plans flagged: when compared, case, patient
(pseudonyms when recorded de-identified), value, rules, verdict, reference file.

Exit status: 0 no plan flagged, 2 a plan flagged by a rule, 1 could not make the
page.`,
		Example: `  voxgamma trend --record qa.db --report trend.html
  voxgamma trend --record qa.db --report vmat.html --group technique=VMAT --since 2025-01-01`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if reportOut == "" {
				return fmt.Errorf("--report is required: the page to write (e.g. trend.html)")
			}
			for _, o := range []struct{ flag, path string }{{"--report", reportOut}, {"--json", jsonOut}} {
				if o.path != "" {
					if err := checkNewFile(o.flag, o.path, force); err != nil {
						return err
					}
				}
			}
			a, st, selection, err := f.analyse(cmd)
			if err != nil {
				return err
			}
			defer st.Close()
			if err := a.WritePage(reportOut, trend.PageOptions{Store: st.Name(), Selection: selection, MaxPoints: maxPoints,
				Version: version, Generated: time.Now().UTC().Format(time.RFC3339)}); err != nil {
				return err
			}
			lim := a.Limits()
			if jsonOut != "" {
				if err := lim.WriteJSON(jsonOut); err != nil {
					return err
				}
			}
			flagged, charts := 0, 0
			for _, r := range lim.Rows {
				flagged += r.OutOfControl
				if r.Centre != nil {
					charts++
				}
			}
			if !g.quiet {
				fmt.Fprintf(g.stdout, "page: %s\n", reportOut)
			}
			line := fmt.Sprintf("trend: %d plans, %d groups, %d charts; %d plan points flagged by a Western Electric rule", a.Plans, len(a.Groups), charts, flagged)
			if flagged > 0 {
				return &verdictError{msg: line + " (exit 2; see " + reportOut + ")"}
			}
			fmt.Fprintf(g.stderr, "voxgamma: %s\n", line)
			return nil
		},
	}
	f.register(cmd)
	fl := cmd.Flags()
	fl.StringVar(&reportOut, "report", "", "the page to write (self-contained HTML)")
	fl.StringVar(&jsonOut, "json", "", "also write the limits as JSON to this file")
	fl.IntVar(&maxPoints, "max-points", trend.DefaultMaxPoints, "most recent plans drawn per chart (the limits come from all)")
	fl.BoolVar(&force, "force", false, "overwrite existing output files")
	return cmd
}
