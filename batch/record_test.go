package batch

import (
	"context"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"sort"
	"sync"
	"testing"
	"time"

	"voxgamma/internal/batchtest"
	"voxgamma/result"
)

// recorder collects what a batch or watcher hands to Options.Record.
type recorder struct {
	mu   sync.Mutex
	got  map[string][]*result.Result
	fail map[string]bool
}

func (r *recorder) record(_ context.Context, c Case, res *result.Result) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.fail[c.ID] {
		return errors.New("store unavailable")
	}
	if r.got == nil {
		r.got = map[string][]*result.Result{}
	}
	r.got[c.ID] = append(r.got[c.ID], res)
	return nil
}

func (r *recorder) ids() []string {
	var ids []string
	for id := range r.got {
		ids = append(ids, id)
	}
	sort.Strings(ids)
	return ids
}

// TestBatchRecordsEvaluatedCases: the hook gets every evaluated case (pass
// or fail), the result as written in its folder, and no case that could
// not be evaluated; a resumed batch hands the skipped cases again (the
// store is idempotent), which records a case whose record failed the
// first time; failures are counted.
func TestBatchRecordsEvaluatedCases(t *testing.T) {
	dir := t.TempDir()
	manifest := writeStudy(t, dir, mixedStudy())
	out := filepath.Join(dir, "out")
	rec := &recorder{fail: map[string]bool{"p06": true}}
	rep := runBatch(t, context.Background(), manifest, Options{Out: out, Jobs: 2, Record: rec.record})
	want := []string{"p01", "p02", "p04"}
	if got := rec.ids(); len(got) != len(want) || got[0] != want[0] || got[1] != want[1] || got[2] != want[2] {
		t.Errorf("recorded %v, want %v (p03, p05 could not be evaluated; p06's record failed)", got, want)
	}
	if rep.Recorded != 3 || rep.NotRecorded != 1 {
		t.Errorf("recorded %d, not recorded %d: want 3 and 1", rep.Recorded, rep.NotRecorded)
	}
	data, err := os.ReadFile(filepath.Join(out, CasesDir, "p02", ResultJSON))
	if err != nil {
		t.Fatal(err)
	}
	var onDisk result.Result
	json.Unmarshal(data, &onDisk)
	if got := rec.got["p02"][0]; got.Verdict != "fail" || *got.Overall.PassRate != *onDisk.Overall.PassRate || got.Inputs[0].SHA256 != onDisk.Inputs[0].SHA256 {
		t.Errorf("p02 handed %s %v, folder holds %s %v", got.Verdict, *got.Overall.PassRate, onDisk.Verdict, *onDisk.Overall.PassRate)
	}
	delete(rec.fail, "p06")
	rep = runBatch(t, context.Background(), manifest, Options{Out: out, Jobs: 2, Record: rec.record})
	if rep.Skipped != 4 || rep.Recorded != 4 || rep.NotRecorded != 0 || len(rec.got["p06"]) != 1 || len(rec.got["p01"]) != 2 {
		t.Errorf("resumed: skipped %d, recorded %d, not recorded %d; p06 handed %d times, p01 %d times",
			rep.Skipped, rep.Recorded, rep.NotRecorded, len(rec.got["p06"]), len(rec.got["p01"]))
	}
}

// TestManifestLabels reads the label columns (in any spelling of the
// header) and keys, and keeps rejecting unknown ones.
func TestManifestLabels(t *testing.T) {
	csv := "id,reference,evaluated,Machine,technique,site,Planning System,recalculation-engine\np1,a.dcm,b.dcm,LA1,VMAT,prostate,TPS-A,MC-1\np2,a.dcm,b.dcm,,,,,\n"
	cs, err := ParseManifest([]byte(csv), "m.csv", "/base")
	if err != nil {
		t.Fatal(err)
	}
	want := Labels{Machine: "LA1", Technique: "VMAT", Site: "prostate", PlanningSystem: "TPS-A", RecalculationEngine: "MC-1"}
	if cs[0].Labels != want || cs[1].Labels != (Labels{}) {
		t.Errorf("labels %+v, %+v", cs[0].Labels, cs[1].Labels)
	}
	js := `[{"id":"p1","reference":"a","evaluated":"b","machine":"LA1","technique":"VMAT","site":"prostate","planning_system":"TPS-A","recalculation_engine":"MC-1"}]`
	cj, err := ParseManifest([]byte(js), "m.json", "/base")
	if err != nil {
		t.Fatal(err)
	}
	if cj[0].Labels != want {
		t.Errorf("JSON labels %+v", cj[0].Labels)
	}
	if _, err := ParseManifest([]byte("id,reference,evaluated,linac\np1,a,b,x\n"), "m.csv", "/base"); err == nil {
		t.Error("an unknown column was accepted")
	}
}

// TestWatchRecordsAndRetries: a watched case is recorded once evaluated; a
// case whose record fails is not taken as processed and is recorded at a
// later poll, from its results folder, without being compared again.
func TestWatchRecordsAndRetries(t *testing.T) {
	dir, out := t.TempDir(), filepath.Join(t.TempDir(), "out")
	if _, err := batchtest.Write(filepath.Join(dir, "caseA"), batchtest.Spec{}); err != nil {
		t.Fatal(err)
	}
	backdate(t, dir)
	rec := &recorder{fail: map[string]bool{"caseA": true}}
	w := newTestWatcher(t, dir, out, func(o *WatchOptions) { o.Record = rec.record })
	rep := once(t, w)
	if len(rep.Cases) != 0 || len(rec.got) != 0 {
		t.Fatalf("a case whose record failed was reported done: %v", verdicts(rep))
	}
	delete(rec.fail, "caseA")
	w.retryAt = map[string]time.Time{} // the retry is due
	rep = poll(t, w)
	st, _ := ReadStatus(filepath.Join(out, "caseA"))
	if len(rec.got["caseA"]) != 1 || st == nil || st.Runs != 1 {
		t.Errorf("after the retry: recorded %d times, status %+v (want recorded once, compared once)", len(rec.got["caseA"]), st)
	}
	if rep := poll(t, w); len(rep.Cases) != 0 || len(rec.got["caseA"]) != 1 {
		t.Errorf("an idle poll recorded again")
	}
}
