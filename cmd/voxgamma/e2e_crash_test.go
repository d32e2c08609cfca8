package main

// Crash codes (issue 11, item 9): no input or option may reach a Go fatal
// error or an unrecovered panic. A fatal error ("fatal error: out of
// memory") exits with status 2, which a pipeline reads as "evaluated, a
// rule not met"; a panic in a goroutine ends the whole process, a batch run
// with it. Every such path must end as README's status 1 with one line on
// stderr, and in a batch as that one case's error.

import (
	"fmt"
	"os"
	"path/filepath"
	"runtime/debug"
	"strings"
	"sync/atomic"
	"testing"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
	"voxgamma/internal/fault"
	"voxgamma/job"
)

// noCrash fails the test when the output shows a Go runtime failure.
func noCrash(t *testing.T, r invocation) {
	t.Helper()
	for _, s := range []string{"fatal error", "goroutine ", "panic:", "runtime error"} {
		if strings.Contains(r.stderr, s) || strings.Contains(r.stdout, s) {
			t.Errorf("output shows a Go runtime failure (%q)\n%s", s, r)
			return
		}
	}
}

// crashFixture is the bad-input fixture (a flat 2 Gy reference inside a
// 2.04 Gy evaluated grid, PTV_1 a sphere of radius 5 mm).
func crashFixture(t *testing.T) *badFixture { return newBadFixture(t) }

