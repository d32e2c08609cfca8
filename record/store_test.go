package record

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestRoundTrip records comparisons and reads them back: every figure as
// the result gave it, the worst structure-set ROI of each kind (a derived
// ROI does not count), the time order, a label filter and a time window.
func TestRoundTrip(t *testing.T) {
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			s := openStore(t, mk(t))
			ctx := context.Background()
			// Recorded out of time order: case 3 first.
			for _, i := range []int{3, 1, 2} {
				r := synthResult(i, 90+float64(i), 96+float64(i)/10, 98)
				n, err := s.Record(ctx, r, Meta{Source: "compare", CaseID: "c" + string(rune('0'+i)), Labels: Labels{Technique: "VMAT", Machine: []string{"", "LA1", "LA2", "LA1"}[i]}})
				if err != nil {
					t.Fatal(err)
				}
				if n.New != 1 || n.Updated != 0 {
					t.Errorf("case %d: %+v, want one new", i, n)
				}
			}
			pts, err := allPoints(t, s, Filter{})
			if err != nil {
				t.Fatal(err)
			}
			if len(pts) != 3 {
				t.Fatalf("%d points, want 3", len(pts))
			}
			for k, p := range pts {
				i := k + 1
				if p.CaseID != "c"+string(rune('0'+i)) {
					t.Errorf("point %d is case %s: not in time order", k, p.CaseID)
				}
				if *p.PassRate != 90+float64(i) || p.Verdict != "fail" || p.CriteriaLabel != "3%/2mm global" || p.ThresholdPercent != 10 {
					t.Errorf("case %d: pass rate %v verdict %s criteria %q threshold %g", i, *p.PassRate, p.Verdict, p.CriteriaLabel, p.ThresholdPercent)
				}
				if worst(p, "target") != 96+float64(i)/10 || worst(p, "oar") != 98 || worst(p, "body") != 90+float64(i) || worst(p, "other") != -1 {
					t.Errorf("case %d: worst target %v, oar %v, body %v, other %v", i, worst(p, "target"), worst(p, "oar"), worst(p, "body"), worst(p, "other"))
				}
				want := time.Date(2025, 1, 1, 8+i, 0, 0, 0, time.UTC)
				if !p.ComparedAt.Equal(want) {
					t.Errorf("case %d compared at %v, want %v", i, p.ComparedAt, want)
				}
				if p.PatientID != "VG-DEMO-0000"+string(rune('0'+i)) {
					t.Errorf("patient %q", p.PatientID)
				}
			}
			la1, err := allPoints(t, s, Filter{Labels: map[string]string{"machine": "LA1"}})
			if err != nil || len(la1) != 2 || la1[0].CaseID != "c1" || la1[1].CaseID != "c3" {
				t.Errorf("machine=LA1: %d points %v", len(la1), err)
			}
			if len(la1) > 0 && worst(la1[0], "target") != 96.1 {
				t.Errorf("filtered worst target %v", worst(la1[0], "target"))
			}
			win, err := allPoints(t, s, Filter{Since: time.Date(2025, 1, 1, 10, 0, 0, 0, time.UTC), Until: time.Date(2025, 1, 1, 11, 0, 0, 0, time.UTC)})
			if err != nil || len(win) != 1 || win[0].CaseID != "c2" {
				t.Errorf("time window: %v %v", win, err)
			}
			if _, err := s.Points(ctx, Filter{Labels: map[string]string{"colour": "x"}}); err == nil {
				t.Error("an unknown label was accepted in a filter")
			}
		})
	}
}

