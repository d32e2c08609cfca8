package trend

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"testing"
	"time"

	"voxgamma/internal/pgtest"
	"voxgamma/record"
	"voxgamma/result"
)

// benchPlans is the size of the stored history of the limits benchmark.
const benchPlans = 100_000

// benchResult is invented comparison i: 4 techniques × 3 machines, pass
// rates around 97 %, a structure set of six ROIs (two targets, three
// organs at risk, the body).
func benchResult(i int, r *rand.Rand) (*result.Result, record.Meta) {
	f := func(v float64) *float64 { return &v }
	rate := math.Min(100, 97+1.5*r.NormFloat64())
	roi := func(name, kind string, v float64) result.ROI {
		return result.ROI{Name: name, Kind: kind, Source: "structure set", Status: "evaluated", VolumeCC: 20, Voxels: 2000,
			GammaStats: result.GammaStats{Evaluated: 2000, Passed: int(20 * v), PassRate: f(math.Min(100, v)), GammaMean: f(0.3)}}
	}
	res := &result.Result{SchemaVersion: result.SchemaVersion, Version: "bench", Caution: result.Caution,
		Criteria: result.Criteria{DosePercent: 3, DTAmm: 2, Normalisation: "global", NormDoseGy: 60, NormDoseSource: "reference maximum",
			ThresholdPercent: 10, SearchMM: 6, Method: "fast", Label: "3%/2mm global"},
		Overall:  result.GammaStats{Evaluated: 100000, PassRate: f(rate), GammaMean: f(0.3 + (100-rate)/30)},
		Verdict:  "pass",
		Protocol: map[string]any{"name": "tg218"},
		Inputs: []result.Input{{Role: "reference", SHA256: fmt.Sprintf("%x", sha256.Sum256([]byte(fmt.Sprint("ref", i)))), PatientID: "VG-DEMO-001"},
			{Role: "evaluated", SHA256: fmt.Sprintf("%x", sha256.Sum256([]byte(fmt.Sprint("eval", i))))}},
		ROIs: []result.ROI{roi("PTV_high", "target", rate+0.5*r.NormFloat64()), roi("PTV_low", "target", rate+1),
			roi("Rectum", "oar", 99), roi("Bladder", "oar", 98.5), roi("FemHead_L", "oar", 99.5), roi("BODY", "body", rate)},
		Run: result.Run{Started: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(i) * 25 * time.Minute).Format(time.RFC3339)},
	}
	meta := record.Meta{Source: "batch", CaseID: fmt.Sprintf("case%06d", i),
		Labels: record.Labels{Technique: []string{"VMAT", "IMRT", "SRS", "3DCRT"}[i%4], Machine: []string{"LA1", "LA2", "LA3"}[i%3]}}
	return res, meta
}

// fillStore records benchPlans comparisons in transactions of 2,000.
func fillStore(b *testing.B, dsn string) {
	ctx := context.Background()
	st, err := record.Open(ctx, dsn)
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	if n, _ := st.Count(ctx); n == benchPlans {
		return
	}
	r := rand.New(rand.NewPCG(1, 2))
	t0 := time.Now()
	for start := 0; start < benchPlans; start += 2000 {
		items := make([]record.Item, 0, 2000)
		for i := start; i < start+2000; i++ {
			res, meta := benchResult(i, r)
			items = append(items, record.Item{Result: res, Meta: meta})
		}
		if _, err := st.RecordMany(ctx, items); err != nil {
			b.Fatal(err)
		}
	}
	b.Logf("recorded %d comparisons in %.1f s", benchPlans, time.Since(t0).Seconds())
}

var sqliteBenchOnce, pgBenchOnce sync.Once

// benchPostgres returns the benchmark's database on the test server,
// created when missing and kept (like the SQLite file) for later runs.
func benchPostgres(b *testing.B) string {
	server := pgtest.ServerURL(b)
	name := fmt.Sprintf("voxgamma_bench_limits_%d_schema%d_b3", benchPlans, record.SchemaVersion())
	db, err := sql.Open("pgx", server)
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	var n int
	if err := db.QueryRow(`SELECT COUNT(*) FROM pg_database WHERE datname = $1`, name).Scan(&n); err != nil {
		b.Fatal(err)
	}
	if n == 0 {
		if _, err := db.Exec("CREATE DATABASE " + name); err != nil {
			b.Fatal(err)
		}
	}
	dsn, err := pgtest.WithDatabase(server, name)
	if err != nil {
		b.Fatal(err)
	}
	return dsn
}

// BenchmarkLimits100k times what voxgamma limits does on a store of
// 100,000 comparisons (600,000 ROI rows): read every plan with its worst
// ROI per kind, group them (12 groups), compute the I-chart, TG-218 action
// limit and Western Electric signals of 6 metrics per group, and make the
// limits table. The store is built once (SQLite: kept in the temporary
// folder across runs) and not timed.
func BenchmarkLimits100k(b *testing.B) {
	b.Run("sqlite", func(b *testing.B) {
		path := filepath.Join(os.TempDir(), fmt.Sprintf("voxgamma-bench-limits-%d-schema%d-b3.db", benchPlans, record.SchemaVersion()))
		sqliteBenchOnce.Do(func() { fillStore(b, path) })
		benchLimits(b, path)
	})
	b.Run("postgres", func(b *testing.B) {
		dsn := benchPostgres(b)
		pgBenchOnce.Do(func() { fillStore(b, dsn) })
		benchLimits(b, dsn)
	})
}

func benchLimits(b *testing.B, dsn string) {
	ctx := context.Background()
	st, err := record.Open(ctx, dsn)
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	var ru0, ru1 syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru0)
	b.ResetTimer()
	for b.Loop() {
		pts, err := st.Points(ctx, record.Filter{})
		if err != nil {
			b.Fatal(err)
		}
		if len(pts) != benchPlans {
			b.Fatalf("%d plans", len(pts))
		}
		a, err := Analyze(pts, Options{By: []string{"technique", "machine"}})
		if err != nil {
			b.Fatal(err)
		}
		if lim := a.Limits(); len(lim.Rows) != 12*5 {
			b.Fatalf("%d limit rows, want 60 (12 groups × 5 metrics with data)", len(lim.Rows))
		}
	}
	b.StopTimer()
	// The process's CPU time (user + system, every thread) per query: what
	// the query costs whatever else the machine runs; the wall time of one
	// query on an idle machine is at most about this.
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru1)
	cpu := time.Duration(ru1.Utime.Nano()-ru0.Utime.Nano()) + time.Duration(ru1.Stime.Nano()-ru0.Stime.Nano())
	b.ReportMetric(float64(cpu.Nanoseconds())/float64(b.N), "cpu-ns/op")
}
