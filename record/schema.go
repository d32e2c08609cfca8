package record

import (
	"context"
	"database/sql"
	"fmt"
	"strings"
	"time"
)

// migration is one step of the schema. Its statements are written once for
// both databases: {{id}} stands for the auto-increment key column, the one
// place the two dialects differ.
type migration struct {
	version int
	name    string
	stmts   []string
}

// migrations bring an empty database to the current schema, in order.
// Never change a released step: add a new one.
var migrations = []migration{
	{1, "comparisons and their ROIs", []string{
		`CREATE TABLE comparisons (
	id {{id}},
	comparison_key TEXT NOT NULL UNIQUE,
	compared_at TEXT NOT NULL,
	recorded_at TEXT NOT NULL,
	updated_at TEXT NOT NULL,
	source TEXT NOT NULL,
	case_id TEXT NOT NULL,
	patient_id TEXT NOT NULL,
	deidentified BIGINT NOT NULL,
	machine TEXT NOT NULL,
	technique TEXT NOT NULL,
	site TEXT NOT NULL,
	planning_system TEXT NOT NULL,
	recalculation_engine TEXT NOT NULL,
	reference_sha256 TEXT NOT NULL,
	evaluated_sha256 TEXT NOT NULL,
	structures_sha256 TEXT NOT NULL,
	reference_uid TEXT NOT NULL,
	evaluated_uid TEXT NOT NULL,
	structures_uid TEXT NOT NULL,
	frame_of_reference_uid TEXT NOT NULL,
	reference_path TEXT,
	evaluated_path TEXT,
	structures_path TEXT,
	protocol_name TEXT NOT NULL,
	protocol_sha256 TEXT NOT NULL,
	protocol_json TEXT NOT NULL,
	criteria_label TEXT NOT NULL,
	dose_percent DOUBLE PRECISION NOT NULL,
	dta_mm DOUBLE PRECISION NOT NULL,
	normalisation TEXT NOT NULL,
	norm_dose_gy DOUBLE PRECISION NOT NULL,
	norm_dose_source TEXT NOT NULL,
	threshold_percent DOUBLE PRECISION NOT NULL,
	search_mm DOUBLE PRECISION NOT NULL,
	method TEXT NOT NULL,
	verdict TEXT NOT NULL CHECK (verdict IN ('pass', 'fail')),
	rules_total BIGINT NOT NULL,
	rules_not_met BIGINT NOT NULL,
	evaluated BIGINT NOT NULL,
	passed BIGINT NOT NULL,
	pass_rate DOUBLE PRECISION,
	gamma_mean DOUBLE PRECISION,
	gamma_median DOUBLE PRECISION,
	gamma_p95 DOUBLE PRECISION,
	gamma_p99 DOUBLE PRECISION,
	gamma_max DOUBLE PRECISION,
	coverage_percent DOUBLE PRECISION,
	target_pass_rate_min DOUBLE PRECISION,
	oar_pass_rate_min DOUBLE PRECISION,
	body_pass_rate_min DOUBLE PRECISION,
	other_pass_rate_min DOUBLE PRECISION,
	roi_count BIGINT NOT NULL,
	voxgamma_version TEXT NOT NULL,
	result_schema_version TEXT NOT NULL
)`,
		`CREATE TABLE comparison_rois (
	comparison_id BIGINT NOT NULL REFERENCES comparisons (id) ON DELETE CASCADE,
	position BIGINT NOT NULL,
	name TEXT NOT NULL,
	roi_number BIGINT NOT NULL,
	kind TEXT NOT NULL,
	interpreted_type TEXT NOT NULL,
	source TEXT NOT NULL,
	status TEXT NOT NULL,
	volume_cc DOUBLE PRECISION NOT NULL,
	evaluated BIGINT NOT NULL,
	passed BIGINT NOT NULL,
	pass_rate DOUBLE PRECISION,
	gamma_mean DOUBLE PRECISION,
	gamma_p95 DOUBLE PRECISION,
	gamma_max DOUBLE PRECISION,
	failing_volume_cc DOUBLE PRECISION NOT NULL,
	covered_percent DOUBLE PRECISION,
	d95_diff_percent DOUBLE PRECISION,
	d2_diff_percent DOUBLE PRECISION,
	mean_diff_percent DOUBLE PRECISION,
	PRIMARY KEY (comparison_id, position)
)`,
	}},
	{2, "indexes for time windows and groups", []string{
		`CREATE INDEX comparisons_time ON comparisons (compared_at, id)`,
		`CREATE INDEX comparisons_groups ON comparisons (technique, machine, site, planning_system, recalculation_engine)`,
	}},
}

// SchemaVersion is the schema version this program writes: the last
// migration's.
func SchemaVersion() int { return migrations[len(migrations)-1].version }

func (s *Store) ddl(stmt string) string {
	id := "INTEGER PRIMARY KEY AUTOINCREMENT"
	if s.dialect == postgresDialect {
		id = "BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY"
	}
	return strings.ReplaceAll(stmt, "{{id}}", id)
}

// migrationLock is the PostgreSQL advisory lock key that serialises
// migrations of processes opening the same database at once.
const migrationLock = 7_215_017

// migrate applies the migrations up to version upTo that the database
// lacks, all in one transaction (taken with the write lock on SQLite, with
// an advisory lock on PostgreSQL), so that processes opening a new store at
// once apply each step exactly once. A database whose schema is newer than
// this program's is an error.
func (s *Store) migrate(ctx context.Context, upTo int) error {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	defer tx.Rollback()
	if s.dialect == postgresDialect {
		if _, err := tx.ExecContext(ctx, `SELECT pg_advisory_xact_lock($1)`, migrationLock); err != nil {
			return fmt.Errorf("schema: %w", err)
		}
	}
	if _, err := tx.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
	version BIGINT PRIMARY KEY,
	name TEXT NOT NULL,
	applied_at TEXT NOT NULL
)`); err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	var have sql.NullInt64
	if err := tx.QueryRowContext(ctx, `SELECT MAX(version) FROM schema_migrations`).Scan(&have); err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	if int(have.Int64) > SchemaVersion() {
		return fmt.Errorf("schema version %d is newer than this voxgamma knows (%d): use a newer voxgamma", have.Int64, SchemaVersion())
	}
	applied := false
	for _, m := range migrations {
		if m.version <= int(have.Int64) || m.version > upTo {
			continue
		}
		for _, st := range m.stmts {
			if _, err := tx.ExecContext(ctx, s.ddl(st)); err != nil {
				return fmt.Errorf("schema migration %d (%s): %w", m.version, m.name, err)
			}
		}
		if _, err := tx.ExecContext(ctx, s.rebind(`INSERT INTO schema_migrations (version, name, applied_at) VALUES (?, ?, ?)`),
			m.version, m.name, formatTime(time.Now())); err != nil {
			return fmt.Errorf("schema migration %d: %w", m.version, err)
		}
		applied = true
	}
	if !applied {
		return nil
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	return nil
}

// Version returns the schema version of the open store.
func (s *Store) Version(ctx context.Context) (int, error) {
	var v sql.NullInt64
	if err := s.db.QueryRowContext(ctx, `SELECT MAX(version) FROM schema_migrations`).Scan(&v); err != nil {
		return 0, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return int(v.Int64), nil
}