// TestCrashCodesBinary runs options that once reached Go's fatal errors or
// panics through the built binary, where a fatal error is the process's own
// exit status 2 and not a test crash.
func TestCrashCodesBinary(t *testing.T) {
	bin := buildBinary(t)
	f := crashFixture(t)
	for _, tc := range []struct {
		name  string
		args  []string
		code  int
		cause []string
	}{
		// 10^40 sub-grid points: the count overflowed int, the size check
		// passed, and the allocation died with "fatal error: out of
		// memory", exit 2.
		{"subgrid_step_1e-12", compareArgs(f.ref, f.eval, f.rs, "--subgrid", "PTV_1", "--subgrid-step", "1e-12"), exitError, []string{"--subgrid-step 1e-12", "PTV_1"}},
		{"subgrid_step_1e300", compareArgs(f.ref, f.eval, f.rs, "--subgrid", "PTV_1", "--subgrid-step", "1e300"), exitError, []string{"--subgrid-step 1e+300", "PTV_1"}},
		{"subgrid_step_Inf", compareArgs(f.ref, f.eval, f.rs, "--subgrid", "PTV_1", "--subgrid-step", "Inf"), exitError, []string{"--subgrid-step +Inf"}},
		// ΔD = 3 % of 1e-300 Gy: w² overflowed, Inf·0 gave NaN, and NaN
		// an index of −2^63 in the gamma search.
		{"norm_dose_1e-300", compareArgs(f.ref, f.eval, f.rs, "--norm-dose", "1e-300"), exitError, nil},
		// Each isodose level is a region the size of the reference grid: a
		// thousand levels on a clinical grid exhaust the memory.
		{"isodose_1000_levels", compareArgs(f.ref, f.eval, f.rs, "--isodose", isodoseLevels(1000)), exitError, []string{"--isodose: 1000 levels, at most 20"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := t.TempDir()
			r := execBinary(t, bin, withOutputs(tc.args, out)...)
			noCrash(t, r)
			if r.code != tc.code {
				t.Fatalf("exit %d, want %d\n%s", r.code, tc.code, r)
			}
			oneErrorLine(t, r, tc.cause...)
			if strings.Contains(r.stderr, "internal error") {
				t.Errorf("refused as an internal error, want a reason\n%s", r)
			}
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}
	// A search distance of 1e300 mm reaches past the grid: every point is
	// compared with the whole evaluated grid. The flat case's closed form,
	// Γ = |k−1|·D/ΔD = 0.04/0.06 = 0.667 everywhere (uniform scale, domain
	// NOTES), holds whatever the search distance: exit 0. It once sized a
	// slice from int(1e300) and panicked.
	t.Run("search_1e300", func(t *testing.T) {
		out := t.TempDir()
		args := compareArgs(f.ref, f.eval, f.rs, "--search", "1e300", "--json", filepath.Join(out, "r.json"))
		r := execBinary(t, bin, args...)
		noCrash(t, r)
		if r.code != exitPass {
			t.Fatalf("exit %d, want 0\n%s", r.code, r)
		}
		res := readResultJSON(t, filepath.Join(out, "r.json"))
		checkNear(t, "gamma_max", res.Overall.GammaMax, 0.04/0.06, 1e-4)
	})
	// In a batch, the same option fails each case on its own: the run goes
	// on, writes its summary and exits 1 with its one count line.
	t.Run("batch_subgrid_step_1e-12", func(t *testing.T) {
		dir := t.TempDir()
		m := btWriteManifest(t, dir, []btCase{{id: "a"}, {id: "b", spec: batchtest.Spec{Scale: 0.85}}})
		out := filepath.Join(dir, "out")
		r := execBinary(t, bin, "batch", m, "--out", out, "--subgrid", "PTV_A", "--subgrid-step", "1e-12", "-q")
		noCrash(t, r)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		for _, id := range []string{"a", "b"} {
			st, err := batch.ReadStatus(filepath.Join(out, "cases", id))
			if err != nil || st.Verdict != batch.VerdictError || !strings.Contains(st.Error, "--subgrid-step 1e-12") {
				t.Errorf("case %s: status %+v (%v), want an error naming --subgrid-step", id, st, err)
			}
		}
		if _, err := os.Stat(filepath.Join(out, "summary.csv")); err != nil {
			t.Errorf("no summary: %v", err)
		}
	})
}

// isodoseLevels returns "0.1,0.2,…" with n levels.
func isodoseLevels(n int) string {
	l := make([]string, n)
	for i := range l {
		l[i] = fmt.Sprintf("%g", float64(i+1)/10)
	}
	return strings.Join(l, ",")
}

// hookPanic makes the program panic at the site named, on the first time it
// is reached only (or every time with always).
func hookPanic(t *testing.T, site string, always bool) *atomic.Int64 {
	t.Helper()
	var hits atomic.Int64
	restore := fault.SetForTest(func(s string) {
		if s == site && (hits.Add(1) == 1 || always) {
			panic(fmt.Sprintf("injected at %s\nsecond line", site))
		}
	})
	t.Cleanup(restore)
	return &hits
}

// TestCrashCodesPanics makes each command panic where a panic would do the
// most harm and checks that it ends as exit 1 with one line naming an
// internal error (README "Exit status"), never as a crash of the process:
// the sites are marked in the code with internal/fault.
func TestCrashCodesPanics(t *testing.T) {
	f := crashFixture(t)
	demoDir := t.TempDir()
	dir := t.TempDir()
	m := btWriteManifest(t, dir, []btCase{{id: "a"}, {id: "b"}})
	watched := t.TempDir()
	if _, err := batchtest.Write(filepath.Join(watched, "case1"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name, site string
		args       []string
	}{
		{"compare", fault.Command + " compare", compareArgs(f.ref, f.eval, f.rs)},
		{"compare_gamma_worker", fault.GammaWorker, compareArgs(f.ref, f.eval, f.rs)},
		{"compare_reference_reader", fault.ReferenceReader, compareArgs(f.ref, f.eval, f.rs)},
		{"sweep", fault.Command + " sweep", []string{"sweep", "--reference", f.ref, "--evaluated", f.eval, "--doses", "3", "--dtas", "2"}},
		{"sweep_gamma_worker", fault.GammaWorker, []string{"sweep", "--reference", f.ref, "--evaluated", f.eval, "--doses", "3", "--dtas", "2"}},
		{"demo", fault.Command + " demo", []string{"demo", "--out", demoDir}},
		{"inspect", fault.Command + " inspect", []string{"inspect", f.ref}},
		{"batch", fault.Command + " batch", []string{"batch", m, "--out", filepath.Join(dir, "o1")}},
		{"watch", fault.Command + " watch", []string{"watch", watched, "--once", "--settle", "1ms", "--poll", "1ms"}},
		{"watch_case", fault.WatchCase, []string{"watch", watched, "--once", "--settle", "1ms", "--poll", "1ms"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			hookPanic(t, tc.site, true)
			r := vgRun(t, append(tc.args, "-q")...)
			noCrash(t, r)
			if r.code != exitError {
				t.Fatalf("exit %d, want 1\n%s", r.code, r)
			}
			oneErrorLine(t, r, "internal error", "injected at "+tc.site)
		})
	}
	// A panic while the outputs are staged (job.Write recovers nothing; the
	// command does): exit 1, and no staging file or partial output left.
	t.Run("compare_write", func(t *testing.T) {
		hookPanic(t, fault.JobWriteStaged, true)
		out := t.TempDir()
		r := vgRun(t, withOutputs(append(compareArgs(f.ref, f.eval, f.rs), "-q"), out)...)
		noCrash(t, r)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "internal error", "injected at "+fault.JobWriteStaged)
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder after a panic while writing: %v", names)
		}
	})
	// A panic in one batch case, outside the comparison: the other case is
	// computed, the failing one gets its status, exit 1 with the count line.
	t.Run("batch_one_case", func(t *testing.T) {
		hits := hookPanic(t, fault.BatchCase, false)
		out := filepath.Join(dir, "o2")
		r := vgRun(t, "batch", m, "--out", out, "--jobs", "2", "-q")
		noCrash(t, r)
		if r.code != exitError || hits.Load() != 2 {
			t.Fatalf("exit %d after %d cases, want 1 after 2\n%s", r.code, hits.Load(), r)
		}
		verdicts := map[string]int{}
		for _, id := range []string{"a", "b"} {
			st, err := batch.ReadStatus(filepath.Join(out, "cases", id))
			if err != nil {
				t.Fatalf("case %s: %v", id, err)
			}
			verdicts[st.Verdict]++
			if st.Verdict == batch.VerdictError && !strings.Contains(st.Error, "internal error") {
				t.Errorf("case %s: error %q does not say internal error", id, st.Error)
			}
		}
		if verdicts[batch.VerdictError] != 1 || verdicts[batch.VerdictPass] != 1 {
			t.Errorf("verdicts %v, want one error and one pass", verdicts)
		}
		if !strings.Contains(btLastLine(r.stderr), "1 could not be evaluated") {
			t.Errorf("last stderr line %q does not count the failed case", btLastLine(r.stderr))
		}
	})
}

// TestCrashCodesMemoryLimit: every command sets the Go runtime's soft memory
// limit to its memory budget (runtime/debug.SetMemoryLimit), so the
// collector works harder before the process outgrows the budget; run
// restores the previous limit when the command ends.
func TestCrashCodesMemoryLimit(t *testing.T) {
	if os.Getenv("GOMEMLIMIT") != "" {
		t.Skip("GOMEMLIMIT is set: the commands leave the limit alone")
	}
	f := crashFixture(t)
	before := debug.SetMemoryLimit(-1)
	var during atomic.Int64
	t.Cleanup(fault.SetForTest(func(s string) {
		if strings.HasPrefix(s, fault.Command) {
			during.Store(debug.SetMemoryLimit(-1))
		}
	}))
	const budget = 3 << 30
	vgExit(t, exitPass, append(compareArgs(f.ref, f.eval, f.rs), "--max-memory", "3GiB", "-q")...)
	if during.Load() != budget {
		t.Errorf("memory limit during compare --max-memory 3GiB: %d, want %d", during.Load(), int64(budget))
	}
	vgExit(t, exitPass, "inspect", f.ref)
	// The default budget follows MemAvailable, which moves between two
	// readings on a busy machine: within 5 % is the same budget.
	want, _ := job.DefaultBudget()
	if d := during.Load() - want; d > want/20 || d < -want/20 {
		t.Errorf("memory limit during inspect: %d, want the default budget %d (within 5 %%)", during.Load(), want)
	}
	if after := debug.SetMemoryLimit(-1); after != before {
		t.Errorf("memory limit after the command: %d, want %d as before", after, before)
	}
}
