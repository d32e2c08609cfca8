package record

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strings"
	"time"

	"voxgamma/result"
)

// Item is one result to record with what is known about it.
type Item struct {
	Result *result.Result
	Meta   Meta
}

// Counts says what recording did.
type Counts struct {
	// New counts comparisons added; Updated those found already recorded
	// (by [Key]) and brought up to date in place.
	New, Updated int
}

// Record stores one comparison in its own transaction (see [Store.RecordMany]).
func (s *Store) Record(ctx context.Context, r *result.Result, m Meta) (Counts, error) {
	return s.RecordMany(ctx, []Item{{r, m}})
}

// RecordMany stores comparisons in one transaction: all or none. A
// comparison whose [Key] is recorded already is updated in place (its
// figures, protocol and version; a label given replaces the stored one, an
// empty label keeps it; the time it was first compared and recorded stay),
// so recording the same comparison twice never counts it twice. Writers
// in other goroutines and processes queue (SQLite: the write lock with a
// busy timeout; PostgreSQL: row locks on the unique key).
func (s *Store) RecordMany(ctx context.Context, items []Item) (Counts, error) {
	var n Counts
	now := time.Now()
	rows := make([]*comparison, 0, len(items))
	for _, it := range items {
		c, err := newComparison(it.Result, it.Meta, now)
		if err != nil {
			what := "comparison"
			if it.Meta.CaseID != "" {
				what = "case " + it.Meta.CaseID
			}
			return n, fmt.Errorf("results store %s: %s: %w", s.name, what, err)
		}
		rows = append(rows, c)
	}
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return n, fmt.Errorf("results store %s: %w", s.name, err)
	}
	defer tx.Rollback()
	stamp := formatTime(now)
	for _, c := range rows {
		isNew, err := s.upsert(ctx, tx, c, stamp)
		if err != nil {
			return Counts{}, fmt.Errorf("results store %s: case %s: %w", s.name, c.caseID, err)
		}
		if isNew {
			n.New++
		} else {
			n.Updated++
		}
	}
	if err := tx.Commit(); err != nil {
		return Counts{}, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return n, nil
}

func nullable(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}

