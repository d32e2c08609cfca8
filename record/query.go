package record

import (
	"context"
	"database/sql"
	"fmt"
	"strings"
	"time"
)

// Filter selects recorded comparisons.
type Filter struct {
	// Since and Until bound the time compared: Since ≤ t < Until (zero:
	// unbounded).
	Since, Until time.Time
	// Labels selects comparisons whose label of each key equals the value
	// given (exactly; "" selects comparisons without that label).
	Labels map[string]string
}

// Point is one recorded comparison as process control sees it.
type Point struct {
	// ID is the row's id in the store.
	ID int64
	// ComparedAt is when the comparison ran.
	ComparedAt time.Time
	// CaseID, PatientID (pseudonyms when recorded de-identified), Source,
	// and the fields below up to PassRate but for the labels, the criteria
	// label and the threshold, are read by [Store.Details].
	CaseID, PatientID, Source string
	// Verdict is "pass" or "fail".
	Verdict string
	// ReferenceSHA256 and EvaluatedSHA256 identify the input files.
	ReferenceSHA256, EvaluatedSHA256 string
	// Labels are the grouping labels.
	Labels Labels
	// ProtocolName is the protocol's name.
	ProtocolName string
	// Criteria as applied.
	CriteriaLabel    string
	DosePercent      float64
	DTAmm            float64
	Normalisation    string
	NormDoseGy       float64
	NormDoseSource   string
	ThresholdPercent float64
	SearchMM         float64
	// PassRate and GammaMean are the overall figures (nil when none).
	PassRate, GammaMean *float64
	// worst holds, per ROI kind (in the order of Kinds), the lowest pass
	// rate among the structure set's evaluated ROIs of that kind, when has
	// says there is one.
	worst [len(Kinds)]float64
	has   [len(Kinds)]bool
}

// Worst returns the lowest pass rate among the structure set's evaluated
// ROIs of a kind ("target", "oar", "body", "other"), and whether there is
// one.
func (p *Point) Worst(kind string) (float64, bool) {
	k := kindIndex(kind)
	if k < 0 || !p.has[k] {
		return 0, false
	}
	return p.worst[k], true
}

// SetWorst sets the lowest pass rate of a kind (for tests and callers that
// build points themselves).
func (p *Point) SetWorst(kind string, v float64) {
	if k := kindIndex(kind); k >= 0 {
		p.worst[k], p.has[k] = v, true
	}
}

