// Command studytool serves scripts/test-slurm, the test of the scale-out
// path on a real Slurm: it writes an invented study (cases and manifest)
// and compares a merged batch summary, case by case, with the summary of a
// single-process batch of the same manifest.
//
//	go run ./internal/studytool write DIR [-cases 16] [-shards 4] [-slow 1,2]
//	go run ./internal/studytool compare MERGED_OUT SINGLE_OUT
//	go run ./internal/studytool check-runs OUT MANIFEST
//
// write puts each case under DIR/inputs/<id>/ (batchtest's invented Gaussian
// dose cloud, spherical target and organ at risk, phantom patient: no
// patient data) and DIR/manifest.csv with paths relative to it. The cases
// vary so that every kind of summary row is compared: passes, rule
// failures, one case that cannot be evaluated (its evaluated dose is in a
// frame of reference of its own), one without structures, one under
// another protocol. The cases of the shards named by -slow have larger
// grids, so that a fault can be injected while one of them is being
// computed.
//
// compare reads OUT/summary.json of both folders and every case's
// status.json and result.json, and reports every difference in the fields
// that do not depend on how the batch was run; it leaves out the wall
// times (summary "seconds", status "seconds", "finished" and "runs",
// result "run"), which differ from one run to the next by design.
//
// check-runs checks that every case of the manifest was computed exactly
// once into OUT (status "runs" is 1) unless it could not be evaluated (such
// cases are tried again by every run of their shard, by design), and that
// no temporary or set-aside folder is left in OUT/cases.
package main

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strconv"
	"strings"

	"voxgamma/batch"
	"voxgamma/internal/batchtest"
)

func main() {
	if len(os.Args) < 2 {
		usage()
	}
	var err error
	switch os.Args[1] {
	case "write":
		err = write(os.Args[2:])
	case "compare":
		err = compareCmd(os.Args[2:])
	case "check-runs":
		err = checkRuns(os.Args[2:])
	default:
		usage()
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "studytool:", err)
		os.Exit(1)
	}
}

func usage() {
	fmt.Fprintln(os.Stderr, "usage: studytool write DIR [-cases N] [-shards N] [-slow i,j] | compare MERGED SINGLE | check-runs OUT MANIFEST")
	os.Exit(2)
}

// caseSpec is case number i of a study of n shards: its manifest id, the
// invented data and the protocol column.
func caseSpec(i int, slow bool) (string, batchtest.Spec, string) {
	id := fmt.Sprintf("VG-DEMO-%03d", i+1)
	s := batchtest.Spec{PatientID: id, Peak: 1.5 + 0.25*float64(i%4)}
	if slow {
		// About 1 M reference points mostly above the threshold, and an
		// evaluated dose 2 % over the reference (still a pass under
		// 3 %/2 mm global: Γ = 0.02/0.03 at worst): seconds per case,
		// long enough to be caught mid-case.
		s.Dims, s.Sigma, s.Scale = [3]int{112, 112, 80}, 40, 1.02
	}
	protocol := ""
	switch {
	case i == 3:
		// Could not be evaluated: the evaluated dose is in a frame of
		// reference of its own.
		s.EvaluatedFrame = true
	case i == 7:
		protocol = "stereotactic"
	case i == 11:
		s.NoStructures = true
	case i%5 == 2:
		// 10 % under-dose: global 3 % fails near the peak (Γ = |k−1|·D/ΔD
		// in a flat region, here up to 0.1/0.03 > 1).
		s.Scale = 0.9
	case i%5 == 4:
		s.Scale = 1.01
	}
	return id, s, protocol
}

