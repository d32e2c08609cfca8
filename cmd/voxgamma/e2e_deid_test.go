package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/batch"
	"voxgamma/deid"
	"voxgamma/dicomio"
	"voxgamma/internal/batchtest"
	"voxgamma/phantom"
)

// Values planted in the inputs of the de-identification test: a patient
// name, an 8-digit ID (an MRN), a birth date and a study date, a series
// description and dose comment, a structure set label, and a folder named
// the way clinics name them (FAMILY_GIVEN_MRN) holding files whose names
// carry a marker too. All invented.
const (
	plantFamily = "ZQXFAMILY"
	plantGiven  = "QWXGIVEN"
	plantID     = "98765432"
	plantBirth  = "19470315"
	plantStudy  = "20190704"
	plantDesc   = "DESCMARK-KJHG plan for Qwxgiven"
	plantLabel  = "LBLMARK-PLNT"
	plantFolder = plantFamily + "_" + plantGiven + "_" + plantID
	plantFile   = "FILEMARK"
)

// planted returns the values no byte written may hold, with the UIDs of
// the files written: the name and its parts, the ID, both dates in the
// DICOM and ISO forms, the description and its marker, the label, the
// folder and file markers, and every original UID.
func planted(t *testing.T, files ...string) []string {
	t.Helper()
	vals := []string{plantFamily, plantGiven, plantFamily + "^" + plantGiven, plantID, plantBirth, "1947-03-15", plantStudy, "2019-07-04",
		"DESCMARK-KJHG", plantDesc, plantLabel, plantFolder, plantFile}
	for _, f := range files {
		if info, err := dicomio.ReadDoseInfo(f); err == nil {
			vals = append(vals, info.SOPInstanceUID, info.SeriesInstanceUID, info.StudyInstanceUID, info.FrameOfReferenceUID)
			continue
		}
		set, err := dicomio.ReadStructureSet(f)
		if err != nil {
			t.Fatal(err)
		}
		vals = append(vals, set.SOPInstanceUID, set.FrameOfReferenceUID)
	}
	return vals
}

