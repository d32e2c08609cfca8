package record

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	"voxgamma/result"
)

// Kinds are the ROI kinds whose worst pass rate is kept per comparison.
var Kinds = [4]string{"target", "oar", "body", "other"}

func kindIndex(kind string) int {
	for i, k := range Kinds {
		if k == kind {
			return i
		}
	}
	return -1
}

// LabelKeys are the grouping labels of a comparison, as named in a batch
// manifest's columns, in the --group option and in the store's columns.
var LabelKeys = []string{"machine", "technique", "site", "planning_system", "recalculation_engine"}

// Labels group comparisons for process-based limits: the treatment
// machine, the technique (e.g. VMAT, IMRT, SRS), the anatomical site, the
// planning system and the recalculation engine (or measuring system) that
// made the evaluated dose. Any may be empty.
type Labels struct {
	Machine, Technique, Site, PlanningSystem, RecalculationEngine string
}

func (l *Labels) field(key string) *string {
	switch NormaliseKey(key) {
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

// NormaliseKey writes a label key in its canonical form: lower case, with
// '_' for spaces and hyphens ("Planning system" → "planning_system").
func NormaliseKey(key string) string {
	switch key {
	case "machine", "technique", "site", "planning_system", "recalculation_engine":
		return key
	}
	k := strings.ToLower(strings.TrimSpace(key))
	return strings.NewReplacer(" ", "_", "-", "_").Replace(k)
}

// IsLabelKey reports whether key (in any form NormaliseKey accepts) names a
// label.
func IsLabelKey(key string) bool {
	var l Labels
	return l.field(key) != nil
}

// Get returns the label of that key ("" for an unknown key).
func (l Labels) Get(key string) string {
	if f := l.field(key); f != nil {
		return *f
	}
	return ""
}

// Set sets the label of that key, trimmed of spaces; an unknown key is an
// error naming the known ones.
func (l *Labels) Set(key, value string) error {
	f := l.field(key)
	if f == nil {
		return fmt.Errorf("unknown label %q: want one of %s", key, strings.Join(LabelKeys, ", "))
	}
	*f = strings.TrimSpace(value)
	return nil
}

// Or returns l with its empty labels taken from d.
func (l Labels) Or(d Labels) Labels {
	for _, k := range LabelKeys {
		if l.Get(k) == "" {
			l.Set(k, d.Get(k))
		}
	}
	return l
}

// Meta is what the store records about a comparison besides its result.
type Meta struct {
	// Source is the command that made the comparison: "compare", "batch",
	// "watch" or "import".
	Source string
	// CaseID names the case (a batch manifest's id, a watched case's key,
	// an imported result's folder).
	CaseID string
	// Labels are the comparison's grouping labels.
	Labels Labels
	// Deidentify stores pseudonyms for the patient ID, the DICOM UIDs and
	// the case id, and leaves the input paths out.
	Deidentify bool
	// Pseudonym makes the pseudonyms; nil means [DefaultPseudonym].
	Pseudonym func(string) string
	// Time is when the comparison ran; zero means the result's run start,
	// or the time of recording when the result has none.
	Time time.Time
}

// DefaultPseudonym is the pseudonym used when Meta.Pseudonym is nil: a
// hash of the value ("" stays "").
func DefaultPseudonym(s string) string {
	if s == "" {
		return ""
	}
	h := sha256.Sum256([]byte("voxgamma-record:" + s))
	return "ANON-" + strings.ToUpper(hex.EncodeToString(h[:6]))
}

// comparison is one row of the comparisons table with its ROI rows.
type comparison struct {
	key                                     string
	comparedAt                              time.Time
	source, caseID, patientID               string
	deidentified                            bool
	labels                                  Labels
	refSHA, evalSHA, structSHA              string
	refUID, evalUID, structUID, frameUID    string
	refPath, evalPath, structPath           *string
	protocolName, protocolSHA, protocolJSON string
	criteria                                result.Criteria
	verdict                                 string
	rulesTotal, rulesNotMet                 int
	overall                                 result.GammaStats
	rois                                    []result.ROI
	worst                                   [len(Kinds)]*float64
	version, schemaVersion                  string
}

// canonicalJSON encodes v with object keys sorted, whatever its Go type (a
// protocol struct from a run, or a map read back from a result file).
func canonicalJSON(v any) ([]byte, error) {
	b, err := json.Marshal(v)
	if err != nil {
		return nil, err
	}
	var generic any
	if err := json.Unmarshal(b, &generic); err != nil {
		return nil, err
	}
	return json.Marshal(generic)
}

// Key returns the idempotency key of a result: the SHA-256 of its input
// files' roles and SHA-256s, the criteria as applied, and the content of
// its protocol. Recording the same comparison again (a resumed or rerun
// batch, a watched case seen again, an import of the same folder) finds
// the same key and replaces the row instead of adding one.
func Key(r *result.Result) (string, error) {
	pj, err := canonicalJSON(r.Protocol)
	if err != nil {
		return "", fmt.Errorf("protocol: %w", err)
	}
	ps := sha256.Sum256(pj)
	type in struct {
		Role   string `json:"role"`
		SHA256 string `json:"sha256"`
	}
	k := struct {
		Format   string  `json:"format"`
		Inputs   []in    `json:"inputs"`
		Dose     float64 `json:"dose_percent"`
		DTA      float64 `json:"dta_mm"`
		Norm     string  `json:"normalisation"`
		NormDose float64 `json:"norm_dose_gy"`
		Thresh   float64 `json:"threshold_percent"`
		Search   float64 `json:"search_mm"`
		Method   string  `json:"method"`
		Interp   string  `json:"interpolation"`
		Protocol string  `json:"protocol_sha256"`
	}{Format: "voxgamma-record-key/2", Inputs: []in{}, Dose: r.Criteria.DosePercent, DTA: r.Criteria.DTAmm,
		Norm: r.Criteria.Normalisation, NormDose: r.Criteria.NormDoseGy, Thresh: r.Criteria.ThresholdPercent,
		Search: r.Criteria.SearchMM, Method: r.Criteria.Method, Interp: r.Criteria.Interpolation, Protocol: hex.EncodeToString(ps[:])}
	for _, i := range r.Inputs {
		k.Inputs = append(k.Inputs, in{i.Role, i.SHA256})
	}
	b, err := json.Marshal(k)
	if err != nil {
		return "", err
	}
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:]), nil
}