func write(args []string) error {
	fs := flag.NewFlagSet("write", flag.ExitOnError)
	n := fs.Int("cases", 16, "number of cases")
	shards := fs.Int("shards", 4, "number of shards the study will be split into")
	slowList := fs.String("slow", "", "shards (comma-separated, 0-based) whose cases get larger grids")
	if len(args) < 1 {
		usage()
	}
	dir := args[0]
	if err := fs.Parse(args[1:]); err != nil {
		return err
	}
	if *n < 1 || *shards < 1 {
		return errors.New("write: -cases and -shards must be 1 or more")
	}
	slow := map[int]bool{}
	for _, f := range strings.Split(*slowList, ",") {
		if f = strings.TrimSpace(f); f == "" {
			continue
		}
		k, err := strconv.Atoi(f)
		if err != nil || k < 0 || k >= *shards {
			return fmt.Errorf("write: -slow %q: want shard numbers 0..%d", *slowList, *shards-1)
		}
		slow[k] = true
	}
	var b strings.Builder
	b.WriteString("id,reference,evaluated,structures,protocol\n")
	for i := range *n {
		id, spec, protocol := caseSpec(i, slow[i%*shards])
		f, err := batchtest.Write(filepath.Join(dir, "inputs", id), spec)
		if err != nil {
			return err
		}
		rel := func(p string) string {
			if p == "" {
				return ""
			}
			r, err := filepath.Rel(dir, p)
			if err != nil {
				return p
			}
			return filepath.ToSlash(r)
		}
		rs := rel(f.Structures)
		if spec.NoStructures {
			rs = batch.NoStructuresWord // deliberately without structures
		}
		fmt.Fprintf(&b, "%s,%s,%s,%s,%s\n", id, rel(f.Reference), rel(f.Evaluated), rs, protocol)
	}
	return os.WriteFile(filepath.Join(dir, "manifest.csv"), []byte(b.String()), 0o644)
}

// readJSON decodes a JSON file into generic values (numbers kept as text,
// so that equal numbers compare equal byte for byte).
func readJSON(path string) (any, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	dec := json.NewDecoder(f)
	dec.UseNumber()
	var v any
	if err := dec.Decode(&v); err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return v, nil
}

// drop removes the named keys from a JSON object.
func drop(v any, keys ...string) any {
	if m, ok := v.(map[string]any); ok {
		for _, k := range keys {
			delete(m, k)
		}
	}
	return v
}

// diff lists the differences between a and b, each as "path: a ≠ b".
func diff(path string, a, b any, out *[]string) {
	if len(*out) > 40 {
		return
	}
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok {
			break
		}
		keys := map[string]bool{}
		for k := range x {
			keys[k] = true
		}
		for k := range y {
			keys[k] = true
		}
		sorted := make([]string, 0, len(keys))
		for k := range keys {
			sorted = append(sorted, k)
		}
		sort.Strings(sorted)
		for _, k := range sorted {
			diff(path+"."+k, x[k], y[k], out)
		}
		return
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			break
		}
		for i := range x {
			diff(fmt.Sprintf("%s[%d]", path, i), x[i], y[i], out)
		}
		return
	}
	if !reflect.DeepEqual(a, b) {
		ja, _ := json.Marshal(a)
		jb, _ := json.Marshal(b)
		*out = append(*out, fmt.Sprintf("%s: %s ≠ %s", path, ja, jb))
	}
}

