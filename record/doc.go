// Package record is the clinic's QA history: a results store that keeps
// one row per comparison, so that a process can be followed over
// thousands of plans (process-based limits and control charts, package
// trend). It writes nothing but the store.
//
// # Stores
//
// [Open] takes an SQLite file path (the embedded database, no server:
// modernc.org/sqlite, pure Go) or a postgres:// URL (PostgreSQL through
// github.com/jackc/pgx) for a site that outgrows one file or records from
// many machines. Both hold the same schema. An SQLite file must be on a
// local disk (its write-ahead log needs shared memory that network file
// systems do not give); cluster jobs record into PostgreSQL.
//
// # Schema
//
// The schema is built by numbered migrations, recorded in the table
// schema_migrations; [Open] applies the missing ones in one transaction
// (PostgreSQL: under an advisory lock), and refuses a store whose schema
// is newer than this program's.
//
//   - comparisons: one row per comparison: comparison_key (see [Key]),
//     compared_at (when the comparison ran; UTC, fixed-width text so text
//     order is time order), recorded_at, updated_at, source (compare,
//     batch, watch, import), case_id, patient_id, deidentified, the labels
//     machine, technique, site, planning_system, recalculation_engine, the
//     inputs' SHA-256 and SOP instance UIDs, the frame of reference UID,
//     the input paths (NULL when de-identified), protocol_name,
//     protocol_sha256, protocol_json (the protocol in full), the criteria
//     (criteria_label, dose_percent, dta_mm, normalisation, norm_dose_gy,
//     norm_dose_source, threshold_percent, search_mm, method), verdict
//     (pass or fail), rules_total, rules_not_met, the overall figures
//     (evaluated, passed, pass_rate, gamma_mean, gamma_median, gamma_p95,
//     gamma_p99, gamma_max, coverage_percent; NULL where the result has null),
//     the worst pass rate of each kind among the structure set's evaluated
//     ROIs (target_pass_rate_min, oar_pass_rate_min, body_pass_rate_min,
//     other_pass_rate_min; NULL when the plan has none), roi_count,
//     voxgamma_version, result_schema_version.
//   - comparison_rois: one row per ROI of the result, in its order
//     (position): name, roi_number, kind, interpreted_type, source,
//     status, volume_cc, evaluated, passed, pass_rate, gamma_mean,
//     gamma_p95, gamma_max, failing_volume_cc, covered_percent, and the DVH
//     differences
//     d95_diff_percent, d2_diff_percent, mean_diff_percent.
//
// # Writes
//
// Every write is one transaction ([Store.RecordMany]): a comparison is
// stored with all its ROI rows or not at all, and a process killed in the
// middle leaves the store as it was before that transaction. SQLite runs in
// WAL mode with full synchronous commits, a busy timeout of [BusyTimeout],
// and write transactions that take the write lock when they begin, so that
// batch workers and other processes writing at once queue rather than
// fail. Writes are idempotent: a comparison is known by [Key] (its input
// files' SHA-256, the criteria and the protocol's content), and recording
// it again updates its row instead of adding one, so a resumed or rerun
// batch, a watched case seen again after a restart, or an import of a
// folder already recorded never counts a plan twice.
//
// # De-identification
//
// With Meta.Deidentify the patient ID, the DICOM UIDs and the case id are
// stored as pseudonyms (Meta.Pseudonym, the same function the other outputs
// use) and the input paths are left out (folder names often name
// patients); patient names are never stored. The time of the comparison is
// kept: it is the axis of every control chart.
package record
