package main

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
)

// btCase is one invented case of a command test study.
type btCase struct {
	id   string
	spec batchtest.Spec
	// missing names a reference file that does not exist.
	missing bool
}

// btWriteManifest writes each case into dir/in/<id>/ and returns the path of
// a CSV manifest naming them relative to itself.
func btWriteManifest(t *testing.T, dir string, cases []btCase) string {
	t.Helper()
	var b strings.Builder
	b.WriteString("id,reference,evaluated,structures,protocol\n")
	for _, c := range cases {
		if _, err := batchtest.Write(filepath.Join(dir, "in", c.id), c.spec); err != nil {
			t.Fatal(err)
		}
		ref := "in/" + c.id + "/reference.dcm"
		if c.missing {
			ref = "in/" + c.id + "/absent.dcm"
		}
		structures := "in/" + c.id + "/structures.dcm"
		if c.spec.NoStructures {
			// Deliberately none: per-ROI rules are not applicable (an
			// empty cell would make them not met).
			structures = batch.NoStructuresWord
		}
		fmt.Fprintf(&b, "%s,%s,in/%s/evaluated.dcm,%s,\n", c.id, ref, c.id, structures)
	}
	path := filepath.Join(dir, "manifest.csv")
	if err := os.WriteFile(path, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func btRun(args ...string) (status int, stdout, stderr string) {
	var o, e bytes.Buffer
	status = run(args, &o, &e)
	captureJSON(nil, args)
	return status, o.String(), e.String()
}

func btLastLine(s string) string {
	lines := strings.Split(strings.TrimRight(s, "\n"), "\n")
	return lines[len(lines)-1]
}

// btSummaryCSV reads a summary.csv and drops its seconds column.
func btSummaryCSV(t *testing.T, path string) string {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(bytes.NewReader(data)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) == 0 || strings.Join(rows[0], ",") != strings.Join(batch.SummaryColumns, ",") || rows[0][len(rows[0])-1] != "seconds" {
		t.Fatalf("%s: header %v", path, rows)
	}
	var b strings.Builder
	for _, r := range rows {
		b.WriteString(strings.Join(r[:len(r)-1], "|") + "\n")
	}
	return b.String()
}

// btSummaryJSON reads a summary.json with every row's seconds set
// to 0.
func btSummaryJSON(t *testing.T, path string) string {
	t.Helper()
	s, err := batch.ReadSummaryJSON(path)
	if err != nil {
		t.Fatal(err)
	}
	for i := range s.Rows {
		s.Rows[i].Seconds = 0
	}
	data, _ := json.Marshal(s)
	return string(data)
}

func TestBatchCmdExitStatusAndLog(t *testing.T) {
	dir := t.TempDir()
	manifest := btWriteManifest(t, dir, []btCase{
		{id: "pass1"}, {id: "fail1", spec: batchtest.Spec{Scale: 0.85}}, {id: "err1", missing: true}, {id: "pass2", spec: batchtest.Spec{NoStructures: true}},
	})
	out := filepath.Join(dir, "out")
	status, stdout, stderr := btRun("batch", manifest, "--out", out, "--jobs", "2", "--gamma-map", "--max-memory", "512MiB")
	if status != exitError {
		t.Fatalf("exit %d, want 1 (a case could not be evaluated); stderr:\n%s", status, stderr)
	}
	want := "voxgamma: error: batch: 2 passed, 1 failed rules, 1 could not be evaluated (of 4 cases); 4 computed, 0 skipped as up to date"
	if btLastLine(stderr) != want {
		t.Errorf("last stderr line %q, want %q", btLastLine(stderr), want)
	}
	for _, id := range []string{"pass1", "fail1", "err1", "pass2"} {
		if !strings.Contains(stderr, `msg="case finished" id=`+id+" verdict=") {
			t.Errorf("no finish line for %s in the log:\n%s", id, stderr)
		}
	}
	if !strings.Contains(stderr, `msg="case started" id=pass1`) || !strings.Contains(stderr, "memory_budget=\"512 MiB\"") {
		t.Errorf("log lacks a start line or the budget:\n%s", stderr)
	}
	if !strings.Contains(stdout, filepath.Join(out, "summary.csv")) {
		t.Errorf("stdout %q", stdout)
	}
	if _, err := os.Stat(filepath.Join(out, "cases", "pass1", "gamma.dcm")); err != nil {
		t.Errorf("--gamma-map: %v", err)
	}
	if _, err := os.Stat(filepath.Join(out, "cases", "pass1", "report.html")); !os.IsNotExist(err) {
		t.Errorf("report.html written without --report")
	}

	// Resumed: nothing to do, same outcome.
	status, _, stderr = btRun("batch", manifest, "--out", out, "--jobs", "2", "--gamma-map", "-q")
	if status != exitError || !strings.HasSuffix(btLastLine(stderr), "1 computed, 3 skipped as up to date") {
		t.Errorf("resumed: exit %d, %q", status, btLastLine(stderr))
	}

	// Only evaluated cases, one failing: 2. All passing: 0.
	m2 := btWriteManifest(t, filepath.Join(dir, "b"), []btCase{{id: "a"}, {id: "b", spec: batchtest.Spec{Scale: 0.85}}})
	status, _, stderr = btRun("batch", m2, "--out", filepath.Join(dir, "out2"))
	if status != exitRuleFail || btLastLine(stderr) != "voxgamma: batch: 1 passed, 1 failed rules, 0 could not be evaluated (of 2 cases); 2 computed, 0 skipped as up to date (exit 2)" {
		t.Errorf("exit %d, %q", status, btLastLine(stderr))
	}
	m3 := btWriteManifest(t, filepath.Join(dir, "c"), []btCase{{id: "a"}, {id: "b"}})
	status, _, stderr = btRun("batch", m3, "--out", filepath.Join(dir, "out3"), "--criteria", "2%/2mm", "--report")
	if status != exitPass || btLastLine(stderr) != "voxgamma: batch: 2 passed, 0 failed rules, 0 could not be evaluated (of 2 cases); 2 computed, 0 skipped as up to date" {
		t.Errorf("exit %d, %q", status, btLastLine(stderr))
	}
	if _, err := os.Stat(filepath.Join(dir, "out3", "cases", "a", "report.html")); err != nil {
		t.Errorf("--report: %v", err)
	}
}

func TestBatchCmdRefusesBadInput(t *testing.T) {
	dir := t.TempDir()
	good := btWriteManifest(t, dir, []btCase{{id: "a"}})
	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("id,reference,evaluated\na,x.dcm,y.dcm\n../b,x.dcm,y.dcm\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"batch", bad, "--out", dir + "/o"}, `row 2 (line 3) (id "../b"): id "../b" is not filesystem-safe`},
		{[]string{"batch", good}, "--out is required"},
		{[]string{"batch", good, "--out", dir + "/o", "--max-memory", "lots"}, "--max-memory"},
		{[]string{"batch", good, "--out", dir + "/o", "--shard", "3/3"}, "--shard"},
		{[]string{"batch", good, "--out", dir + "/o", "--criteria", "3%"}, "--criteria"},
		{[]string{"batch", good, "--out", dir + "/o", "--protocol", "nonesuch"}, `protocol "nonesuch"`},
	} {
		status, _, stderr := btRun(c.args...)
		if status != exitError || !strings.Contains(btLastLine(stderr), c.want) || !strings.HasPrefix(btLastLine(stderr), "voxgamma: error: ") {
			t.Errorf("%v: exit %d, %q; want 1 and %q", c.args, status, btLastLine(stderr), c.want)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "o", "cases", "a")); !os.IsNotExist(err) {
		t.Error("a refused batch ran a case")
	}
}

func TestBatchCmdShardFromEnvironment(t *testing.T) {
	dir := t.TempDir()
	manifest := btWriteManifest(t, dir, []btCase{{id: "a"}, {id: "b"}, {id: "c"}})
	out := filepath.Join(dir, "out")
	t.Setenv("JOB_COMPLETION_INDEX", "1")
	status, _, stderr := btRun("batch", manifest, "--out", out, "--shard-count", "2")
	if status != exitPass || !strings.Contains(btLastLine(stderr), "(of 1 cases)") || !strings.Contains(btLastLine(stderr), "shard 1/2") {
		t.Fatalf("exit %d, %q", status, btLastLine(stderr))
	}
	if _, err := os.Stat(filepath.Join(out, "summary-shard-1-of-2.json")); err != nil {
		t.Error(err)
	}
	if _, err := os.Stat(filepath.Join(out, "summary.json")); !os.IsNotExist(err) {
		t.Error("a shard wrote the shared summary")
	}
	// Only case b (index 1) ran.
	entries, _ := os.ReadDir(filepath.Join(out, "cases"))
	if len(entries) != 1 || entries[0].Name() != "b" {
		t.Errorf("case folders %v", entries)
	}
	status, _, stderr = btRun("batch-summary", out, "--manifest", manifest)
	if status != exitError || btLastLine(stderr) != "voxgamma: error: batch-summary: 1 passed, 0 failed rules, 2 could not be evaluated (of 3 cases)" {
		t.Errorf("merge of one shard: exit %d, %q", status, btLastLine(stderr))
	}
	t.Setenv("JOB_COMPLETION_INDEX", "")
	t.Setenv("SLURM_ARRAY_TASK_ID", "0")
	t.Setenv("SLURM_ARRAY_TASK_COUNT", "2")
	status, _, stderr = btRun("batch", manifest, "--out", out)
	if status != exitPass || !strings.Contains(btLastLine(stderr), "(of 2 cases)") {
		t.Fatalf("Slurm shard 0 of 2: exit %d, %q", status, btLastLine(stderr))
	}
	status, _, stderr = btRun("batch-summary", out, "--manifest", manifest)
	if status != exitPass || btLastLine(stderr) != "voxgamma: batch-summary: 3 passed, 0 failed rules, 0 could not be evaluated (of 3 cases)" {
		t.Errorf("merge: exit %d, %q", status, btLastLine(stderr))
	}
}

// btBinary builds the command into the test's temporary folder (the build
// cache makes every build after the first a link).
func btBinary(t *testing.T) string {
	t.Helper()
	goTool, err := exec.LookPath("go")
	if err != nil {
		goTool = "/usr/local/go/bin/go"
	}
	bin := filepath.Join(t.TempDir(), "voxgamma")
	if out, err := exec.Command(goTool, "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// btEnv is the environment without scheduler variables, so that the
// processes run the shard they are told.
func btEnv() []string {
	var env []string
	for _, e := range os.Environ() {
		if !strings.HasPrefix(e, "SLURM_") && !strings.HasPrefix(e, "JOB_COMPLETION_INDEX=") && !strings.HasPrefix(e, "VOXGAMMA_SHARD_COUNT=") {
			env = append(env, e)
		}
	}
	return env
}

func TestBatchCmdShardProcessesKilledAndResumed(t *testing.T) {
	bin := btBinary(t)
	dir := t.TempDir()
	var study []btCase
	for i := range 9 {
		c := btCase{id: fmt.Sprintf("case%02d", i)}
		switch i {
		case 4:
			c.spec.Scale = 0.85
		case 7:
			c.missing = true
		}
		study = append(study, c)
	}
	manifest := btWriteManifest(t, dir, study)
	exitOf := func(err error) int {
		if ee, ok := err.(*exec.ExitError); ok {
			return ee.ExitCode()
		}
		if err != nil {
			t.Fatal(err)
		}
		return 0
	}
	command := func(args ...string) *exec.Cmd {
		c := exec.Command(bin, args...)
		c.Env = btEnv()
		return c
	}
	// --report makes each case write a review page: slow enough (about a
	// tenth of a second) to be caught part-way.
	common := []string{"--report", "--jobs", "1", "--workers", "1", "-q"}

	single := filepath.Join(dir, "single")
	if code := exitOf(command(append([]string{"batch", manifest, "--out", single}, common...)...).Run()); code != exitError {
		t.Fatalf("single run: exit %d", code)
	}

	shared := filepath.Join(dir, "shared")
	procs := make([]*exec.Cmd, 3)
	var stderrs [3]bytes.Buffer
	for i := range procs {
		procs[i] = command(append([]string{"batch", manifest, "--out", shared, "--shard", fmt.Sprintf("%d/3", i)}, common...)...)
		procs[i].Stderr = &stderrs[i]
		if err := procs[i].Start(); err != nil {
			t.Fatal(err)
		}
	}
	// Kill shard 1 once it has started a case: its temporary folder exists.
	victim := map[string]bool{"case01": true, "case04": true, "case07": true}
	killed := false
	deadline := time.Now().Add(20 * time.Second)
	for !killed && time.Now().Before(deadline) {
		entries, _ := os.ReadDir(filepath.Join(shared, "cases"))
		for _, e := range entries {
			if id, _, ok := strings.Cut(strings.TrimPrefix(e.Name(), "."), ".tmp-"); ok && strings.HasPrefix(e.Name(), ".") && victim[id] {
				procs[1].Process.Signal(syscall.SIGKILL)
				killed = true
				break
			}
		}
		time.Sleep(time.Millisecond)
	}
	if !killed {
		t.Fatal("shard 1 never started a case")
	}
	for i, p := range procs {
		err := p.Wait()
		if i == 1 {
			if ws, ok := p.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
				t.Fatalf("shard 1 was not killed: %v", err)
			}
			continue
		}
		if code := exitOf(err); code != exitPass && code != exitRuleFail && code != exitError {
			t.Fatalf("shard %d: exit %d\n%s", i, code, stderrs[i].String())
		}
	}

	// Before the rerun: every case folder present is whole, and shard 1's
	// unfinished cases are reported as not run.
	entries, _ := os.ReadDir(filepath.Join(shared, "cases"))
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			continue
		}
		st, err := batch.ReadStatus(filepath.Join(shared, "cases", e.Name()))
		if err != nil {
			t.Fatalf("case folder %s is not whole: %v", e.Name(), err)
		}
		for _, o := range st.Outputs {
			if _, err := os.Stat(filepath.Join(shared, "cases", e.Name(), o)); err != nil {
				t.Errorf("case %s lacks %s", e.Name(), o)
			}
		}
	}
	out, err := command("batch-summary", shared, "--manifest", manifest, "--out", filepath.Join(dir, "partial")).CombinedOutput()
	if exitOf(err) != exitError {
		t.Fatalf("merge after the kill: %v\n%s", err, out)
	}
	partial, err := batch.ReadSummaryJSON(filepath.Join(dir, "partial", "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	notRun := 0
	for _, r := range partial.Rows {
		if strings.HasPrefix(r.Error, "not run") {
			notRun++
			if !victim[r.ID] {
				t.Errorf("case %s of a shard that finished is not run", r.ID)
			}
		}
	}
	if notRun == 0 {
		t.Fatal("the killed shard left no case unfinished: the kill came too late to test anything")
	}

	// Rerun the killed shard: it cleans its temporary folder and finishes.
	rerun := command(append([]string{"batch", manifest, "--out", shared, "--shard", "1/3"}, common...)...)
	var rerr bytes.Buffer
	rerun.Stderr = &rerr
	exitOf(rerun.Run())
	if !strings.Contains(rerr.String(), "shard 1/3") {
		t.Errorf("rerun: %s", rerr.String())
	}
	entries, _ = os.ReadDir(filepath.Join(shared, "cases"))
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("left after the rerun: %s", e.Name())
		}
	}
	out, err = command("batch-summary", shared, "--manifest", manifest).CombinedOutput()
	if code := exitOf(err); code != exitError {
		t.Fatalf("merge: exit %d\n%s", code, out)
	}
	if !strings.Contains(string(out), "7 passed, 1 failed rules, 1 could not be evaluated (of 9 cases)") {
		t.Errorf("merge output:\n%s", out)
	}
	if a, b := btSummaryCSV(t, filepath.Join(single, "summary.csv")), btSummaryCSV(t, filepath.Join(shared, "summary.csv")); a != b {
		t.Errorf("summary.csv of the shards differs from the single run's:\n%s\n%s", a, b)
	}
	if a, b := btSummaryJSON(t, filepath.Join(single, "summary.json")), btSummaryJSON(t, filepath.Join(shared, "summary.json")); a != b {
		t.Errorf("summary.json of the shards differs from the single run's:\n%s\n%s", a, b)
	}
}
