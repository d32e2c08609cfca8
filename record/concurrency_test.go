package record

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// writerProcess is the body of a writer process (the test binary run
// again, see TestMain). VOXGAMMA_RECORD_TEST_MODE "fixed" writes its block
// of N results one per transaction, and also, interleaved, the first DUP
// results of the next writer's block (which that writer writes at the same
// time: real races on the same keys); "forever" writes transactions of 50
// new results until it is killed.
func writerProcess() int {
	dsn := os.Getenv("VOXGAMMA_RECORD_TEST_DSN")
	w, _ := strconv.Atoi(os.Getenv(helperEnv))
	n, _ := strconv.Atoi(os.Getenv("VOXGAMMA_RECORD_TEST_N"))
	dup, _ := strconv.Atoi(os.Getenv("VOXGAMMA_RECORD_TEST_DUP"))
	writers, _ := strconv.Atoi(os.Getenv("VOXGAMMA_RECORD_TEST_WRITERS"))
	ctx := context.Background()
	s, err := Open(ctx, dsn)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 3
	}
	defer s.Close()
	rec := func(i int) error {
		_, err := s.Record(ctx, synthResult(i, 90+float64(i%100)/10, 97, 99), Meta{Source: "batch", CaseID: fmt.Sprintf("case-%05d", i),
			Labels: Labels{Technique: "VMAT", Machine: "LA" + strconv.Itoa(i%2+1)}})
		return err
	}
	switch os.Getenv("VOXGAMMA_RECORD_TEST_MODE") {
	case "fixed":
		next := (w + 1) % writers
		for k := range n {
			if err := rec(w*n + k); err != nil {
				fmt.Fprintln(os.Stderr, err)
				return 3
			}
			if k < dup {
				if err := rec(next*n + k); err != nil {
					fmt.Fprintln(os.Stderr, err)
					return 3
				}
			}
		}
	case "forever":
		base := w * 1_000_000
		for b := 0; ; b++ {
			items := make([]Item, 50)
			for k := range items {
				i := base + b*50 + k
				items[k] = Item{synthResult(i, 95, 97, 99), Meta{Source: "batch", CaseID: fmt.Sprintf("case-%07d", i)}}
			}
			if _, err := s.RecordMany(ctx, items); err != nil {
				fmt.Fprintln(os.Stderr, err)
				return 3
			}
		}
	}
	return 0
}

func writerCmd(t *testing.T, dsn, mode string, w, n, dup, writers int) *exec.Cmd {
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), helperEnv+"="+strconv.Itoa(w), "VOXGAMMA_RECORD_TEST_DSN="+dsn, "VOXGAMMA_RECORD_TEST_MODE="+mode,
		"VOXGAMMA_RECORD_TEST_N="+strconv.Itoa(n), "VOXGAMMA_RECORD_TEST_DUP="+strconv.Itoa(dup), "VOXGAMMA_RECORD_TEST_WRITERS="+strconv.Itoa(writers))
	return cmd
}

// TestConcurrentProcesses has 8 processes write 1,000 results into one
// store at once, each result once by its own writer and 25 of each block a
// second time, at the same moment, by another writer: the store must hold
// exactly the 1,000 comparisons, each once, with all their ROI rows, as the
// database itself counts them.
func TestConcurrentProcesses(t *testing.T) {
	if testing.Short() {
		t.Skip("8 processes: not in -short")
	}
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			dsn := mk(t)
			const writers, per, dup = 8, 125, 25
			var wg sync.WaitGroup
			errs := make([]string, writers)
			for w := range writers {
				wg.Add(1)
				go func() {
					defer wg.Done()
					out, err := writerCmd(t, dsn, "fixed", w, per, dup, writers).CombinedOutput()
					if err != nil {
						errs[w] = fmt.Sprintf("writer %d: %v: %s", w, err, out)
					}
				}()
			}
			wg.Wait()
			for _, e := range errs {
				if e != "" {
					t.Error(e)
				}
			}
			s := openStore(t, dsn)
			var rows, keys, cases, rois, badROIs int
			q := func(query string, dst *int) {
				t.Helper()
				if err := s.db.QueryRow(query).Scan(dst); err != nil {
					t.Fatal(err)
				}
			}
			q(`SELECT COUNT(*) FROM comparisons`, &rows)
			q(`SELECT COUNT(DISTINCT comparison_key) FROM comparisons`, &keys)
			q(`SELECT COUNT(DISTINCT case_id) FROM comparisons`, &cases)
			q(`SELECT COUNT(*) FROM comparison_rois`, &rois)
			q(`SELECT COUNT(*) FROM comparisons c WHERE roi_count <> (SELECT COUNT(*) FROM comparison_rois r WHERE r.comparison_id = c.id)`, &badROIs)
			if rows != writers*per || keys != rows || cases != rows {
				t.Errorf("%d rows, %d distinct keys, %d distinct cases: want %d of each", rows, keys, cases, writers*per)
			}
			if rois != 6*writers*per || badROIs != 0 {
				t.Errorf("%d ROI rows (want %d), %d comparisons whose ROI rows do not match their count", rois, 6*writers*per, badROIs)
			}
			// Every case is there.
			pts, err := allPoints(t, s, Filter{})
			if err != nil {
				t.Fatal(err)
			}
			seen := map[string]bool{}
			for _, p := range pts {
				seen[p.CaseID] = true
			}
			for i := range writers * per {
				if id := fmt.Sprintf("case-%05d", i); !seen[id] {
					t.Errorf("%s lost", id)
				}
			}
		})
	}
}