// TestIdempotent records the same comparison again (a resumed batch, a
// second import): one row, updated in place; a label given replaces the
// stored one and an empty one keeps it; the first time stays.
func TestIdempotent(t *testing.T) {
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			s := openStore(t, mk(t))
			ctx := context.Background()
			r := synthResult(1, 97, 98, 99)
			if _, err := s.Record(ctx, r, Meta{Source: "batch", CaseID: "a", Labels: Labels{Technique: "VMAT", Site: "prostate"}}); err != nil {
				t.Fatal(err)
			}
			again := synthResult(1, 97, 98, 99)
			again.Version = "test2"
			again.Run.Started = "2030-01-01T00:00:00Z"
			n, err := s.Record(ctx, again, Meta{Source: "import", CaseID: "a", Labels: Labels{Site: "pelvis"}})
			if err != nil {
				t.Fatal(err)
			}
			if n.New != 0 || n.Updated != 1 {
				t.Errorf("second record: %+v, want one updated", n)
			}
			if c, _ := s.Count(ctx); c != 1 {
				t.Fatalf("%d comparisons after recording one twice", c)
			}
			pts, _ := allPoints(t, s, Filter{})
			p := pts[0]
			if p.Labels.Technique != "VMAT" || p.Labels.Site != "pelvis" {
				t.Errorf("labels %+v: want the technique kept, the site replaced", p.Labels)
			}
			if p.ComparedAt.Year() != 2025 {
				t.Errorf("compared at %v: the first time must stay", p.ComparedAt)
			}
			var version string
			var rois int
			s.db.QueryRow(`SELECT voxgamma_version FROM comparisons`).Scan(&version)
			s.db.QueryRow(`SELECT COUNT(*) FROM comparison_rois`).Scan(&rois)
			if version != "test2" || rois != 6 {
				t.Errorf("version %q, %d ROI rows: want the update's version and 6 ROI rows", version, rois)
			}
			// Other criteria make another comparison.
			other := synthResult(1, 97, 98, 99)
			other.Criteria.DTAmm, other.Criteria.Label = 1, "3%/1mm global"
			if n, _ := s.Record(ctx, other, Meta{}); n.New != 1 {
				t.Errorf("other criteria: %+v, want a new comparison", n)
			}
		})
	}
}

// TestDeidentify checks what a de-identified record holds (DICOM PS3.15
// Annex E's intent: IDs, UIDs and names of files and folders identify):
// pseudonyms for the patient ID, the UIDs and the case id, no paths, no
// patient name anywhere in the row.
func TestDeidentify(t *testing.T) {
	s := openStore(t, filepath.Join(t.TempDir(), "qa.db"))
	ctx := context.Background()
	r := synthResult(4, 97, 98, 99)
	if _, err := s.Record(ctx, r, Meta{Source: "watch", CaseID: "VG-DEMO-00004_folder", Deidentify: true}); err != nil {
		t.Fatal(err)
	}
	var pid, cid, ruid, fuid string
	var rpath sql.NullString
	var deid int
	if err := s.db.QueryRow(`SELECT patient_id, case_id, reference_uid, frame_of_reference_uid, reference_path, deidentified FROM comparisons`).
		Scan(&pid, &cid, &ruid, &fuid, &rpath, &deid); err != nil {
		t.Fatal(err)
	}
	if pid != DefaultPseudonym("VG-DEMO-00004") || cid != DefaultPseudonym("VG-DEMO-00004_folder") || ruid != DefaultPseudonym(r.Inputs[0].SOPInstanceUID) ||
		fuid != DefaultPseudonym(r.Inputs[0].FrameOfReferenceUID) || rpath.Valid || deid != 1 {
		t.Errorf("stored %q %q %q %q path %v deidentified %d", pid, cid, ruid, fuid, rpath, deid)
	}
	var dump strings.Builder
	rows, _ := s.db.Query(`SELECT * FROM comparisons`)
	cols, _ := rows.Columns()
	for rows.Next() {
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		rows.Scan(ptrs...)
		b, _ := json.Marshal(vals)
		dump.Write(b)
	}
	rows.Close()
	for _, secret := range []string{"VG-DEMO-00004", "PHANTOM", "/data/", "1.2.826.0.1.3680043.8.498.4"} {
		if strings.Contains(dump.String(), secret) {
			t.Errorf("the de-identified row holds %q", secret)
		}
	}
	// A result de-identified when written keeps its patient pseudonym.
	r2 := synthResult(5, 97, 98, 99)
	r2.Inputs[0].PatientID, r2.Inputs[1].PatientID = "ANON-0123456789AB", "ANON-0123456789AB"
	r2.Notes = append(r2.Notes, "de-identified: patient names and IDs replaced with hashes, dates left out")
	if _, err := s.Record(ctx, r2, Meta{Deidentify: true}); err != nil {
		t.Fatal(err)
	}
	s.db.QueryRow(`SELECT patient_id FROM comparisons WHERE reference_sha256 = ?`, r2.Inputs[0].SHA256).Scan(&pid)
	if pid != "ANON-0123456789AB" {
		t.Errorf("patient %q: the result's pseudonym must be kept", pid)
	}
}