// Points returns the comparisons f selects, in the order they were
// compared (ties by id, the order recorded). For speed over a long history
// it reads only what process control needs: ID, ComparedAt, Labels,
// CriteriaLabel, ThresholdPercent, PassRate, GammaMean and the worst pass
// rate per ROI kind; [Store.Details] reads the rest for the points that
// need it.
func (s *Store) Points(ctx context.Context, f Filter) ([]Point, error) {
	where, args, err := f.where()
	if err != nil {
		return nil, err
	}
	var n int
	if err := s.db.QueryRowContext(ctx, s.rebind(`SELECT COUNT(*) FROM comparisons`+where), args...).Scan(&n); err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	rows, err := s.db.QueryContext(ctx, s.rebind(`SELECT id, compared_at, machine, technique, site, planning_system, recalculation_engine,
	criteria_label, threshold_percent, pass_rate, gamma_mean,
	target_pass_rate_min, oar_pass_rate_min, body_pass_rate_min, other_pass_rate_min
	FROM comparisons`+where+` ORDER BY compared_at, id`), args...)
	if err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	defer rows.Close()
	pts := make([]Point, 0, n+16)
	var at, crit sql.RawBytes
	var lab [5]sql.RawBytes
	var pr, gm sql.NullFloat64
	var worst [len(Kinds)]sql.NullFloat64
	// Labels and criteria repeat: one string each.
	interned := map[string]string{}
	intern := func(b []byte) string {
		if v, ok := interned[string(b)]; ok {
			return v
		}
		v := string(b)
		interned[v] = v
		return v
	}
	for rows.Next() {
		var p Point
		if err := rows.Scan(&p.ID, &at, &lab[0], &lab[1], &lab[2], &lab[3], &lab[4], &crit, &p.ThresholdPercent, &pr, &gm,
			&worst[0], &worst[1], &worst[2], &worst[3]); err != nil {
			return nil, fmt.Errorf("results store %s: %w", s.name, err)
		}
		var ok bool
		if p.ComparedAt, ok = parseStamp(at); !ok {
			return nil, fmt.Errorf("results store %s: comparison %d: time %q is not in the store's format", s.name, p.ID, at)
		}
		p.Labels = Labels{intern(lab[0]), intern(lab[1]), intern(lab[2]), intern(lab[3]), intern(lab[4])}
		p.CriteriaLabel = intern(crit)
		if pr.Valid {
			v := pr.Float64
			p.PassRate = &v
		}
		if gm.Valid {
			v := gm.Float64
			p.GammaMean = &v
		}
		for k, w := range worst {
			p.worst[k], p.has[k] = w.Float64, w.Valid
		}
		pts = append(pts, p)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return pts, nil
}

// parseStamp reads a stored time ("2006-01-02T15:04:05.000000Z") without
// allocating.
func parseStamp(b []byte) (time.Time, bool) {
	if len(b) != len(timeLayout) || b[4] != '-' || b[7] != '-' || b[10] != 'T' || b[13] != ':' || b[16] != ':' || b[19] != '.' || b[26] != 'Z' {
		return time.Time{}, false
	}
	num := func(from, to int) (int, bool) {
		n := 0
		for _, c := range b[from:to] {
			if c < '0' || c > '9' {
				return 0, false
			}
			n = 10*n + int(c-'0')
		}
		return n, true
	}
	var v [7]int
	for i, r := range [7][2]int{{0, 4}, {5, 7}, {8, 10}, {11, 13}, {14, 16}, {17, 19}, {20, 26}} {
		var ok bool
		if v[i], ok = num(r[0], r[1]); !ok {
			return time.Time{}, false
		}
	}
	t := time.Date(v[0], time.Month(v[1]), v[2], v[3], v[4], v[5], v[6]*1000, time.UTC)
	if t.Month() != time.Month(v[1]) || t.Day() != v[2] || v[3] > 23 || v[4] > 59 || v[5] > 59 {
		return time.Time{}, false
	}
	return t, true
}

// Details reads, for the points given (from [Store.Points]), the fields
// Points leaves out: case, patient, source, verdict, input SHA-256s,
// protocol name and the criteria in full.
func (s *Store) Details(ctx context.Context, pts []*Point) error {
	byID := map[int64][]*Point{}
	var ids []any
	for _, p := range pts {
		if _, ok := byID[p.ID]; !ok {
			ids = append(ids, p.ID)
		}
		byID[p.ID] = append(byID[p.ID], p)
	}
	for len(ids) > 0 {
		chunk := ids[:min(len(ids), 500)]
		ids = ids[len(chunk):]
		rows, err := s.db.QueryContext(ctx, s.rebind(`SELECT id, case_id, patient_id, source, verdict, reference_sha256, evaluated_sha256,
	protocol_name, dose_percent, dta_mm, normalisation, norm_dose_gy, norm_dose_source, search_mm
	FROM comparisons WHERE id IN (`+placeholders(len(chunk))+`)`), chunk...)
		if err != nil {
			return fmt.Errorf("results store %s: %w", s.name, err)
		}
		for rows.Next() {
			var d Point
			if err := rows.Scan(&d.ID, &d.CaseID, &d.PatientID, &d.Source, &d.Verdict, &d.ReferenceSHA256, &d.EvaluatedSHA256,
				&d.ProtocolName, &d.DosePercent, &d.DTAmm, &d.Normalisation, &d.NormDoseGy, &d.NormDoseSource, &d.SearchMM); err != nil {
				rows.Close()
				return fmt.Errorf("results store %s: %w", s.name, err)
			}
			for _, p := range byID[d.ID] {
				p.CaseID, p.PatientID, p.Source, p.Verdict = d.CaseID, d.PatientID, d.Source, d.Verdict
				p.ReferenceSHA256, p.EvaluatedSHA256, p.ProtocolName = d.ReferenceSHA256, d.EvaluatedSHA256, d.ProtocolName
				p.DosePercent, p.DTAmm, p.Normalisation, p.NormDoseGy, p.NormDoseSource, p.SearchMM =
					d.DosePercent, d.DTAmm, d.Normalisation, d.NormDoseGy, d.NormDoseSource, d.SearchMM
			}
		}
		err = rows.Err()
		rows.Close()
		if err != nil {
			return fmt.Errorf("results store %s: %w", s.name, err)
		}
	}
	return nil
}

// where returns the WHERE clause of a filter (with a leading space, empty
// when it selects everything) and its arguments.
func (f Filter) where() (string, []any, error) {
	var conds []string
	var args []any
	if !f.Since.IsZero() {
		conds = append(conds, "comparisons.compared_at >= ?")
		args = append(args, formatTime(f.Since))
	}
	if !f.Until.IsZero() {
		conds = append(conds, "comparisons.compared_at < ?")
		args = append(args, formatTime(f.Until))
	}
	for _, k := range LabelKeys {
		for key, v := range f.Labels {
			if NormaliseKey(key) == k {
				conds = append(conds, "comparisons."+k+" = ?")
				args = append(args, strings.TrimSpace(v))
			}
		}
	}
	for key := range f.Labels {
		if !IsLabelKey(key) {
			return "", nil, fmt.Errorf("unknown label %q: want one of %s", key, strings.Join(LabelKeys, ", "))
		}
	}
	if len(conds) == 0 {
		return "", nil, nil
	}
	return " WHERE " + strings.Join(conds, " AND "), args, nil
}

// ProtocolJSON returns the protocol (JSON) a recorded comparison used.
func (s *Store) ProtocolJSON(ctx context.Context, id int64) (string, error) {
	var p string
	if err := s.db.QueryRowContext(ctx, s.rebind(`SELECT protocol_json FROM comparisons WHERE id = ?`), id).Scan(&p); err != nil {
		return "", fmt.Errorf("results store %s: comparison %d: %w", s.name, id, err)
	}
	return p, nil
}

// GroupCount is the number of comparisons recorded with one set of
// labels and criteria.
type GroupCount struct {
	Labels           Labels
	CriteriaLabel    string
	ThresholdPercent float64
	// Comparisons counts them, Passed those whose verdict is pass.
	Comparisons, Passed int64
	// First and Last bound the times compared.
	First, Last time.Time
}

// Groups counts the recorded comparisons by labels and criteria, ordered
// by labels then criteria.
func (s *Store) Groups(ctx context.Context) ([]GroupCount, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT machine, technique, site, planning_system, recalculation_engine, criteria_label, threshold_percent,
	COUNT(*), SUM(CASE WHEN verdict = 'pass' THEN 1 ELSE 0 END), MIN(compared_at), MAX(compared_at)
	FROM comparisons
	GROUP BY machine, technique, site, planning_system, recalculation_engine, criteria_label, threshold_percent
	ORDER BY machine, technique, site, planning_system, recalculation_engine, criteria_label, threshold_percent`)
	if err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	defer rows.Close()
	var out []GroupCount
	for rows.Next() {
		var g GroupCount
		var first, last string
		l := &g.Labels
		if err := rows.Scan(&l.Machine, &l.Technique, &l.Site, &l.PlanningSystem, &l.RecalculationEngine, &g.CriteriaLabel, &g.ThresholdPercent,
			&g.Comparisons, &g.Passed, &first, &last); err != nil {
			return nil, fmt.Errorf("results store %s: %w", s.name, err)
		}
		g.First, _ = parseTime(first)
		g.Last, _ = parseTime(last)
		out = append(out, g)
	}
	return out, rows.Err()
}
