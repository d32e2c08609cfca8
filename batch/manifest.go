package batch

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strings"
)

// Case is one row of a manifest: one comparison of the batch.
type Case struct {
	// ID names the case and its output folder cases/<ID>; see [ValidID].
	ID string `json:"id"`
	// Reference and Evaluated are RT Dose files (or folders holding one),
	// absolute after [ReadManifest] (relative paths in the manifest are
	// relative to the manifest's folder).
	Reference string `json:"reference"`
	Evaluated string `json:"evaluated"`
	// Structures is an RT Structure Set file; empty for none (a reference
	// folder's own structure set is then used, as by compare). The word
	// "none" runs the case deliberately without a structure set (see
	// NoStructures).
	Structures string `json:"structures"`
	// NoStructures is set by ReadManifest when the structures column says
	// "none": the case is compared without a structure set, and per-ROI
	// rules are not applicable (as compare --no-structures).
	NoStructures bool `json:"-"`
	// Protocol is a protocol file (absolute after ReadManifest) or a preset
	// name; empty means the batch's default protocol.
	Protocol string `json:"protocol"`
	// Labels are the case's grouping labels for the results store.
	Labels
	// ReferenceFiles and EvaluatedFiles, when not empty, are the RT Dose
	// files whose sum is the dose (beam or fraction-group doses of one
	// plan, see analysis.Inputs), used instead of Reference or Evaluated;
	// a watched case sets them, a manifest names a folder instead.
	ReferenceFiles, EvaluatedFiles []string `json:"-"`
	// Plan is the case's RT Plan (a watched case's); a manifest's cases
	// take the plan in the reference folder, as compare does.
	Plan string `json:"-"`
	// Index is the case's 0-based position in the manifest (the shard rule
	// counts it); Row names the row in messages: "row 3 (line 4)" for CSV,
	// "row 3" for JSON.
	Index int    `json:"-"`
	Row   string `json:"-"`
}

// doses returns the paths of one dose of the case: the files to sum, else
// the one path.
func doses(one string, files []string) []string {
	if len(files) > 0 {
		return files
	}
	if one == "" {
		return nil
	}
	return []string{one}
}

// roleInputs lists the case's inputs by role, in the order reference,
// evaluated, structures (the structures "" when none), plan (when one).
func (c Case) roleInputs() [][2]string {
	var out [][2]string
	for _, p := range doses(c.Reference, c.ReferenceFiles) {
		out = append(out, [2]string{"reference", p})
	}
	for _, p := range doses(c.Evaluated, c.EvaluatedFiles) {
		out = append(out, [2]string{"evaluated", p})
	}
	out = append(out, [2]string{"structures", c.Structures})
	if c.Plan != "" {
		out = append(out, [2]string{"plan", c.Plan})
	}
	return out
}

// inputPaths lists every input path of the case.
func (c Case) inputPaths() []string {
	var out []string
	for _, in := range c.roleInputs() {
		out = append(out, in[1])
	}
	return out
}

// NoStructuresWord in a manifest's structures column runs the case
// deliberately without a structure set.
const NoStructuresWord = "none"

// Labels are a case's grouping labels, recorded with its result in a
// results store (see package record) and used to group plans for
// process-based limits: the manifest's optional columns (or JSON keys)
// machine, technique, site, planning_system and recalculation_engine.
type Labels struct {
	Machine             string `json:"machine,omitempty"`
	Technique           string `json:"technique,omitempty"`
	Site                string `json:"site,omitempty"`
	PlanningSystem      string `json:"planning_system,omitempty"`
	RecalculationEngine string `json:"recalculation_engine,omitempty"`
}

// LabelColumns are the optional label columns of a manifest (see [Labels]).
// A header may write them with spaces or hyphens ("planning system").
var LabelColumns = []string{"machine", "technique", "site", "planning_system", "recalculation_engine"}

func (l *Labels) column(name string) *string {
	switch name {
	case "machine":
		return &l.Machine
	case "technique":
		return &l.Technique
	case "site":
		return &l.Site
	case "planning_system":
		return &l.PlanningSystem
	case "recalculation_engine":
		return &l.RecalculationEngine
	}
	return nil
}

