package record

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"voxgamma/internal/pgtest"
	"voxgamma/result"
)

// Invented comparisons for the store's tests: no patient, phantom names.

func fakeSHA(s string) string {
	h := sha256.Sum256([]byte(s))
	return hex.EncodeToString(h[:])
}

func ptr(v float64) *float64 { return &v }

// synthResult is a result of invented case i: overall pass rate rate, a
// target and an organ at risk of the structure set with the given rates,
// and a derived ROI that must not count as a structure-set ROI.
func synthResult(i int, rate, target, oar float64) *result.Result {
	id := fmt.Sprintf("VG-DEMO-%05d", i)
	r := &result.Result{
		SchemaVersion: result.SchemaVersion, Version: "test", Caution: result.Caution,
		Criteria: result.Criteria{DosePercent: 3, DTAmm: 2, Normalisation: "global", NormDoseGy: 60, NormDoseSource: "reference maximum",
			ThresholdPercent: 10, SearchMM: 6, Method: "fast", Label: "3%/2mm global"},
		Overall:  result.GammaStats{Evaluated: 1000, Passed: int(rate * 10), PassRate: ptr(rate), GammaMean: ptr(0.3 + (100-rate)/50)},
		Verdict:  "pass",
		Protocol: map[string]any{"name": "tg218", "rules": []any{}},
		Rules:    []result.RuleOutcome{{Rule: "overall: pass rate ≥ 95 %", Level: "tolerance", Subject: "overall", Value: ptr(rate), Limit: 95, Met: rate >= 95}},
		Inputs: []result.Input{
			{Role: "reference", Path: "/data/" + id + "/RD_plan.dcm", SHA256: fakeSHA("ref" + id), SOPInstanceUID: "1.2.826.0.1.3680043.8.498." + strconv.Itoa(i) + ".1",
				FrameOfReferenceUID: "1.2.826.0.1.3680043.8.498." + strconv.Itoa(i) + ".9", PatientID: id, PatientName: "PHANTOM^HEAD"},
			{Role: "evaluated", Path: "/data/" + id + "/RD_mc.dcm", SHA256: fakeSHA("eval" + id), SOPInstanceUID: "1.2.826.0.1.3680043.8.498." + strconv.Itoa(i) + ".2",
				FrameOfReferenceUID: "1.2.826.0.1.3680043.8.498." + strconv.Itoa(i) + ".9", PatientID: id},
			{Role: "structures", Path: "/data/" + id + "/RS.dcm", SHA256: fakeSHA("rs" + id), SOPInstanceUID: "1.2.826.0.1.3680043.8.498." + strconv.Itoa(i) + ".3"},
		},
		Run: result.Run{Started: time.Date(2025, 1, 1, 8, 0, 0, 0, time.UTC).Add(time.Duration(i) * time.Hour).Format(time.RFC3339)},
	}
	if rate < 95 {
		r.Verdict = "fail"
	}
	roi := func(name, kind, source string, rate float64) result.ROI {
		x := result.ROI{Name: name, Kind: kind, Source: source, Status: "evaluated", VolumeCC: 10, Voxels: 100,
			GammaStats: result.GammaStats{Evaluated: 100, Passed: int(rate), PassRate: ptr(rate), GammaMean: ptr(0.4)}}
		x.DVH = &result.DVHPair{DifferencePercent: result.DVHStats{D95Gy: ptr(-0.5), D2Gy: ptr(0.7), MeanGy: ptr(0.1)}}
		return x
	}
	r.ROIs = []result.ROI{
		roi("PTV", "target", "structure set", target),
		roi("PTV_boost", "target", "structure set", target+1),
		roi("SpinalCord", "oar", "structure set", oar),
		roi("Parotid_L", "oar", "structure set", oar+0.5),
		roi("BODY", "body", "structure set", rate),
		roi("all targets", "target", "derived", 0), // never the worst target: derived
	}
	return r
}

// storeKinds lists the stores a test runs on: an SQLite file, and a
// database on the real PostgreSQL server when one is given (see
// internal/pgtest).
func storeKinds(t *testing.T) map[string]func(t *testing.T) string {
	return map[string]func(t *testing.T) string{
		"sqlite":   func(t *testing.T) string { return filepath.Join(t.TempDir(), "qa.db") },
		"postgres": func(t *testing.T) string { return pgtest.NewDatabase(t) },
	}
}

func openStore(t *testing.T, dsn string) *Store {
	t.Helper()
	s, err := Open(context.Background(), dsn)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// helperEnv marks a re-executed test binary as a writer process.
const helperEnv = "VOXGAMMA_RECORD_TEST_WRITER"

func TestMain(m *testing.M) {
	if os.Getenv(helperEnv) != "" {
		os.Exit(writerProcess())
	}
	os.Exit(m.Run())
}

// allPoints reads the points f selects with all their details.
func allPoints(t *testing.T, s *Store, f Filter) ([]Point, error) {
	t.Helper()
	pts, err := s.Points(context.Background(), f)
	if err != nil {
		return nil, err
	}
	ptrs := make([]*Point, len(pts))
	for i := range pts {
		ptrs[i] = &pts[i]
	}
	return pts, s.Details(context.Background(), ptrs)
}