// TestRefusals: results that were not evaluated are not recorded.
func TestRefusals(t *testing.T) {
	s := openStore(t, filepath.Join(t.TempDir(), "qa.db"))
	r := synthResult(1, 97, 98, 99)
	r.Verdict = "error"
	if _, err := s.Record(context.Background(), r, Meta{CaseID: "x"}); err == nil || !strings.Contains(err.Error(), "case x") {
		t.Errorf("a result without a verdict: %v", err)
	}
	if c, _ := s.Count(context.Background()); c != 0 {
		t.Errorf("%d comparisons recorded", c)
	}
	if _, err := Open(context.Background(), filepath.Join(t.TempDir(), "no", "such", "qa.db")); err == nil || !strings.Contains(err.Error(), "does not exist") {
		t.Errorf("a store in a missing folder: %v", err)
	}
}

// TestMigrations: a store made by the first migration alone (an older
// voxgamma) is brought up to date with its data kept; a store whose schema
// is newer than this program's is refused with a message saying so.
func TestMigrations(t *testing.T) {
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			dsn := mk(t)
			ctx := context.Background()
			s := openStore(t, dsn)
			// Rebuild it as the first migration left it.
			for _, q := range []string{`DROP TABLE comparison_rois`, `DROP TABLE comparisons`, `DELETE FROM schema_migrations`} {
				if _, err := s.db.Exec(q); err != nil {
					t.Fatal(err)
				}
			}
			if err := s.migrate(ctx, 1); err != nil {
				t.Fatal(err)
			}
			if v, _ := s.Version(ctx); v != 1 {
				t.Fatalf("version %d after the first migration", v)
			}
			if _, err := s.Record(ctx, synthResult(1, 97, 98, 99), Meta{}); err != nil {
				t.Fatal(err)
			}
			s.Close()
			s2 := openStore(t, dsn)
			if v, _ := s2.Version(ctx); v != SchemaVersion() {
				t.Errorf("version %d after opening, want %d", v, SchemaVersion())
			}
			if c, _ := s2.Count(ctx); c != 1 {
				t.Errorf("%d comparisons after the upgrade, want 1", c)
			}
			var idx int
			q := `SELECT COUNT(*) FROM sqlite_master WHERE type = 'index' AND name = 'comparisons_time'`
			if kind == "postgres" {
				q = `SELECT COUNT(*) FROM pg_indexes WHERE indexname = 'comparisons_time'`
			}
			s2.db.QueryRow(q).Scan(&idx)
			if idx != 1 {
				t.Error("migration 2's index is missing")
			}
			if _, err := s2.db.Exec(s2.rebind(`INSERT INTO schema_migrations (version, name, applied_at) VALUES (?, ?, ?)`), 999, "future", "x"); err != nil {
				t.Fatal(err)
			}
			if _, err := Open(ctx, dsn); err == nil || !strings.Contains(err.Error(), "newer than this voxgamma") {
				t.Errorf("a newer schema: %v", err)
			}
		})
	}
}