// newComparison makes the row of a result. It refuses a result that was
// not evaluated to a verdict, and one without inputs.
func newComparison(r *result.Result, m Meta, now time.Time) (*comparison, error) {
	if r == nil {
		return nil, fmt.Errorf("no result")
	}
	if r.Verdict != "pass" && r.Verdict != "fail" {
		return nil, fmt.Errorf("verdict %q: only evaluated comparisons (pass or fail) are recorded", r.Verdict)
	}
	if len(r.Inputs) == 0 {
		return nil, fmt.Errorf("the result lists no input files")
	}
	key, err := Key(r)
	if err != nil {
		return nil, err
	}
	pj, err := canonicalJSON(r.Protocol)
	if err != nil {
		return nil, fmt.Errorf("protocol: %w", err)
	}
	ps := sha256.Sum256(pj)
	c := &comparison{key: key, source: m.Source, caseID: m.CaseID, deidentified: m.Deidentify, labels: m.Labels,
		protocolJSON: string(pj), protocolSHA: hex.EncodeToString(ps[:]), criteria: r.Criteria, verdict: r.Verdict,
		rulesTotal: len(r.Rules), overall: r.Overall, rois: r.ROIs, version: r.Version, schemaVersion: r.SchemaVersion}
	for _, k := range LabelKeys {
		c.labels.Set(k, c.labels.Get(k))
	}
	var pn struct {
		Name string `json:"name"`
	}
	json.Unmarshal(pj, &pn)
	c.protocolName = pn.Name
	for _, o := range r.Rules {
		// "not applicable" is not a rule not met; results of schema 1.0
		// have no outcome, only met.
		if o.Outcome == result.NotMet || (o.Outcome == "" && !o.Met) {
			c.rulesNotMet++
		}
	}
	for _, x := range r.ROIs {
		k := kindIndex(x.Kind)
		if x.Source != "structure set" || x.PassRate == nil || k < 0 {
			continue
		}
		if c.worst[k] == nil || *x.PassRate < *c.worst[k] {
			v := *x.PassRate
			c.worst[k] = &v
		}
	}
	c.comparedAt = m.Time
	if c.comparedAt.IsZero() && r.Run.Started != "" {
		if t, err := time.Parse(time.RFC3339Nano, r.Run.Started); err == nil {
			c.comparedAt = t
		}
	}
	if c.comparedAt.IsZero() {
		c.comparedAt = now
	}
	str := func(s string) *string { return &s }
	// A dose summed from several files (result.Input.Part) is recorded by
	// its first file, with the SHA-256 of its parts' SHA-256s in order.
	var refParts, evalParts []string
	for _, in := range r.Inputs {
		switch in.Role {
		case "reference", "reference points":
			if in.Part > 0 {
				refParts = append(refParts, in.SHA256)
			}
			if in.Part <= 1 {
				c.refSHA, c.refUID, c.refPath = in.SHA256, in.SOPInstanceUID, str(in.Path)
				c.frameUID = in.FrameOfReferenceUID
			}
		case "evaluated":
			if in.Part > 0 {
				evalParts = append(evalParts, in.SHA256)
			}
			if in.Part <= 1 {
				c.evalSHA, c.evalUID, c.evalPath = in.SHA256, in.SOPInstanceUID, str(in.Path)
			}
			if c.frameUID == "" {
				c.frameUID = in.FrameOfReferenceUID
			}
		case "structures":
			c.structSHA, c.structUID, c.structPath = in.SHA256, in.SOPInstanceUID, str(in.Path)
		}
		if c.patientID == "" {
			c.patientID = in.PatientID
		}
	}
	partsSHA := func(parts []string) string {
		h := sha256.Sum256([]byte(strings.Join(parts, "\n")))
		return hex.EncodeToString(h[:])
	}
	if len(refParts) > 1 {
		c.refSHA = partsSHA(refParts)
	}
	if len(evalParts) > 1 {
		c.evalSHA = partsSHA(evalParts)
	}
	if m.Deidentify {
		p := m.Pseudonym
		if p == nil {
			p = DefaultPseudonym
		}
		// A result de-identified when it was written carries pseudonyms
		// for the patient already: they are kept, so that the store and
		// the result file name the patient alike.
		if !deidentifiedResult(r) {
			c.patientID = p(c.patientID)
		}
		c.caseID = p(c.caseID)
		for _, u := range []*string{&c.refUID, &c.evalUID, &c.structUID, &c.frameUID} {
			*u = p(*u)
		}
		c.refPath, c.evalPath, c.structPath = nil, nil, nil
	}
	return c, nil
}

// deidentifiedResult reports whether a result says it was de-identified.
func deidentifiedResult(r *result.Result) bool {
	for _, n := range r.Notes {
		if strings.HasPrefix(n, "de-identified") {
			return true
		}
	}
	return false
}

// dvhDiff returns an ROI's DVH difference in percent of one metric, or nil.
func dvhDiff(x result.ROI, metric string) *float64 {
	if x.DVH == nil {
		return nil
	}
	d := x.DVH.DifferencePercent
	switch metric {
	case "d95":
		return d.D95Gy
	case "d2":
		return d.D2Gy
	}
	return d.MeanGy
}