// knownColumns lists every column a manifest may have.
func knownColumns() string {
	return strings.Join(append(append([]string{}, ManifestColumns...), LabelColumns...), ",")
}

// ManifestColumns are the columns of a CSV manifest, in the documented
// order. id, reference and evaluated are required; structures and protocol
// may be left out or empty.
var ManifestColumns = []string{"id", "reference", "evaluated", "structures", "protocol"}

var idPattern = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]*$`)

// MaxIDLength is the longest case ID accepted (a folder name on every
// common filesystem, with room for the temporary-folder suffix).
const MaxIDLength = 100

// ValidID reports why id cannot name a case folder, or nil: an ID is 1 to
// MaxIDLength characters of ASCII letters, digits, '.', '_' and '-', starting
// with a letter or digit (so never "..", never hidden, never a path).
func ValidID(id string) error {
	switch {
	case id == "":
		return errors.New("empty id")
	case len(id) > MaxIDLength:
		return fmt.Errorf("id %q is longer than %d characters", id, MaxIDLength)
	case !idPattern.MatchString(id):
		return fmt.Errorf("id %q is not filesystem-safe: use letters, digits, '.', '_' and '-', starting with a letter or digit", id)
	}
	return nil
}

// ReadManifest reads a manifest file: CSV with the header
// id,reference,evaluated,structures,protocol (columns in any order;
// structures and protocol optional; the label columns of [LabelColumns]
// may follow), or a JSON list of objects with those keys (chosen by the extension .json, or by content starting with '[').
// Relative paths are made absolute against the manifest's folder. It checks
// that every row has an id, a reference and an evaluated dose, that ids are
// filesystem-safe and unique (also ignoring case, for case-insensitive
// filesystems), and that no column or key is unknown; every error names the
// manifest and the row.
func ReadManifest(path string) ([]Case, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, fmt.Errorf("manifest %s: %w", path, err)
	}
	return ParseManifest(data, path, filepath.Dir(abs))
}

// ParseManifest parses manifest data (see [ReadManifest]); name is used in
// messages and for the format (".json"), baseDir resolves relative paths.
func ParseManifest(data []byte, name, baseDir string) ([]Case, error) {
	var cases []Case
	var err error
	trimmed := bytes.TrimLeft(bytes.TrimPrefix(data, []byte("\xef\xbb\xbf")), " \t\r\n")
	if strings.EqualFold(filepath.Ext(name), ".json") || bytes.HasPrefix(trimmed, []byte("[")) {
		cases, err = parseJSON(trimmed, name)
	} else {
		cases, err = parseCSV(bytes.TrimPrefix(data, []byte("\xef\xbb\xbf")), name)
	}
	if err != nil {
		return nil, err
	}
	if len(cases) == 0 {
		return nil, fmt.Errorf("manifest %s: no cases", name)
	}
	firstRow := map[string]string{}
	for i := range cases {
		c := &cases[i]
		c.Index = i
		where := fmt.Sprintf("manifest %s, %s", name, c.Row)
		if c.ID != "" {
			where += fmt.Sprintf(" (id %q)", c.ID)
		}
		if err := ValidID(c.ID); err != nil {
			return nil, fmt.Errorf("%s: %w", where, err)
		}
		if prev, dup := firstRow[strings.ToLower(c.ID)]; dup {
			return nil, fmt.Errorf("%s: duplicate id (ids must be unique, ignoring case; first seen at %s)", where, prev)
		}
		firstRow[strings.ToLower(c.ID)] = c.Row
		if c.Reference == "" {
			return nil, fmt.Errorf("%s: missing reference", where)
		}
		if c.Evaluated == "" {
			return nil, fmt.Errorf("%s: missing evaluated", where)
		}
		c.Reference = resolve(baseDir, c.Reference)
		c.Evaluated = resolve(baseDir, c.Evaluated)
		if strings.EqualFold(c.Structures, NoStructuresWord) {
			c.Structures, c.NoStructures = "", true
		}
		if c.Structures != "" {
			c.Structures = resolve(baseDir, c.Structures)
		}
		if c.Protocol != "" {
			c.Protocol = resolveProtocol(baseDir, c.Protocol)
		}
	}
	return cases, nil
}

// resolve makes p absolute against base.
func resolve(base, p string) string {
	if filepath.IsAbs(p) {
		return filepath.Clean(p)
	}
	return filepath.Join(base, p)
}

// resolveProtocol resolves a protocol field: a file relative to base when
// one exists there (or the name has a path separator or an extension of a
// protocol file), else the name as written (a preset).
func resolveProtocol(base, p string) string {
	r := resolve(base, p)
	if _, err := os.Stat(r); err == nil {
		return r
	}
	ext := strings.ToLower(filepath.Ext(p))
	if strings.ContainsAny(p, `/\`) || ext == ".yaml" || ext == ".yml" || ext == ".json" {
		return r
	}
	return p
}

func parseCSV(data []byte, name string) ([]Case, error) {
	r := csv.NewReader(bytes.NewReader(data))
	r.FieldsPerRecord = -1
	r.Comment = '#'
	header, err := r.Read()
	if err == io.EOF {
		return nil, fmt.Errorf("manifest %s: empty file (want a header %s)", name, strings.Join(ManifestColumns, ","))
	}
	if err != nil {
		return nil, fmt.Errorf("manifest %s: header: %w", name, err)
	}
	hline, _ := r.FieldPos(0)
	col := map[string]int{}
	for i, h := range header {
		h = strings.NewReplacer(" ", "_", "-", "_").Replace(strings.ToLower(strings.TrimSpace(h)))
		known := false
		for _, k := range ManifestColumns {
			known = known || h == k
		}
		known = known || (&Labels{}).column(h) != nil
		if !known {
			return nil, fmt.Errorf("manifest %s, line %d (header): unknown column %q; want %s", name, hline, header[i], knownColumns())
		}
		if _, dup := col[h]; dup {
			return nil, fmt.Errorf("manifest %s, line %d (header): column %q named twice", name, hline, h)
		}
		col[h] = i
	}
	for _, req := range ManifestColumns[:3] {
		if _, ok := col[req]; !ok {
			return nil, fmt.Errorf("manifest %s, line %d (header): no column %q; want %s", name, hline, req, strings.Join(ManifestColumns, ","))
		}
	}
	var cases []Case
	for n := 1; ; n++ {
		rec, err := r.Read()
		if err == io.EOF {
			break
		}
		line, _ := r.FieldPos(0)
		if err != nil {
			return nil, fmt.Errorf("manifest %s, row %d: %w", name, n, err)
		}
		row := fmt.Sprintf("row %d (line %d)", n, line)
		if len(rec) > len(header) {
			return nil, fmt.Errorf("manifest %s, %s: %d fields, but the header has %d columns", name, row, len(rec), len(header))
		}
		get := func(k string) string {
			if i, ok := col[k]; ok && i < len(rec) {
				return strings.TrimSpace(rec[i])
			}
			return ""
		}
		c := Case{ID: get("id"), Reference: get("reference"), Evaluated: get("evaluated"),
			Structures: get("structures"), Protocol: get("protocol"), Row: row}
		for _, k := range LabelColumns {
			*c.Labels.column(k) = get(k)
		}
		cases = append(cases, c)
	}
	return cases, nil
}

func parseJSON(data []byte, name string) ([]Case, error) {
	var raw []json.RawMessage
	if err := json.Unmarshal(data, &raw); err != nil {
		return nil, fmt.Errorf("manifest %s: want a JSON list of objects with keys %s: %w", name, knownColumns(), err)
	}
	cases := make([]Case, 0, len(raw))
	for i, m := range raw {
		row := fmt.Sprintf("row %d", i+1)
		var c Case
		dec := json.NewDecoder(bytes.NewReader(m))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&c); err != nil {
			return nil, fmt.Errorf("manifest %s, %s: %w (keys: %s)", name, row, err, knownColumns())
		}
		c.ID, c.Reference, c.Evaluated = strings.TrimSpace(c.ID), strings.TrimSpace(c.Reference), strings.TrimSpace(c.Evaluated)
		c.Structures, c.Protocol = strings.TrimSpace(c.Structures), strings.TrimSpace(c.Protocol)
		for _, k := range LabelColumns {
			f := c.Labels.column(k)
			*f = strings.TrimSpace(*f)
		}
		c.Row = row
		cases = append(cases, c)
	}
	return cases, nil
}