// TestImport loads result folders as batch and compare leave them:
// case ids from status.json, folder names and file names; summaries,
// status files and other JSON skipped; hidden (temporary) folders not
// entered; a result that was not evaluated listed as an error; labels by
// case id; a second import adds nothing.
func TestImport(t *testing.T) {
	dir := t.TempDir()
	write := func(rel string, v any) {
		p := filepath.Join(dir, rel)
		os.MkdirAll(filepath.Dir(p), 0o755)
		b, _ := json.MarshalIndent(v, "", " ")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	r1 := synthResult(1, 97, 98, 99)
	r1.Run.Started = ""
	write("batch/cases/case-1/result.json", r1)
	write("batch/cases/case-1/status.json", map[string]any{"schema_version": "1.0", "id": "case-1", "verdict": "pass", "finished": "2025-03-04T05:06:07Z"})
	write("batch/cases/case-2/result.json", synthResult(2, 96, 98, 99))
	write("batch/cases/.case-3.tmp-123/result.json", synthResult(3, 96, 98, 99))
	write("batch/summary.json", map[string]any{"schema_version": "1.0", "rows": []any{}})
	write("single/plan7.json", synthResult(7, 99, 98, 99))
	bad := synthResult(8, 99, 98, 99)
	bad.Verdict = ""
	write("single/plan8.json", bad)
	os.WriteFile(filepath.Join(dir, "single", "notes.json"), []byte("not json"), 0o644)

	s := openStore(t, filepath.Join(t.TempDir(), "qa.db"))
	ctx := context.Background()
	opt := ImportOptions{Labels: Labels{Machine: "LA1"}, CaseLabels: map[string]Labels{"case-2": {Technique: "IMRT"}}}
	rep, err := s.Import(ctx, []string{dir}, opt)
	if err != nil {
		t.Fatal(err)
	}
	if rep.Results != 4 || rep.New != 3 || rep.Updated != 0 || rep.Skipped != 3 || len(rep.Errors) != 1 || !strings.Contains(rep.Errors[0], "plan8.json") {
		t.Errorf("report %+v", rep)
	}
	pts, _ := allPoints(t, s, Filter{})
	got := map[string]Point{}
	for _, p := range pts {
		got[p.CaseID] = p
	}
	if len(got) != 3 || got["case-1"].Labels.Machine != "LA1" || got["case-2"].Labels != (Labels{Machine: "LA1", Technique: "IMRT"}) || got["plan7"].ID == 0 {
		t.Errorf("imported %v", got)
	}
	if want := time.Date(2025, 3, 4, 5, 6, 7, 0, time.UTC); !got["case-1"].ComparedAt.Equal(want) {
		t.Errorf("case-1 compared at %v, want the status's finish time %v", got["case-1"].ComparedAt, want)
	}
	if got["case-1"].Source != "import" {
		t.Errorf("source %q", got["case-1"].Source)
	}
	rep, err = s.Import(ctx, []string{dir}, opt)
	if err != nil || rep.New != 0 || rep.Updated != 3 {
		t.Errorf("second import: %+v %v", rep, err)
	}
	if c, _ := s.Count(ctx); c != 3 {
		t.Errorf("%d comparisons after importing twice", c)
	}
}

func worst(p Point, kind string) float64 {
	v, ok := p.Worst(kind)
	if !ok {
		return -1
	}
	return v
}

// TestStamp: the fast reader of stored times agrees with time.Parse of the
// layout and refuses what is not one.
func TestStamp(t *testing.T) {
	for _, tm := range []time.Time{time.Date(2025, 2, 28, 23, 59, 59, 999999000, time.UTC), time.Date(1999, 12, 31, 0, 0, 0, 1000, time.UTC)} {
		s := formatTime(tm)
		got, ok := parseStamp([]byte(s))
		want, err := parseTime(s)
		if !ok || err != nil || !got.Equal(want) || !got.Equal(tm) {
			t.Errorf("%s: %v %v, time.Parse %v %v", s, got, ok, want, err)
		}
	}
	for _, bad := range []string{"", "2025-02-30T00:00:00.000000Z", "2025-02-28 00:00:00.000000Z", "2025-02-28T24:00:00.000000Z", "2025-02-28T00:00:00.00000xZ"} {
		if _, ok := parseStamp([]byte(bad)); ok {
			t.Errorf("%q accepted", bad)
		}
	}
}

// TestManyROIs: a structure set of 250 ROIs (written 100 to a statement)
// is stored whole, in order, and its worst target found.
func TestManyROIs(t *testing.T) {
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			s := openStore(t, mk(t))
			r := synthResult(1, 97, 98, 99)
			base := r.ROIs[0]
			r.ROIs = nil
			for i := range 250 {
				x := base
				x.Name = fmt.Sprintf("PTV_%03d", i)
				x.PassRate = ptr(90 + float64((i*37)%100)/10)
				r.ROIs = append(r.ROIs, x)
			}
			if _, err := s.Record(context.Background(), r, Meta{}); err != nil {
				t.Fatal(err)
			}
			var n, maxPos int
			var last string
			s.db.QueryRow(`SELECT COUNT(*), MAX(position) FROM comparison_rois`).Scan(&n, &maxPos)
			s.db.QueryRow(`SELECT name FROM comparison_rois WHERE position = 249`).Scan(&last)
			if n != 250 || maxPos != 249 || last != "PTV_249" {
				t.Errorf("%d ROI rows, last position %d named %q", n, maxPos, last)
			}
			pts, _ := allPoints(t, s, Filter{})
			if w := worst(pts[0], "target"); w != 90 {
				t.Errorf("worst target %g, want 90 (i = 0)", w)
			}
		})
	}
}