// TestKillMidWrite kills (SIGKILL) a process writing transactions of 50
// comparisons at moments while it writes, three times, and checks that the
// store stays consistent each time: SQLite's integrity_check and
// foreign_key_check find nothing (PostgreSQL: the server rolled the
// transaction back), every comparison has all its ROI rows, the number of
// comparisons is a whole number of transactions, and the store takes new
// writes.
func TestKillMidWrite(t *testing.T) {
	if testing.Short() {
		t.Skip("kills processes: not in -short")
	}
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			dsn := mk(t)
			s := openStore(t, dsn)
			for round := range 3 {
				cmd := writerCmd(t, dsn, "forever", round, 0, 0, 1)
				var stderr strings.Builder
				cmd.Stderr = &stderr
				if err := cmd.Start(); err != nil {
					t.Fatal(err)
				}
				// Wait for this round's writer to commit something, then
				// kill it a few milliseconds on, mid-transaction at most
				// moments.
				before, _ := s.Count(context.Background())
				deadline := time.Now().Add(60 * time.Second)
				for {
					n, err := s.Count(context.Background())
					if err != nil {
						t.Fatal(err)
					}
					if n >= before+100 {
						break
					}
					if time.Now().After(deadline) {
						cmd.Process.Kill()
						t.Fatalf("the writer committed nothing in 60 s: %s", stderr.String())
					}
					time.Sleep(5 * time.Millisecond)
				}
				time.Sleep(time.Duration(3+7*round) * time.Millisecond)
				if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
					t.Fatal(err)
				}
				err := cmd.Wait()
				if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
					t.Fatalf("the writer ended by itself (%v): %s", err, stderr.String())
				}
				checkConsistent(t, s, kind)
				n, _ := s.Count(context.Background())
				if n%50 != 0 {
					t.Errorf("round %d: %d comparisons: not a whole number of 50-comparison transactions", round, n)
				}
				t.Logf("round %d: killed with %d comparisons committed", round, n)
			}
			// Opened afresh (SQLite recovers from its write-ahead log), the
			// store is consistent and takes new writes.
			s.Close()
			s = openStore(t, dsn)
			checkConsistent(t, s, kind)
			if _, err := s.Record(context.Background(), synthResult(7, 96, 97, 99), Meta{Source: "compare"}); err != nil {
				t.Errorf("writing after the kills: %v", err)
			}
			checkConsistent(t, s, kind)
		})
	}
}

func checkConsistent(t *testing.T, s *Store, kind string) {
	t.Helper()
	db := s.db
	if kind == "sqlite" {
		var res string
		if err := db.QueryRow(`PRAGMA integrity_check`).Scan(&res); err != nil || res != "ok" {
			t.Errorf("integrity_check: %q %v", res, err)
		}
		rows, err := db.Query(`PRAGMA foreign_key_check`)
		if err != nil {
			t.Fatal(err)
		}
		if rows.Next() {
			t.Error("foreign_key_check finds ROI rows without their comparison")
		}
		rows.Close()
	}
	var bad int
	if err := db.QueryRow(`SELECT COUNT(*) FROM comparisons c WHERE roi_count <> (SELECT COUNT(*) FROM comparison_rois r WHERE r.comparison_id = c.id)`).Scan(&bad); err != nil {
		t.Fatal(err)
	}
	var orphans int
	if err := db.QueryRow(`SELECT COUNT(*) FROM comparison_rois r WHERE NOT EXISTS (SELECT 1 FROM comparisons c WHERE c.id = r.comparison_id)`).Scan(&orphans); err != nil {
		t.Fatal(err)
	}
	if bad != 0 || orphans != 0 {
		t.Errorf("%d comparisons with missing ROI rows, %d ROI rows without a comparison", bad, orphans)
	}
}

// TestConcurrentGoroutines: 8 goroutines sharing one store (batch workers)
// record 400 comparisons, each a fifth of them twice: 400 rows, each once.
func TestConcurrentGoroutines(t *testing.T) {
	for kind, mk := range storeKinds(t) {
		t.Run(kind, func(t *testing.T) {
			s := openStore(t, mk(t))
			var wg sync.WaitGroup
			errs := make(chan error, 8)
			for w := range 8 {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for k := range 50 {
						i := w*50 + k
						for _, j := range []int{i, (i + 50) % 400} {
							if j != i && k%5 != 0 {
								continue
							}
							if _, err := s.Record(context.Background(), synthResult(j, 96, 97, 99), Meta{CaseID: fmt.Sprintf("case-%05d", j)}); err != nil {
								errs <- err
								return
							}
						}
					}
				}()
			}
			wg.Wait()
			close(errs)
			for err := range errs {
				t.Error(err)
			}
			var rows, cases, rois int
			s.db.QueryRow(`SELECT COUNT(*), COUNT(DISTINCT case_id) FROM comparisons`).Scan(&rows, &cases)
			s.db.QueryRow(`SELECT COUNT(*) FROM comparison_rois`).Scan(&rois)
			if rows != 400 || cases != 400 || rois != 6*400 {
				t.Errorf("%d rows, %d cases, %d ROI rows: want 400, 400, 2400", rows, cases, rois)
			}
		})
	}
}