func compareCmd(args []string) error {
	if len(args) != 2 {
		usage()
	}
	merged, single := args[0], args[1]
	var diffs []string
	ms, err := readJSON(filepath.Join(merged, "summary.json"))
	if err != nil {
		return err
	}
	ss, err := readJSON(filepath.Join(single, "summary.json"))
	if err != nil {
		return err
	}
	ids, err := rowIDs(ss)
	if err != nil {
		return fmt.Errorf("%s: %w", single, err)
	}
	if len(ids) == 0 {
		return fmt.Errorf("%s/summary.json lists no case", single)
	}
	// The summaries, rows in order, without the wall time of each row.
	for _, s := range []any{ms, ss} {
		if rows, ok := s.(map[string]any)["rows"].([]any); ok {
			for _, r := range rows {
				drop(r, "seconds")
			}
		}
	}
	diff("summary", ms, ss, &diffs)
	// Each case's status and result.
	for _, id := range ids {
		for _, f := range []struct {
			name string
			drop []string
		}{
			{batch.StatusFile, []string{"seconds", "finished", "runs"}},
			{batch.ResultJSON, []string{"run"}},
		} {
			pm, ps := filepath.Join(merged, batch.CasesDir, id, f.name), filepath.Join(single, batch.CasesDir, id, f.name)
			_, errS := os.Stat(ps)
			if f.name == batch.ResultJSON && os.IsNotExist(errS) {
				// A case that could not be evaluated has no result:
				// the merged folder must have none either.
				if _, err := os.Stat(pm); err == nil {
					diffs = append(diffs, fmt.Sprintf("%s: merged study has %s, single process has none", id, f.name))
				}
				continue
			}
			a, err := readJSON(pm)
			if err != nil {
				diffs = append(diffs, fmt.Sprintf("%s: %v", id, err))
				continue
			}
			b, err := readJSON(ps)
			if err != nil {
				diffs = append(diffs, fmt.Sprintf("%s: %v", id, err))
				continue
			}
			diff(id+"/"+f.name, drop(a, f.drop...), drop(b, f.drop...), &diffs)
		}
		for _, name := range []string{batch.ResultCSV} {
			a, errA := os.ReadFile(filepath.Join(merged, batch.CasesDir, id, name))
			b, errB := os.ReadFile(filepath.Join(single, batch.CasesDir, id, name))
			if os.IsNotExist(errA) && os.IsNotExist(errB) {
				continue
			}
			if errA != nil || errB != nil || string(a) != string(b) {
				diffs = append(diffs, fmt.Sprintf("%s/%s differs (or is missing: %v, %v)", id, name, errA, errB))
			}
		}
	}
	if len(diffs) > 0 {
		return fmt.Errorf("the merged summary differs from the single-process batch:\n  %s", strings.Join(diffs, "\n  "))
	}
	fmt.Printf("merged summary = single-process batch: %d cases, summary rows, status.json, result.json and result.csv equal (wall times left out)\n", len(ids))
	return nil
}

// rowIDs lists the case ids of a summary's rows, in order.
func rowIDs(s any) ([]string, error) {
	m, ok := s.(map[string]any)
	if !ok {
		return nil, errors.New("summary.json is not an object")
	}
	rows, ok := m["rows"].([]any)
	if !ok {
		return nil, errors.New("summary.json has no rows")
	}
	var ids []string
	for _, r := range rows {
		id, _ := r.(map[string]any)["id"].(string)
		if id == "" {
			return nil, errors.New("summary.json has a row without id")
		}
		ids = append(ids, id)
	}
	return ids, nil
}

func checkRuns(args []string) error {
	if len(args) != 2 {
		usage()
	}
	out, manifest := args[0], args[1]
	cases, err := batch.ReadManifest(manifest)
	if err != nil {
		return err
	}
	var problems []string
	evaluated, errored := 0, 0
	for _, c := range cases {
		st, err := batch.ReadStatus(filepath.Join(out, batch.CasesDir, c.ID))
		if err != nil {
			problems = append(problems, fmt.Sprintf("%s: lost (%v)", c.ID, err))
			continue
		}
		switch {
		case st.Verdict == batch.VerdictError:
			errored++
		case st.Runs != 1:
			problems = append(problems, fmt.Sprintf("%s: computed %d times (status runs), want once", c.ID, st.Runs))
		default:
			evaluated++
		}
	}
	entries, err := os.ReadDir(filepath.Join(out, batch.CasesDir))
	if err != nil {
		return err
	}
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			problems = append(problems, "left over: "+filepath.Join(out, batch.CasesDir, e.Name()))
		}
	}
	if len(entries) != len(cases) && len(problems) == 0 {
		problems = append(problems, fmt.Sprintf("%d entries in %s for %d cases", len(entries), filepath.Join(out, batch.CasesDir), len(cases)))
	}
	if len(problems) > 0 {
		return errors.New(strings.Join(problems, "\n  "))
	}
	fmt.Printf("%d cases: %d evaluated exactly once, %d could not be evaluated (retried by design), no temporary folder left\n", len(cases), evaluated, errored)
	return nil
}
