package batch

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"voxgamma/internal/atomicfile"
	"voxgamma/internal/safetext"
	"voxgamma/result"
)

// SummarySchemaVersion is the version of the summary layout. 2.0:
// target_pass_rates is a JSON list of [name, rate] pairs (it was
// "NAME:RATE;NAME:RATE", which an ROI name could forge).
const SummarySchemaVersion = "2.0"

// SummaryColumns are the columns of summary.csv, in order. seconds, the only
// column that varies between runs of the same inputs, is last.
var SummaryColumns = []string{"id", "verdict", "overall_pass_rate", "target_pass_rates", "worst_roi", "worst_roi_pass_rate",
	"rules_failed", "error", "seconds"}

// Row is one case of a summary.
type Row struct {
	// ID is the case id.
	ID string `json:"id"`
	// Verdict is "pass", "fail" or "error".
	Verdict string `json:"verdict"`
	// OverallPassRate in percent (null when not evaluated) and as text
	// with one decimal, rounded down.
	OverallPassRate     *float64 `json:"overall_pass_rate"`
	OverallPassRateText string   `json:"overall_pass_rate_text"`
	// TargetPassRates lists the target ROIs in structure-set order with
	// their pass rates as text, as a JSON array of [name, rate] pairs:
	// [["PTV_60","98.1"],["PTV_54","96.0"]] (see [TargetList]); empty for
	// a case in error. Targets is the same as a list.
	TargetPassRates string    `json:"target_pass_rates"`
	Targets         []ROIRate `json:"targets"`
	// WorstROI is the structure-set ROI with the lowest pass rate.
	WorstROI             string   `json:"worst_roi"`
	WorstROIPassRate     *float64 `json:"worst_roi_pass_rate"`
	WorstROIPassRateText string   `json:"worst_roi_pass_rate_text"`
	// RulesFailed counts the protocol's rule checks not met.
	RulesFailed int `json:"rules_failed"`
	// Error says why the case could not be evaluated.
	Error string `json:"error"`
	// Seconds is the case's wall time: the one field that varies between
	// runs on the same inputs.
	Seconds float64 `json:"seconds"`
}

// Summary is the table of a batch's cases.
type Summary struct {
	// SchemaVersion is [SummarySchemaVersion].
	SchemaVersion string `json:"schema_version"`
	// Caution is the statement every voxgamma output carries.
	Caution string `json:"caution"`
	// Cases counts the rows; Passed, FailedRules and CouldNotEvaluate
	// count them by verdict.
	Cases            int `json:"cases"`
	Passed           int `json:"passed"`
	FailedRules      int `json:"failed_rules"`
	CouldNotEvaluate int `json:"could_not_evaluate"`
	// Shard is set in a shard's own summary.
	Shard *Shard `json:"shard,omitempty"`
	// Rows in manifest order (or by id when no manifest is known).
	Rows []Row `json:"rows"`
}

// ExitStatus is the batch's exit status: 1 when a case could not be
// evaluated, else 2 when a case failed its rules, else 0.
func (s *Summary) ExitStatus() int {
	switch {
	case s.CouldNotEvaluate > 0:
		return ExitError
	case s.FailedRules > 0:
		return ExitRuleFail
	}
	return ExitPass
}

// Line says in words how many cases passed, failed their rules and could
// not be evaluated.
func (s *Summary) Line() string {
	return fmt.Sprintf("%d passed, %d failed rules, %d could not be evaluated (of %d cases)", s.Passed, s.FailedRules, s.CouldNotEvaluate, s.Cases)
}

// rowFromStatus makes a summary row from a case folder's status.
func rowFromStatus(id string, st *Status) Row {
	r := Row{ID: id, Verdict: st.Verdict, Error: st.Error, Seconds: round3(st.Seconds), Targets: []ROIRate{}}
	if st.ID != id {
		r.Verdict, r.Error = VerdictError, fmt.Sprintf("the case folder %s holds the status of case %q", id, st.ID)
		return r
	}
	if f := st.Summary; f != nil && st.Verdict != VerdictError {
		r.OverallPassRate, r.OverallPassRateText = f.OverallPassRate, f.OverallPassRateText
		r.TargetPassRates = TargetList(f.Targets)
		if f.Targets != nil {
			r.Targets = f.Targets
		}
		if f.WorstROI != nil {
			r.WorstROI, r.WorstROIPassRate, r.WorstROIPassRateText = f.WorstROI.Name, f.WorstROI.PassRate, f.WorstROI.PassRateText
		}
		r.RulesFailed = f.RulesFailed
	}
	return r
}

// TargetList writes ROI pass rates as a JSON array of [name, rate text]
// pairs, in order: [["PTV_60","98.1"],["PTV_54","96.0"]]. JSON quotes and
// escapes each name, so no ROI name (not even "PTV_S:100.0;PTV_X" or one
// holding quotes or brackets) can forge another entry, and any JSON reader
// splits the list back exactly.
func TargetList(rates []ROIRate) string {
	pairs := make([][2]string, 0, len(rates))
	for _, t := range rates {
		pairs = append(pairs, [2]string{t.Name, t.PassRateText})
	}
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(pairs); err != nil {
		return "[]" // [][2]string always encodes
	}
	return strings.TrimSuffix(b.String(), "\n")
}

// notRunRow is the row of a case without a finished folder.
func notRunRow(id string) Row {
	return Row{ID: id, Verdict: VerdictError, Targets: []ROIRate{},
		Error: "not run: no finished case folder (its shard did not run, or was stopped before this case finished; run it again to resume)"}
}