func nullString(p *string) any {
	if p == nil {
		return nil
	}
	return *p
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

// comparisonColumns are the columns written on insert, in the order of
// comparison.values.
const comparisonColumns = `comparison_key, compared_at, recorded_at, updated_at, source, case_id, patient_id, deidentified,
	machine, technique, site, planning_system, recalculation_engine,
	reference_sha256, evaluated_sha256, structures_sha256,
	reference_uid, evaluated_uid, structures_uid, frame_of_reference_uid,
	reference_path, evaluated_path, structures_path,
	protocol_name, protocol_sha256, protocol_json,
	criteria_label, dose_percent, dta_mm, normalisation, norm_dose_gy, norm_dose_source, threshold_percent, search_mm, method,
	verdict, rules_total, rules_not_met, evaluated, passed,
	pass_rate, gamma_mean, gamma_median, gamma_p95, gamma_p99, gamma_max, coverage_percent,
	target_pass_rate_min, oar_pass_rate_min, body_pass_rate_min, other_pass_rate_min,
	roi_count, voxgamma_version, result_schema_version`

func (c *comparison) values(stamp string) []any {
	l, cr, o := c.labels, c.criteria, c.overall
	return []any{c.key, formatTime(c.comparedAt), stamp, stamp, c.source, c.caseID, c.patientID, boolInt(c.deidentified),
		l.Machine, l.Technique, l.Site, l.PlanningSystem, l.RecalculationEngine,
		c.refSHA, c.evalSHA, c.structSHA,
		c.refUID, c.evalUID, c.structUID, c.frameUID,
		nullString(c.refPath), nullString(c.evalPath), nullString(c.structPath),
		c.protocolName, c.protocolSHA, c.protocolJSON,
		cr.Label, cr.DosePercent, cr.DTAmm, cr.Normalisation, cr.NormDoseGy, cr.NormDoseSource, cr.ThresholdPercent, cr.SearchMM, cr.Method,
		c.verdict, c.rulesTotal, c.rulesNotMet, o.Evaluated, o.Passed,
		nullable(o.PassRate), nullable(o.GammaMean), nullable(o.GammaMedian), nullable(o.GammaP95), nullable(o.GammaP99), nullable(o.GammaMax), nullable(o.CoveragePercent),
		nullable(c.worst[0]), nullable(c.worst[1]), nullable(c.worst[2]), nullable(c.worst[3]),
		len(c.rois), c.version, c.schemaVersion}
}

// placeholders returns n comma-separated ?.
func placeholders(n int) string {
	b := make([]byte, 0, 2*n)
	for i := range n {
		if i > 0 {
			b = append(b, ',')
		}
		b = append(b, '?')
	}
	return string(b)
}

// updateSet rewrites a recorded comparison: everything but its key, the
// time it was compared and first recorded; labels only where given.
const updateSet = `updated_at = ?, source = ?, case_id = ?, patient_id = ?, deidentified = ?,
	machine = CASE WHEN ? <> '' THEN ? ELSE machine END,
	technique = CASE WHEN ? <> '' THEN ? ELSE technique END,
	site = CASE WHEN ? <> '' THEN ? ELSE site END,
	planning_system = CASE WHEN ? <> '' THEN ? ELSE planning_system END,
	recalculation_engine = CASE WHEN ? <> '' THEN ? ELSE recalculation_engine END,
	reference_uid = ?, evaluated_uid = ?, structures_uid = ?, frame_of_reference_uid = ?,
	reference_path = ?, evaluated_path = ?, structures_path = ?,
	protocol_name = ?, protocol_json = ?, criteria_label = ?, norm_dose_source = ?,
	verdict = ?, rules_total = ?, rules_not_met = ?, evaluated = ?, passed = ?,
	pass_rate = ?, gamma_mean = ?, gamma_median = ?, gamma_p95 = ?, gamma_p99 = ?, gamma_max = ?, coverage_percent = ?,
	target_pass_rate_min = ?, oar_pass_rate_min = ?, body_pass_rate_min = ?, other_pass_rate_min = ?,
	roi_count = ?, voxgamma_version = ?, result_schema_version = ?`

func (c *comparison) updateValues(stamp string) []any {
	l, o := c.labels, c.overall
	return []any{stamp, c.source, c.caseID, c.patientID, boolInt(c.deidentified),
		l.Machine, l.Machine, l.Technique, l.Technique, l.Site, l.Site, l.PlanningSystem, l.PlanningSystem,
		l.RecalculationEngine, l.RecalculationEngine,
		c.refUID, c.evalUID, c.structUID, c.frameUID,
		nullString(c.refPath), nullString(c.evalPath), nullString(c.structPath),
		c.protocolName, c.protocolJSON, c.criteria.Label, c.criteria.NormDoseSource,
		c.verdict, c.rulesTotal, c.rulesNotMet, o.Evaluated, o.Passed,
		nullable(o.PassRate), nullable(o.GammaMean), nullable(o.GammaMedian), nullable(o.GammaP95), nullable(o.GammaP99), nullable(o.GammaMax), nullable(o.CoveragePercent),
		nullable(c.worst[0]), nullable(c.worst[1]), nullable(c.worst[2]), nullable(c.worst[3]),
		len(c.rois), c.version, c.schemaVersion}
}

const roiColumns = `comparison_id, position, name, roi_number, kind, interpreted_type, source, status,
	volume_cc, evaluated, passed, pass_rate, gamma_mean, gamma_p95, gamma_max, failing_volume_cc, covered_percent,
	d95_diff_percent, d2_diff_percent, mean_diff_percent`

// upsert writes one comparison and its ROIs in tx and reports whether it
// was new. The insert does nothing on a key already recorded (on
// PostgreSQL it waits for a concurrent writer of the same key to finish);
// the row is then updated and its ROI rows replaced.
func (s *Store) upsert(ctx context.Context, tx *sql.Tx, c *comparison, stamp string) (bool, error) {
	vals := c.values(stamp)
	var id int64
	err := tx.QueryRowContext(ctx, s.rebind(`INSERT INTO comparisons (`+comparisonColumns+`) VALUES (`+placeholders(len(vals))+
		`) ON CONFLICT (comparison_key) DO NOTHING RETURNING id`), vals...).Scan(&id)
	isNew := true
	switch {
	case errors.Is(err, sql.ErrNoRows):
		isNew = false
		uv := append(c.updateValues(stamp), c.key)
		if err := tx.QueryRowContext(ctx, s.rebind(`UPDATE comparisons SET `+updateSet+` WHERE comparison_key = ? RETURNING id`), uv...).Scan(&id); err != nil {
			return false, fmt.Errorf("updating: %w", err)
		}
		if _, err := tx.ExecContext(ctx, s.rebind(`DELETE FROM comparison_rois WHERE comparison_id = ?`), id); err != nil {
			return false, fmt.Errorf("updating: %w", err)
		}
	case err != nil:
		return false, fmt.Errorf("inserting: %w", err)
	}
	// The ROI rows, many to a statement.
	const perStatement = 100
	for start := 0; start < len(c.rois); start += perStatement {
		part := c.rois[start:min(len(c.rois), start+perStatement)]
		args := make([]any, 0, 20*len(part))
		var q strings.Builder
		q.WriteString(`INSERT INTO comparison_rois (` + roiColumns + `) VALUES `)
		for j, x := range part {
			if j > 0 {
				q.WriteByte(',')
			}
			q.WriteString("(" + placeholders(20) + ")")
			args = append(args, id, start+j, x.Name, x.Number, x.Kind, x.InterpretedType, x.Source, string(x.Status),
				x.VolumeCC, x.Evaluated, x.Passed, nullable(x.PassRate), nullable(x.GammaMean), nullable(x.GammaP95), nullable(x.GammaMax),
				x.FailingVolumeCC, nullable(x.CoveredPercent), nullable(dvhDiff(x, "d95")), nullable(dvhDiff(x, "d2")), nullable(dvhDiff(x, "mean")))
		}
		if _, err := tx.ExecContext(ctx, s.rebind(q.String()), args...); err != nil {
			return false, fmt.Errorf("ROIs: %w", err)
		}
	}
	return isNew, nil
}

// Count returns the number of comparisons recorded.
func (s *Store) Count(ctx context.Context) (int64, error) {
	var n int64
	if err := s.db.QueryRowContext(ctx, `SELECT COUNT(*) FROM comparisons`).Scan(&n); err != nil {
		return 0, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return n, nil
}