// plantCase writes an invented case carrying every planted value into
// dir/FAMILY_GIVEN_MRN/ with file names ref_FILEMARK.dcm, eval_FILEMARK.dcm
// and rs_FILEMARK.dcm (names the watch command's default rules tell apart).
func plantCase(t *testing.T, dir string, scale float64) *batchtest.Files {
	t.Helper()
	f, err := batchtest.Write(filepath.Join(dir, plantFolder), batchtest.Spec{
		PatientName: plantFamily + "^" + plantGiven, PatientID: plantID, PatientBirthDate: plantBirth, StudyDate: plantStudy,
		Description: plantDesc, Label: plantLabel, Scale: scale,
		Reference: "ref_" + plantFile + ".dcm", Evaluated: "eval_" + plantFile + ".dcm", Structures: "rs_" + plantFile + ".dcm",
		ROIs: []batchtest.ROI{{Name: "PTV_" + plantFamily, InterpretedType: "PTV"}, {Name: "Cord", InterpretedType: "ORGAN"}},
	})
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// grepWritten fails the test for every planted value (compared without
// case) found in what a run wrote: stdout, stderr, and every file and
// folder name and every file's bytes under each output folder.
func grepWritten(t *testing.T, what string, vals []string, r invocation, outDirs ...string) {
	t.Helper()
	check := func(where string, data []byte) {
		l := bytes.ToLower(data)
		for _, v := range vals {
			if v != "" && bytes.Contains(l, bytes.ToLower([]byte(v))) {
				t.Errorf("%s: %s holds the planted value %q", what, where, v)
			}
		}
	}
	check("stdout", []byte(r.stdout))
	check("stderr", []byte(r.stderr))
	for _, d := range outDirs {
		filepath.Walk(d, func(p string, info os.FileInfo, err error) error {
			if err != nil {
				return nil
			}
			rel, _ := filepath.Rel(d, p)
			check("the name "+rel, []byte(rel))
			if info.Mode().IsRegular() {
				data, err := os.ReadFile(p)
				if err != nil {
					t.Fatal(err)
				}
				check(rel, data)
			}
			return nil
		})
	}
}

// TestDeidentifyPlantedValues: with --deidentify, no byte voxgamma writes
// holds any value planted in the inputs (PS3.15 Annex E: names, IDs, birth
// and study dates, descriptions, UIDs; and the paths that clinics name
// after patients): every command (compare, sweep, batch, watch, inspect),
// with every output it has and at every log level (-q, default, -v), with
// a site key from a file, from VOXGAMMA_SITE_KEY, or none. Each run's
// stdout, stderr, every output file's bytes and every file and folder name
// written are searched. The de-identified results still identify the case
// for whoever holds the site key: the pseudonym of the ID is its HMAC
// under that key, the same in every command and run.
func TestDeidentifyPlantedValues(t *testing.T) {
	in := t.TempDir()
	f := plantCase(t, in, 0.97)
	vals := planted(t, f.Reference, f.Evaluated, f.Structures)
	keyFile := filepath.Join(t.TempDir(), "site.key")
	secret := "correct horse battery staple 0123456789"
	os.WriteFile(keyFile, []byte(secret+"\n"), 0o600)
	wantID := deid.NewKey([]byte(secret), "test").Pseudonym(deid.KindID, plantID)

	type keying struct {
		name string
		args []string
		env  string
	}
	keyings := []keying{{"--site-key", []string{"--site-key", keyFile}, ""}, {"env", nil, secret}, {"random", nil, ""}}
	levels := [][]string{{"-q"}, {}, {"-v"}}
	for _, k := range keyings {
		t.Run(k.name, func(t *testing.T) {
			t.Setenv(deid.EnvSiteKey, k.env)
			for _, lv := range levels {
				out := t.TempDir()
				args := append([]string{"compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures, "--deidentify",
					"--json", filepath.Join(out, "r.json"), "--csv", filepath.Join(out, "r.csv"), "--report", filepath.Join(out, "r.html"),
					"--gamma-map", filepath.Join(out, "g.dcm"), "--difference-map", filepath.Join(out, "d.mha"), "--record", filepath.Join(out, "qa.db")}, k.args...)
				r := vgRun(t, append(args, lv...)...)
				if r.code == exitError {
					t.Fatalf("compare: %s", r)
				}
				grepWritten(t, "compare "+strings.Join(lv, ""), vals, r, out)
				res := readResultJSON(t, filepath.Join(out, "r.json"))
				if k.name != "random" && res.Inputs[0].PatientID != wantID {
					t.Errorf("compare: patient ID pseudonym %q, want the site key's %q", res.Inputs[0].PatientID, wantID)
				}
				_, info, err := dicomio.ReadDose(filepath.Join(out, "g.dcm"))
				if err != nil || info.PatientID != res.Inputs[0].PatientID || info.FrameOfReferenceUID != res.Inputs[0].FrameOfReferenceUID {
					t.Errorf("gamma map identifiers %+v, want the result's pseudonym and remapped frame (%v)", info.Identifiers, err)
				}

				out = t.TempDir()
				args = append([]string{"sweep", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", f.Structures, "--deidentify",
					"--doses", "2,3", "--dtas", "2", "--json", filepath.Join(out, "s.json"), "--csv", filepath.Join(out, "s.csv")}, k.args...)
				r = vgRun(t, append(args, lv...)...)
				if r.code != exitPass {
					t.Fatalf("sweep: %s", r)
				}
				grepWritten(t, "sweep "+strings.Join(lv, ""), vals, r, out)

				// The folder holds two plan doses: inspect says so (exit 1).
				r = vgRun(t, append(append([]string{"inspect", "--deidentify", f.Reference, f.Structures, filepath.Dir(f.Reference)}, k.args...), lv...)...)
				if r.code != exitError || !strings.Contains(r.stdout, "RT Structure Set") {
					t.Fatalf("inspect: %s", r)
				}
				grepWritten(t, "inspect "+strings.Join(lv, ""), vals, r)
			}
		})
	}

	// compare stopped by bad input: a structure set of another frame of
	// reference (another planted case) makes an error line that names the
	// files, the label and both frame UIDs.
	other := plantCase(t, t.TempDir(), 1)
	vals2 := append(planted(t, other.Structures), vals...)
	for _, lv := range levels {
		r := vgRun(t, append([]string{"compare", "--reference", f.Reference, "--evaluated", f.Evaluated, "--structures", other.Structures, "--deidentify"}, lv...)...)
		if r.code != exitError || !strings.Contains(r.stderr, "different frames of reference") {
			t.Fatalf("compare across frames: %s", r)
		}
		grepWritten(t, "compare error "+strings.Join(lv, ""), vals2, r)
	}

	// batch: two cases of the planted patient (one whose evaluated file is
	// missing: its error names the path), every output, every log level; a
	// second run with the same key resumes on content hashes.
	manifest := filepath.Join(in, "cases.csv")
	os.WriteFile(manifest, []byte("id,reference,evaluated,structures\n"+
		"c1,"+f.Reference+","+f.Evaluated+","+f.Structures+"\n"+
		"c2,"+f.Reference+","+filepath.Join(filepath.Dir(f.Evaluated), "missing_"+plantFile+".dcm")+",\n"), 0o644)
	for _, lv := range levels {
		out := filepath.Join(t.TempDir(), "b")
		store := t.TempDir()
		args := append([]string{"batch", manifest, "--out", out, "--deidentify", "--site-key", keyFile, "--gamma-map", "--difference-map", "--report",
			"--record", filepath.Join(store, "qa.db")}, lv...)
		r := vgRun(t, args...)
		if r.code != exitError || !strings.Contains(r.stderr, "1 passed, 0 failed rules, 1 could not be evaluated") && !strings.Contains(r.stderr, "0 passed, 1 failed rules, 1 could not be evaluated") {
			t.Fatalf("batch: %s", r)
		}
		grepWritten(t, "batch "+strings.Join(lv, ""), vals, r, out, store)
		st, err := batch.ReadStatus(filepath.Join(out, batch.CasesDir, "c1"))
		if err != nil || st.Inputs[0].Path != "reference" || st.Finished != "" {
			t.Errorf("status: %+v %v", st, err)
		}
		r = vgRun(t, args...)
		if !strings.Contains(r.stderr, "1 skipped as up to date") {
			t.Errorf("batch resume with de-identified statuses did not skip the finished case:\n%s", r.stderr)
		}
		grepWritten(t, "batch again "+strings.Join(lv, ""), vals, r, out)
	}

	// watch: the planted folder as a case (and a copy of it as a broken
	// case, moved aside with an error.txt), every output, every level, and
	// a restart.
	for _, lv := range levels {
		wdir := t.TempDir()
		plantCase(t, wdir, 0.97)
		broken := filepath.Join(wdir, plantFolder+"_2")
		plantCaseAt := plantCase(t, t.TempDir(), 0.97)
		os.MkdirAll(broken, 0o755)
		data, _ := os.ReadFile(plantCaseAt.Reference)
		os.WriteFile(filepath.Join(broken, "ref_"+plantFile+".dcm"), data[:len(data)/2], 0o644)
		data, _ = os.ReadFile(plantCaseAt.Evaluated)
		os.WriteFile(filepath.Join(broken, "eval_"+plantFile+".dcm"), data, 0o644)
		btSettleAll(t, wdir)
		out := filepath.Join(t.TempDir(), "w")
		store := t.TempDir()
		args := append([]string{"watch", wdir, "--out", out, "--once", "--settle", "1s", "--poll", "50ms", "--deidentify", "--site-key", keyFile,
			"--gamma-map", "--difference-map", "--report", "--record", filepath.Join(store, "qa.db")}, lv...)
		r := vgRun(t, args...)
		if r.code != exitError {
			t.Fatalf("watch: %s", r)
		}
		failed, _ := os.ReadDir(filepath.Join(wdir, batch.FailedDir))
		if len(failed) != 1 {
			t.Fatalf("moved aside: %v", failed)
		}
		grepWritten(t, "watch "+strings.Join(lv, ""), vals, r, out, store)
		// What watch wrote among the inputs: the moved-aside folder's name
		// and its error.txt.
		errTxt, err := os.ReadFile(filepath.Join(wdir, batch.FailedDir, failed[0].Name(), "error.txt"))
		if err != nil {
			t.Fatal(err)
		}
		grepWritten(t, "watch error.txt", vals, invocation{stdout: failed[0].Name() + "\n" + string(errTxt)})
		r = vgRun(t, args...)
		if !strings.Contains(r.stderr, "(of 0 cases)") {
			t.Errorf("watch again processed something:\n%s", r.stderr)
		}
		grepWritten(t, "watch again "+strings.Join(lv, ""), vals, r, out)
		var state map[string]any
		data, _ = os.ReadFile(filepath.Join(out, batch.WatchStateFile))
		if err := json.Unmarshal(data, &state); err != nil {
			t.Errorf("state file: %v", err)
		}
	}
}

// With --deidentify, a dose summed from beam files (on different grids, so
// that the method names every file) leaves no planted value in any output,
// nor does the refusal of a set that holds a beam twice.
func TestDeidentifySummedBeams(t *testing.T) {
	in := filepath.Join(t.TempDir(), plantFolder)
	os.Mkdir(in, 0o755)
	ids := dicomio.PhantomIdentifiers(plantFamily+"^"+plantGiven, plantID)
	ids.PatientBirthDate, ids.StudyDate = plantBirth, plantStudy
	desc := func(o *dicomio.WriteOptions) { o.Description = plantDesc }
	var beams []string
	for b, d := range []float64{0.7, 0.8, 0.5} {
		p := filepath.Join(in, "beam"+string(rune('1'+b))+"_"+plantFile+".dcm")
		n := [3]int{12 + 2*b, 12, 8}
		writePartDose(t, p, n, [3]float64{-11 - 2*float64(b), -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(d), ids, "BEAM", 1, b+1, desc)
		beams = append(beams, p)
	}
	eval := filepath.Join(in, "eval_"+plantFile+".dcm")
	writePartDose(t, eval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids, "PLAN", 0, 0, desc)
	// The RT Plan the beams name, its label planted too, found in the
	// reference folder and used for the beam check.
	plan := writeTestPlan(t, filepath.Join(in, "rp_"+plantFile+".dcm"), plantLabel, ids, 3, false, 1, 2)
	vals := append(planted(t, append(beams, eval)...), plan.SOPInstanceUID, plan.SeriesInstanceUID)
	out := t.TempDir()
	args := []string{"compare", "--evaluated", eval, "--no-structures", "--deidentify",
		"--json", filepath.Join(out, "r.json"), "--csv", filepath.Join(out, "r.csv"), "--gamma-map", filepath.Join(out, "g.dcm")}
	for _, b := range beams {
		args = append(args, "--reference", b)
	}
	args = append(args, "--plan", plan.Path)
	r := vgRun(t, args...)
	if r.code == exitError {
		t.Fatalf("compare: %s", r)
	}
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	if len(res.DoseSums) != 1 || !res.DoseSums[0].Resampled || !strings.Contains(res.DoseSums[0].PlanCheck, "every treatment beam") || res.Plan == nil {
		t.Fatalf("dose_sums %+v, plan %+v: want a resampled sum (its method names the files) checked against the plan", res.DoseSums, res.Plan)
	}
	grepWritten(t, "compare", vals, r, out)
	// A beam twice: the refusal names the files, by role.
	again := filepath.Join(in, "beam2again_"+plantFile+".dcm")
	writePartDose(t, again, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(0.9), ids, "BEAM", 1, 2, desc)
	r = vgRun(t, "compare", "--reference", in, "--evaluated", eval, "--no-structures", "--deidentify")
	if r.code != exitError || !strings.Contains(r.stderr, "beam 2 twice") {
		t.Fatalf("a beam twice: %s", r)
	}
	grepWritten(t, "compare, a beam twice", vals, r)
}