// caseFolders lists the finished case folders under each output folder:
// id → folder. An id found under two output folders is an error naming
// both.
func caseFolders(outs []string) (map[string]string, error) {
	found := map[string]string{}
	for _, out := range outs {
		dir := filepath.Join(out, CasesDir)
		entries, err := os.ReadDir(dir)
		if err != nil {
			if os.IsNotExist(err) {
				continue
			}
			return nil, fmt.Errorf("listing %s: %w", dir, err)
		}
		for _, e := range entries {
			if !e.IsDir() || strings.HasPrefix(e.Name(), ".") {
				continue
			}
			path := filepath.Join(dir, e.Name())
			if prev, dup := found[e.Name()]; dup {
				return nil, fmt.Errorf("case %s is in two output folders: %s and %s", e.Name(), prev, path)
			}
			found[e.Name()] = path
		}
	}
	return found, nil
}

// BuildSummary makes the summary of cases from their folders under the
// output folders outs (reading each status.json; a case without a folder
// is an error row "not run"), in the order of cases.
func BuildSummary(outs []string, cases []Case) *Summary {
	s := newSummary()
	for _, c := range cases {
		var row Row
		found := false
		for _, out := range outs {
			dir := filepath.Join(out, CasesDir, c.ID)
			st, err := ReadStatus(dir)
			if os.IsNotExist(err) {
				continue
			}
			found = true
			if err != nil {
				row = Row{ID: c.ID, Verdict: VerdictError, Targets: []ROIRate{}, Error: oneLine(err.Error())}
			} else {
				row = rowFromStatus(c.ID, st)
			}
			break
		}
		if !found {
			row = notRunRow(c.ID)
		}
		s.add(row)
	}
	return s
}

// Merge makes one summary from the case folders under one or more output
// folders (those of the shards, which may share one folder), never from
// the shards' own summaries. With a manifest the rows follow its order
// and a case without a folder is an error row "not run"; folders of cases
// not in the manifest are left out and named in the returned notes.
// Without a manifest every case folder found is a row, sorted by id. An id
// found in two output folders is an error.
func Merge(outs []string, manifest []Case) (*Summary, []string, error) {
	found, err := caseFolders(outs)
	if err != nil {
		return nil, nil, err
	}
	var notes []string
	if manifest == nil {
		ids := make([]string, 0, len(found))
		for id := range found {
			ids = append(ids, id)
		}
		sort.Strings(ids)
		for _, id := range ids {
			manifest = append(manifest, Case{ID: id})
		}
	} else {
		in := map[string]bool{}
		for _, c := range manifest {
			in[c.ID] = true
		}
		var extra []string
		for id := range found {
			if !in[id] {
				extra = append(extra, id)
			}
		}
		sort.Strings(extra)
		for _, id := range extra {
			notes = append(notes, fmt.Sprintf("case folder %s is not in the manifest: left out of the summary", found[id]))
		}
	}
	s := newSummary()
	for _, c := range manifest {
		dir, ok := found[c.ID]
		if !ok {
			s.add(notRunRow(c.ID))
			continue
		}
		st, err := ReadStatus(dir)
		if err != nil {
			s.add(Row{ID: c.ID, Verdict: VerdictError, Targets: []ROIRate{}, Error: oneLine(fmt.Sprintf("case folder %s: %v", dir, err))})
			continue
		}
		s.add(rowFromStatus(c.ID, st))
	}
	return s, notes, nil
}

func newSummary() *Summary {
	return &Summary{SchemaVersion: SummarySchemaVersion, Caution: result.Caution, Rows: []Row{}}
}

func (s *Summary) add(r Row) {
	s.Rows = append(s.Rows, r)
	s.Cases++
	switch r.Verdict {
	case VerdictPass:
		s.Passed++
	case VerdictFail:
		s.FailedRules++
	default:
		s.CouldNotEvaluate++
	}
}

// replace puts r in place of row i, keeping the counts.
func (s *Summary) replace(i int, r Row) {
	rows := s.Rows
	rows[i] = r
	*s = *newSummary()
	for _, x := range rows {
		s.add(x)
	}
}

// EncodeCSV writes the summary table: a header ([SummaryColumns]) and one
// row per case; pass rates as text with one decimal, rounded down ("n/a"
// when nothing was evaluated, empty for a case in error). Cells of text
// from the inputs (the worst ROI's name, the error) that a spreadsheet
// would read as a formula get a leading apostrophe (safetext.CSVCell).
func (s *Summary) EncodeCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(SummaryColumns); err != nil {
		return err
	}
	for _, r := range s.Rows {
		c := safetext.CSVCell
		if err := cw.Write([]string{c(r.ID), r.Verdict, r.OverallPassRateText, c(r.TargetPassRates), c(r.WorstROI), r.WorstROIPassRateText,
			strconv.Itoa(r.RulesFailed), c(r.Error), strconv.FormatFloat(r.Seconds, 'f', 3, 64)}); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// EncodeJSON writes the summary as indented JSON.
func (s *Summary) EncodeJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(s)
}

func writeSummaryJSON(path string, s *Summary) error {
	return atomicfile.Write(path, s.EncodeJSON)
}

// WriteSummary writes dir/summary.csv and dir/summary.json atomically and
// returns their paths.
func WriteSummary(dir string, s *Summary) ([]string, error) {
	csvPath, jsonPath := filepath.Join(dir, "summary.csv"), filepath.Join(dir, "summary.json")
	if err := atomicfile.Write(csvPath, s.EncodeCSV); err != nil {
		return nil, err
	}
	if err := writeSummaryJSON(jsonPath, s); err != nil {
		return nil, err
	}
	return []string{csvPath, jsonPath}, nil
}

// ReadSummaryJSON reads a summary written by [WriteSummary] or a shard.
func ReadSummaryJSON(path string) (*Summary, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var s Summary
	dec := json.NewDecoder(bytes.NewReader(data))
	if err := dec.Decode(&s); err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return &s, nil
}
