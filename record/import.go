package record

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"time"

	"voxgamma/result"
)

// ImportOptions configure [Store.Import].
type ImportOptions struct {
	// Labels are given to every comparison imported; CaseLabels (by case
	// id, e.g. from a batch manifest) take precedence where set.
	Labels     Labels
	CaseLabels map[string]Labels
	// Deidentify and Pseudonym are as in [Meta].
	Deidentify bool
	Pseudonym  func(string) string
	// Chunk is the number of comparisons per transaction; 0 means 500.
	Chunk int
}

// ImportReport says what an import did.
type ImportReport struct {
	// Results counts the result files found; New and Updated as in
	// [Counts].
	Results int
	Counts
	// Skipped counts JSON files that are not voxgamma results (summaries,
	// status files, anything else).
	Skipped int
	// Errors lists result files that could not be imported, one line each
	// ("path: why").
	Errors []string
}

// MaxResultSize is the largest result file Import reads.
const MaxResultSize = 256 << 20

// Import records every voxgamma result file (a JSON result document, as
// compare --json, batch and watch write them) found under the folders
// dirs, recursively; hidden folders (names starting with '.', such as a
// batch's temporary case folders) are not entered. Files that are not
// results are skipped. A result's case id is the id in the status.json
// beside it (batch and watch case folders), else its folder's name for a
// file named result.json, else its file name without extension; its time
// is the result's run start, else the status's finish time, else the
// file's modification time. Results already recorded are updated in place
// ([Key]), so importing a folder twice adds nothing. Results that cannot be
// imported (a result that was not evaluated, a newer schema's) are listed
// in the report; an error is returned only when the store fails or a
// folder cannot be read.
func (s *Store) Import(ctx context.Context, dirs []string, opt ImportOptions) (*ImportReport, error) {
	rep := &ImportReport{}
	chunk := opt.Chunk
	if chunk <= 0 {
		chunk = 500
	}
	var batch []Item
	flush := func() error {
		if len(batch) == 0 {
			return nil
		}
		n, err := s.RecordMany(ctx, batch)
		if err != nil {
			return err
		}
		rep.New += n.New
		rep.Updated += n.Updated
		batch = batch[:0]
		return nil
	}
	for _, dir := range dirs {
		st, err := os.Stat(dir)
		if err != nil {
			return rep, fmt.Errorf("import: %w", err)
		}
		if !st.IsDir() {
			return rep, fmt.Errorf("import: %s is not a folder", dir)
		}
		err = filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
			if err != nil {
				return fmt.Errorf("import: %w", err)
			}
			if ctx.Err() != nil {
				return ctx.Err()
			}
			if d.IsDir() {
				if path != dir && strings.HasPrefix(d.Name(), ".") {
					return filepath.SkipDir
				}
				return nil
			}
			if !d.Type().IsRegular() || !strings.EqualFold(filepath.Ext(path), ".json") || strings.HasPrefix(d.Name(), ".") {
				return nil
			}
			it, isResult, why := readResultFile(path)
			if !isResult {
				rep.Skipped++
				return nil
			}
			rep.Results++
			if why != "" {
				rep.Errors = append(rep.Errors, path+": "+why)
				return nil
			}
			labels := opt.Labels
			if l, ok := opt.CaseLabels[it.Meta.CaseID]; ok {
				labels = l.Or(opt.Labels)
			}
			it.Meta.Labels = labels
			it.Meta.Deidentify, it.Meta.Pseudonym = opt.Deidentify, opt.Pseudonym
			if _, err := newComparison(it.Result, it.Meta, time.Now()); err != nil {
				rep.Errors = append(rep.Errors, path+": "+err.Error())
				return nil
			}
			batch = append(batch, it)
			if len(batch) >= chunk {
				return flush()
			}
			return nil
		})
		if err != nil {
			return rep, err
		}
	}
	return rep, flush()
}

// readResultFile reads a JSON file and tells whether it is a voxgamma
// result (an object with the result's schema_version, criteria, overall
// and inputs); why says why a result cannot be recorded.
func readResultFile(path string) (it Item, isResult bool, why string) {
	f, err := os.Open(path)
	if err != nil {
		return it, true, err.Error()
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxResultSize+1))
	if err != nil {
		return it, true, err.Error()
	}
	if len(data) > MaxResultSize {
		return it, false, ""
	}
	var probe map[string]json.RawMessage
	if json.Unmarshal(data, &probe) != nil {
		return it, false, ""
	}
	for _, k := range []string{"schema_version", "criteria", "overall", "inputs", "verdict"} {
		if _, ok := probe[k]; !ok {
			return it, false, ""
		}
	}
	var r result.Result
	if err := json.Unmarshal(data, &r); err != nil {
		return it, true, "not a readable voxgamma result: " + err.Error()
	}
	if major, _, _ := strings.Cut(r.SchemaVersion, "."); major != strings.Split(result.SchemaVersion, ".")[0] {
		return it, true, fmt.Sprintf("result schema version %q: this voxgamma reads %s.x", r.SchemaVersion, strings.Split(result.SchemaVersion, ".")[0])
	}
	it.Result = &r
	it.Meta.Source = "import"
	dir := filepath.Dir(path)
	var status struct {
		ID       string `json:"id"`
		Finished string `json:"finished"`
	}
	if b, err := os.ReadFile(filepath.Join(dir, "status.json")); err == nil && json.Unmarshal(b, &status) == nil && status.ID != "" {
		it.Meta.CaseID = status.ID
	} else if strings.EqualFold(filepath.Base(path), "result.json") {
		it.Meta.CaseID = filepath.Base(dir)
	} else {
		it.Meta.CaseID = strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
	}
	switch {
	case r.Run.Started != "":
	case status.Finished != "":
		if t, err := time.Parse(time.RFC3339Nano, status.Finished); err == nil {
			it.Meta.Time = t
		}
	}
	if it.Meta.Time.IsZero() && r.Run.Started == "" {
		if st, err := os.Stat(path); err == nil {
			it.Meta.Time = st.ModTime()
		}
	}
	return it, true, ""
}
