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
	// CaseID, PatientID (pseudonyms when recorded de-identified), Source.
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
	// WorstByKind holds, per ROI kind ("target", "oar", "body", "other"),
	// the lowest pass rate among the structure set's ROIs of that kind that
	// were evaluated.
	WorstByKind map[string]float64
}

// Points returns the comparisons f selects, in the order they were
// compared (ties by id, the order recorded).
func (s *Store) Points(ctx context.Context, f Filter) ([]Point, error) {
	where, args, err := f.where()
	if err != nil {
		return nil, err
	}
	rows, err := s.db.QueryContext(ctx, s.rebind(`SELECT id, compared_at, case_id, patient_id, source, verdict,
	reference_sha256, evaluated_sha256, machine, technique, site, planning_system, recalculation_engine,
	protocol_name, criteria_label, dose_percent, dta_mm, normalisation, norm_dose_gy, norm_dose_source,
	threshold_percent, search_mm, pass_rate, gamma_mean
	FROM comparisons`+where+` ORDER BY compared_at, id`), args...)
	if err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	defer rows.Close()
	var pts []Point
	index := map[int64]int{}
	for rows.Next() {
		var p Point
		var at string
		var pr, gm sql.NullFloat64
		l := &p.Labels
		if err := rows.Scan(&p.ID, &at, &p.CaseID, &p.PatientID, &p.Source, &p.Verdict, &p.ReferenceSHA256, &p.EvaluatedSHA256,
			&l.Machine, &l.Technique, &l.Site, &l.PlanningSystem, &l.RecalculationEngine,
			&p.ProtocolName, &p.CriteriaLabel, &p.DosePercent, &p.DTAmm, &p.Normalisation, &p.NormDoseGy, &p.NormDoseSource,
			&p.ThresholdPercent, &p.SearchMM, &pr, &gm); err != nil {
			return nil, fmt.Errorf("results store %s: %w", s.name, err)
		}
		if p.ComparedAt, err = parseTime(at); err != nil {
			return nil, fmt.Errorf("results store %s: comparison %d: time %q: %w", s.name, p.ID, at, err)
		}
		if pr.Valid {
			p.PassRate = &pr.Float64
		}
		if gm.Valid {
			p.GammaMean = &gm.Float64
		}
		index[p.ID] = len(pts)
		pts = append(pts, p)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	if len(pts) == 0 {
		return pts, nil
	}
	// The worst evaluated structure-set ROI of each kind, per comparison.
	rq := `SELECT r.comparison_id, r.kind, MIN(r.pass_rate) FROM comparison_rois r`
	if where != "" {
		rq += ` JOIN comparisons ON comparisons.id = r.comparison_id` + where + ` AND`
	} else {
		rq += ` WHERE`
	}
	rq += ` r.source = 'structure set' AND r.pass_rate IS NOT NULL GROUP BY r.comparison_id, r.kind`
	kr, err := s.db.QueryContext(ctx, s.rebind(rq), args...)
	if err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	defer kr.Close()
	for kr.Next() {
		var id int64
		var kind string
		var v float64
		if err := kr.Scan(&id, &kind, &v); err != nil {
			return nil, fmt.Errorf("results store %s: %w", s.name, err)
		}
		i, ok := index[id]
		if !ok {
			continue
		}
		if pts[i].WorstByKind == nil {
			pts[i].WorstByKind = map[string]float64{}
		}
		pts[i].WorstByKind[kind] = v
	}
	if err := kr.Err(); err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return pts, nil
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
