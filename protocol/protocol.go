package protocol

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"voxgamma/gamma"
	"voxgamma/roi"
)

// Protocol is a clinic's comparison protocol: the gamma criteria to apply,
// how to classify ROIs, which isodose ROIs to add, and the rules every
// comparison is checked against.
type Protocol struct {
	// Name identifies the protocol in reports.
	Name string `yaml:"name" json:"name"`
	// Description says what the protocol is for.
	Description string `yaml:"description" json:"description"`
	// Source says where the protocol's numbers come from: a paper, or
	// "common practice", or the clinic's own commissioning.
	Source string `yaml:"source" json:"source"`
	// Criteria are the gamma criteria the comparison is to use.
	Criteria Criteria `yaml:"criteria" json:"criteria"`
	// KindRules classify ROIs by name (see [KindRule]).
	KindRules []KindRule `yaml:"roi_kinds" json:"roi_kinds"`
	// Isodose lists isodose ROIs to add, each in percent of the
	// normalisation dose (e.g. [50, 80]).
	Isodose []float64 `yaml:"isodose_rois" json:"isodose_rois"`
	// Coverage sets how much of the question the comparison must have
	// answered for its rules to count (see [Coverage]).
	Coverage Coverage `yaml:"coverage" json:"coverage"`
	// Rules are checked in order by [Protocol.Evaluate].
	Rules []Rule `yaml:"rules" json:"rules"`
	// Inputs say what to do when the input files themselves say something
	// is off (see [InputChecks]).
	Inputs InputChecks `yaml:"inputs" json:"inputs"`
	// Record names the results store every comparison run with this
	// protocol is recorded in (an SQLite file, relative to the protocol
	// file's folder, or a postgres:// URL); empty for none. It is not part
	// of the protocol's content as results show it (nor of a batch's
	// settings hash): where results are kept does not change them.
	Record string `yaml:"record,omitempty" json:"-"`
	// Noise says how the evaluated dose's statistical noise is handled
	// and which figures the rules judge (see [Noise]).
	Noise Noise `yaml:"evaluated_noise" json:"evaluated_noise"`
}

// InputChecks say what a comparison does when its input files say that
// something is off, each "warn" (compare, with a warning on every output)
// or "error" (refuse: could not evaluate, exit status 1).
type InputChecks struct {
	// SwappedDoses: the files say the reference is an independent dose and
	// the evaluated dose the planning system's (see dicomio.SwapEvidence).
	// Default "warn".
	SwappedDoses string `yaml:"swapped_doses" json:"swapped_doses"`
	// DoseTypeMismatch: the doses' DoseType (3004,0004) differ, PHYSICAL
	// against EFFECTIVE (PS3.3 C.8.8.3: an effective dose is a physical
	// dose corrected for biological effect by a model, so the two differ by
	// that model, not by the delivery). Default "error".
	DoseTypeMismatch string `yaml:"dose_type_mismatch" json:"dose_type_mismatch"`
}

// Defaults of [InputChecks].
const (
	DefaultSwappedDoses     = InputWarn
	DefaultDoseTypeMismatch = InputError
	// InputWarn and InputError are the values of the InputChecks fields.
	InputWarn  = "warn"
	InputError = "error"
)

// inputCheck reads an InputChecks value ("" is the default).
func inputCheck(v, def string) (string, error) {
	switch w := strings.ToLower(strings.TrimSpace(v)); w {
	case "":
		return def, nil
	case InputWarn, InputError:
		return w, nil
	}
	return "", fmt.Errorf("%q: want warn or error", v)
}

// Default values of the keys a protocol file may leave out. [Parse] fills
// every key left out with its default, never with Go's zero value.
const (
	// DefaultThresholdPercent is the low-dose threshold of AAPM TG-218
	// (Miften et al., Med Phys 45 (2018) e53).
	DefaultThresholdPercent = 10.0
	// DefaultOverallCoveragePercent is the smallest share of the reference
	// points at or above the threshold that must have been compared (lie
	// inside the evaluated grid): this tool's choice, so that a cropped
	// evaluated dose cannot pass on the part it covers.
	DefaultOverallCoveragePercent = 99.5
	// DefaultROICoveragePercent is the smallest share of an ROI's volume
	// that must lie inside both dose grids for a rule on the ROI to be
	// judged: the whole ROI (this tool's choice).
	DefaultROICoveragePercent = 100.0
	// DefaultSearchDTAs is the search distance in DTAs when search_mm is
	// left out (common practice, no source).
	DefaultSearchDTAs = 3.0
)

// Values of [Criteria.NormDoseFrom].
const (
	// NormDoseReferenceMax: the global normalisation dose is the reference
	// maximum.
	NormDoseReferenceMax = "reference maximum"
	// NormDoseValue: the global normalisation dose is NormDoseGy.
	NormDoseValue = "value"
	// NormDoseFromPrescription: the global normalisation dose is the RT
	// Plan's prescription (the highest TargetPrescriptionDose of its TARGET
	// dose references, PS3.3 C.8.8.10), as many clinics normalise; the
	// comparison needs the plan.
	NormDoseFromPrescription = "prescription"
)

// Values of [Rule.WhenMissing].
const (
	// MissingFail: a rule whose subject is missing from the comparison (no
	// ROI of that kind or name) is not met. The default.
	MissingFail = "fail"
	// MissingSkip: such a rule is not applicable; it neither meets nor
	// fails the verdict.
	MissingSkip = "skip"
)

// Coverage sets the share of the comparison that must have been possible.
// A reference point at or above the threshold that lies outside the
// evaluated grid was never compared, and an ROI partly outside a dose grid
// is judged on part of itself only: a pass rate over the covered part alone
// answers a smaller question than the one asked.
type Coverage struct {
	// OverallPercent is the smallest percentage of the reference points at
	// or above the threshold that must have been compared; it is checked as
	// a rule of its own ("overall: coverage ≥ 99.5 %"). Default
	// [DefaultOverallCoveragePercent]; 0 leaves the check out.
	OverallPercent float64 `yaml:"overall_percent" json:"overall_percent"`
	// ROIPercent is the smallest percentage of an ROI's volume that must lie
	// inside both dose grids for a rule on that ROI to be judged; a rule on
	// an ROI covered less is not met, whatever its value. Default
	// [DefaultROICoveragePercent]; 0 judges every ROI on its covered part.
	ROIPercent float64 `yaml:"roi_percent" json:"roi_percent"`
}

// DefaultCoverage returns the coverage requirements a protocol file gets
// when it leaves them out.
func DefaultCoverage() Coverage {
	return Coverage{OverallPercent: DefaultOverallCoveragePercent, ROIPercent: DefaultROICoveragePercent}
}

// Values of [Noise].
const (
	// DefaultNoiseHandling: estimate the noise from the evaluated dose and
	// correct for it.
	DefaultNoiseHandling = "auto"
	// NoiseJudgeCorrected (the default) and NoiseJudgeRaw: the figures
	// the rules judge.
	NoiseJudgeCorrected = "corrected"
	NoiseJudgeRaw       = "raw"
)

// Noise is a protocol's handling of the evaluated dose's statistical
// noise (see [ParseNoiseHandling]).
type Noise struct {
	// Handling is "auto" (estimate from the evaluated dose and correct;
	// the default), "off", or σ at the evaluated maximum in percent (a
	// number, e.g. "2" or "2%").
	Handling string `yaml:"handling" json:"handling"`
	// Judge is "corrected" (the default: the rules judge the figures of
	// the comparison against the denoised evaluated dose) or "raw".
	Judge string `yaml:"judge" json:"judge"`
}

// ParseNoiseHandling reads a noise handling: "auto" (or empty), "off", or
// σ at the evaluated maximum in percent ("2", "2%", "0.5 %"), from 0 (a
// dose declared noise-free: nothing is corrected) to 50. It returns
// "auto", "off" or "given" and the percentage.
func ParseNoiseHandling(s string) (mode string, percent float64, err error) {
	t := strings.ToLower(strings.TrimSpace(s))
	switch t {
	case "", "auto":
		return "auto", 0, nil
	case "off":
		return "off", 0, nil
	}
	v, perr := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(t, "%")), 64)
	if perr != nil || !(v >= 0 && v <= 50) {
		return "", 0, fmt.Errorf("noise handling %q: want auto, off, or σ at the evaluated maximum in percent (0 to 50), e.g. 2", s)
	}
	return "given", v, nil
}

// NoiseJudgesRaw reports whether the protocol's rules judge the raw
// figures rather than the noise-corrected ones.
func (p *Protocol) NoiseJudgesRaw() bool {
	return strings.EqualFold(strings.TrimSpace(p.Noise.Judge), NoiseJudgeRaw)
}

// Criteria are a protocol's gamma criteria, as written in the file.
type Criteria struct {
	// Criteria is the dose-difference and distance criterion in the trade's
	// notation, e.g. "3%/2mm" (read by [gamma.ParseCriteria]).
	Criteria string `yaml:"criteria" json:"criteria"`
	// Normalisation is "global" or "local"; empty means "global".
	Normalisation string `yaml:"normalisation" json:"normalisation"`
	// ThresholdPercent is the low-dose threshold in percent of the
	// normalisation dose, from 0 to below 100; left out of a file, it is
	// [DefaultThresholdPercent].
	ThresholdPercent float64 `yaml:"threshold_percent" json:"threshold_percent"`
	// SearchMM is the search distance in mm; 0 or left out means 3×DTA of
	// the criteria applied ([Protocol.Resolved] writes the value out).
	SearchMM float64 `yaml:"search_mm" json:"search_mm"`
	// NormDoseGy is the global normalisation dose in Gy; 0 or left out means
	// the reference maximum.
	NormDoseGy float64 `yaml:"norm_dose_gy,omitempty" json:"norm_dose_gy,omitempty"`
	// NormDoseFrom says where the normalisation dose comes from:
	// [NormDoseReferenceMax], [NormDoseValue] (NormDoseGy) or
	// [NormDoseFromPrescription] (the RT Plan's). Left out, it follows
	// NormDoseGy.
	NormDoseFrom string `yaml:"norm_dose_from,omitempty" json:"norm_dose_from,omitempty"`
}

// KindRule gives a kind to the ROIs whose name matches a pattern.
type KindRule struct {
	// Pattern is matched against the ROI name, case-insensitively: a
	// pattern with '*' or '?' is a glob that must match the whole name, any
	// other pattern is a prefix (the rules of [roi.Rule]).
	Pattern string `yaml:"pattern" json:"pattern"`
	// Kind is "target", "oar", "body" or "other".
	Kind string `yaml:"kind" json:"kind"`
	// Override applies the rule even to ROIs whose RTROIInterpretedType is
	// set; without it the rule applies only to ROIs without a type.
	Override bool `yaml:"override" json:"override"`
}

// Rule is one check of a comparison result against a limit.
type Rule struct {
	// Level is "tolerance" or "action" (any other word is kept as written);
	// empty means "tolerance".
	Level string `yaml:"level" json:"level"`
	// Subject is what the rule applies to: "overall", "targets" (each
	// target ROI of the structure set), "oars" (each organ at risk of the
	// structure set), "roi:NAME" (the ROI of that name, case-insensitive) or
	// "isodose:P" (the isodose ROI of P %, which must be in isodose_rois).
	Subject string `yaml:"subject" json:"subject"`
	// Metric is "pass_rate", "gamma_mean", "gamma_median", "gamma_p95",
	// "gamma_p99", "gamma_max", or "dvh_diff_percent:M" / "dvh_diff_gy:M"
	// (evaluated − reference, in % of the reference or in Gy) with M one of
	// mean, max, min, d98, d95, d50, d2, d0_03cc.
	Metric string `yaml:"metric" json:"metric"`
	// Op is ">=", "<=" or "abs<=" (the absolute value ≤ the limit; for
	// the signed dvh_diff metrics only).
	Op string `yaml:"op" json:"op"`
	// Limit is the limit the measured value is compared with; required.
	Limit float64 `yaml:"limit" json:"limit"`
	// WhenMissing says what a rule whose subject is missing from the
	// comparison gives: [MissingFail] (not met; the default) or
	// [MissingSkip] (not applicable).
	WhenMissing string `yaml:"when_missing" json:"when_missing"`
}

// MaxFileSize is the largest protocol file [Load] reads.
const MaxFileSize = 1 << 20

// Error is a problem in a protocol: where it is and what is wrong.
type Error struct {
	// File is the file name given to [Parse] or [Load], or a description
	// such as `protocol "tg218"` for a protocol not read from a file.
	File string
	// Line is the line in the file, 0 when unknown.
	Line int
	// Field is the path of the offending field, e.g. "rules[2].op"
	// (rule indices count from 0, in file order); empty for the whole file.
	Field string
	// Err is what is wrong.
	Err error
}

// Error returns "FILE:LINE: FIELD: problem".
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		b.WriteString(":" + strconv.Itoa(e.Line))
	}
	if e.Field != "" {
		b.WriteString(": " + e.Field)
	}
	b.WriteString(": " + e.Err.Error())
	return b.String()
}

// Unwrap returns the underlying problem.
func (e *Error) Unwrap() error { return e.Err }

// Load reads a protocol from a YAML or JSON file (see [Parse]).
func Load(path string) (*Protocol, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("protocol: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("protocol: %s: %w", path, err)
	}
	if len(data) > MaxFileSize {
		return nil, &Error{File: path, Err: fmt.Errorf("file larger than %d bytes: not a protocol", MaxFileSize)}
	}
	return Parse(data, path)
}

// Parse reads a protocol from YAML (or JSON, which YAML reads too); name is
// the file name used in error messages. A field the format does not know
// is an error, as is any value out of range; every error is an [*Error]
// naming the file, the line where known and the field (several problems
// come joined with [errors.Join]). The returned protocol is normalised:
// keywords are lower case and an empty level or normalisation is filled in
// with its default.
func Parse(data []byte, name string) (*Protocol, error) {
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, &Error{File: name, Err: syntaxError(err, data)}
	}
	if doc := documentContent(&root); doc != nil && doc.Kind != yaml.MappingNode {
		return nil, &Error{File: name, Line: doc.Line, Err: fmt.Errorf("%s, not a mapping of protocol fields (name, criteria, rules, ...)", nodeKind(doc))}
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	var p Protocol
	if err := dec.Decode(&p); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, &Error{File: name, Err: errors.New("empty file: no protocol")}
		}
		var te *yaml.TypeError
		if errors.As(err, &te) {
			return nil, typeErrors(name, &root, te)
		}
		return nil, &Error{File: name, Err: syntaxError(err, data)}
	}
	var extra yaml.Node
	if err := dec.Decode(&extra); !errors.Is(err, io.EOF) {
		return nil, &Error{File: name, Line: extra.Line, Err: errors.New("more than one YAML document: want one protocol per file")}
	}
	pos := nodePositions{root: &root}
	errs := p.fillDefaults(name, pos)
	if errs = append(errs, p.check(name, pos.line)...); len(errs) > 0 {
		return nil, errors.Join(errs...)
	}
	p.normalise()
	return &p, nil
}

// fillDefaults gives every key left out of the file its documented default
// (never Go's zero value) and reports the required keys left out.
func (p *Protocol) fillDefaults(file string, pos nodePositions) []error {
	var errs []error
	if !pos.has("criteria", "threshold_percent") {
		p.Criteria.ThresholdPercent = DefaultThresholdPercent
	}
	if !pos.has("coverage", "overall_percent") {
		p.Coverage.OverallPercent = DefaultOverallCoveragePercent
	}
	if !pos.has("coverage", "roi_percent") {
		p.Coverage.ROIPercent = DefaultROICoveragePercent
	}
	for i := range p.Rules {
		for _, key := range []string{"subject", "metric", "op", "limit"} {
			if !pos.has("rules", i, key) {
				errs = append(errs, &Error{File: file, Line: pos.line("rules", i), Field: fieldPath([]any{"rules", i, key}),
					Err: fmt.Errorf("missing: every rule needs subject, metric, op and limit")})
			}
		}
	}
	return errs
}

// Resolved returns a copy of the protocol with every default written out
// (search distance, normalisation-dose source, rule levels and
// when_missing), as results and reports show it: nothing in it means
// "default" by being 0.
func (p *Protocol) Resolved() *Protocol {
	q := *p
	q.KindRules = slices.Clone(p.KindRules)
	q.Isodose = slices.Clone(p.Isodose)
	q.Rules = slices.Clone(p.Rules)
	q.normalise()
	if q.Criteria.SearchMM == 0 {
		if _, dta, err := gamma.ParseCriteria(q.Criteria.Criteria); err == nil {
			q.Criteria.SearchMM = DefaultSearchDTAs * dta
		}
	}
	return &q
}

// Validate checks every field of a protocol built in code (a [Parse]d one
// has been checked already) and returns the problems found, joined; nil
// when there is none.
func (p *Protocol) Validate() error {
	if p == nil {
		return errors.New("protocol: nil protocol")
	}
	return errors.Join(p.check(fmt.Sprintf("protocol %q", p.Name), nil)...)
}

// RefuseSwappedDoses reports whether the protocol refuses a comparison
// whose files say the doses are the wrong way round (else it warns).
func (p *Protocol) RefuseSwappedDoses() bool {
	v, _ := inputCheck(p.Inputs.SwappedDoses, DefaultSwappedDoses)
	return v == InputError
}

// RefuseDoseTypeMismatch reports whether the protocol refuses doses of
// different DoseType (else it warns).
func (p *Protocol) RefuseDoseTypeMismatch() bool {
	v, _ := inputCheck(p.Inputs.DoseTypeMismatch, DefaultDoseTypeMismatch)
	return v != InputWarn
}

// GammaCriteria returns the gamma criteria of the protocol.
func (p *Protocol) GammaCriteria() (gamma.Criteria, error) {
	c, err := p.Criteria.gamma()
	if err != nil {
		return gamma.Criteria{}, fmt.Errorf("protocol %q: %w", p.Name, err)
	}
	return c, nil
}

// NormDoseFromPlan reports whether the protocol normalises to the RT
// Plan's prescription (norm_dose_from: prescription).
func (p *Protocol) NormDoseFromPlan() bool {
	return strings.EqualFold(strings.TrimSpace(p.Criteria.NormDoseFrom), NormDoseFromPrescription)
}

// ROIRules returns the protocol's kind rules in the form [roi.Classify]
// takes, in order.
func (p *Protocol) ROIRules() ([]roi.Rule, error) {
	out := make([]roi.Rule, 0, len(p.KindRules))
	for i, k := range p.KindRules {
		r, err := k.roiRule()
		if err != nil {
			return nil, fmt.Errorf("protocol %q: roi_kinds[%d]: %w", p.Name, i, err)
		}
		out = append(out, r)
	}
	return out, nil
}

func (k KindRule) roiRule() (roi.Rule, error) {
	if strings.TrimSpace(k.Pattern) == "" {
		return roi.Rule{}, errors.New("empty pattern")
	}
	kind, err := roi.ParseKind(k.Kind)
	if err != nil {
		return roi.Rule{}, fmt.Errorf("kind %q: want target, oar, body or other", k.Kind)
	}
	return roi.Rule{Pattern: strings.TrimSpace(k.Pattern), Kind: kind, Override: k.Override}, nil
}

// gamma converts and validates the criteria.
func (c Criteria) gamma() (gamma.Criteria, error) {
	dose, dta, err := gamma.ParseCriteria(c.Criteria)
	if err != nil {
		return gamma.Criteria{}, err
	}
	norm, err := parseNormalisation(c.Normalisation)
	if err != nil {
		return gamma.Criteria{}, err
	}
	g := gamma.Criteria{
		DosePercent:      dose,
		DTA:              dta,
		Normalisation:    norm,
		NormDose:         c.NormDoseGy,
		ThresholdPercent: c.ThresholdPercent,
		Search:           c.SearchMM,
	}
	if err := g.Validate(); err != nil {
		return gamma.Criteria{}, err
	}
	return g, nil
}

func parseNormalisation(s string) (gamma.Normalisation, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "", "global":
		return gamma.Global, nil
	case "local":
		return gamma.Local, nil
	}
	return gamma.Global, fmt.Errorf("normalisation %q: want global or local", s)
}

// check returns every problem of p. line, when not nil, gives the line of
// a field path in the source file (0 when unknown).
func (p *Protocol) check(file string, line func(path ...any) int) []error {
	var errs []error
	add := func(err error, path ...any) {
		e := &Error{File: file, Field: fieldPath(path), Err: err}
		if line != nil {
			e.Line = line(path...)
		}
		errs = append(errs, e)
	}
	if strings.TrimSpace(p.Name) == "" {
		add(errors.New("empty: every protocol needs a name"), "name")
	}
	c := p.Criteria
	switch {
	case strings.TrimSpace(c.Criteria) == "":
		add(errors.New("missing: want the criteria in the form DOSE%/DTAmm, e.g. 3%/2mm"), "criteria", "criteria")
	default:
		if _, _, err := gamma.ParseCriteria(c.Criteria); err != nil {
			add(err, "criteria", "criteria")
		}
	}
	if _, err := parseNormalisation(c.Normalisation); err != nil {
		add(err, "criteria", "normalisation")
	}
	if !(c.ThresholdPercent >= 0 && c.ThresholdPercent < 100) {
		add(fmt.Errorf("%g %%: want a value from 0 to below 100", c.ThresholdPercent), "criteria", "threshold_percent")
	}
	if !(c.SearchMM >= 0) || math.IsInf(c.SearchMM, 0) {
		add(fmt.Errorf("%g mm: want a positive distance, or 0 for 3×DTA", c.SearchMM), "criteria", "search_mm")
	}
	if !(c.NormDoseGy >= 0) || math.IsInf(c.NormDoseGy, 0) {
		add(fmt.Errorf("%g Gy: want a positive dose, or 0 for the reference maximum", c.NormDoseGy), "criteria", "norm_dose_gy")
	}
	switch strings.ToLower(strings.TrimSpace(c.NormDoseFrom)) {
	case "":
	case NormDoseReferenceMax:
		if c.NormDoseGy != 0 {
			add(fmt.Errorf("%q with norm_dose_gy %g: the reference maximum needs no dose; leave norm_dose_gy out", c.NormDoseFrom, c.NormDoseGy), "criteria", "norm_dose_from")
		}
	case NormDoseValue:
		if !(c.NormDoseGy > 0) {
			add(fmt.Errorf("%q needs norm_dose_gy above 0 Gy", c.NormDoseFrom), "criteria", "norm_dose_from")
		}
	case NormDoseFromPrescription:
		if c.NormDoseGy != 0 {
			add(fmt.Errorf("%q with norm_dose_gy %g: the prescription comes from the RT Plan; leave norm_dose_gy out", c.NormDoseFrom, c.NormDoseGy), "criteria", "norm_dose_from")
		}
	default:
		add(fmt.Errorf("%q: want %q, %q or %q", c.NormDoseFrom, NormDoseReferenceMax, NormDoseValue, NormDoseFromPrescription), "criteria", "norm_dose_from")
	}
	for _, f := range []struct {
		key string
		v   float64
	}{{"overall_percent", p.Coverage.OverallPercent}, {"roi_percent", p.Coverage.ROIPercent}} {
		switch {
		case !(f.v >= 0 && f.v <= 100):
			add(fmt.Errorf("%g %%: want a percentage from 0 to 100", f.v), "coverage", f.key)
		case f.v > 0 && f.v <= 1:
			add(fmt.Errorf("%g %%: looks like a fraction; write the percentage (e.g. %g for %g %%), or 0 to leave the check out", f.v, 100*f.v, 100*f.v), "coverage", f.key)
		}
	}
	for i, k := range p.KindRules {
		if strings.TrimSpace(k.Pattern) == "" {
			add(errors.New("empty pattern"), "roi_kinds", i, "pattern")
		}
		if _, err := roi.ParseKind(k.Kind); err != nil {
			add(fmt.Errorf("kind %q: want target, oar, body or other", k.Kind), "roi_kinds", i, "kind")
		}
	}
	for i, v := range p.Isodose {
		switch {
		case !(v > 0) || math.IsInf(v, 0):
			add(fmt.Errorf("%g %%: want a positive percentage of the normalisation dose", v), "isodose_rois", i)
		case slices.Index(p.Isodose, v) < i:
			add(fmt.Errorf("%g %% is listed twice", v), "isodose_rois", i)
		}
	}
	if _, err := inputCheck(p.Inputs.SwappedDoses, DefaultSwappedDoses); err != nil {
		add(err, "inputs", "swapped_doses")
	}
	if _, err := inputCheck(p.Inputs.DoseTypeMismatch, DefaultDoseTypeMismatch); err != nil {
		add(err, "inputs", "dose_type_mismatch")
	}
	if _, _, err := ParseNoiseHandling(p.Noise.Handling); err != nil {
		add(err, "evaluated_noise", "handling")
	}
	switch strings.ToLower(strings.TrimSpace(p.Noise.Judge)) {
	case "", NoiseJudgeCorrected, NoiseJudgeRaw:
	default:
		add(fmt.Errorf("judge %q: want corrected or raw", p.Noise.Judge), "evaluated_noise", "judge")
	}
	if len(p.Rules) == 0 {
		add(errors.New("no rule: a protocol checks at least one rule"), "rules")
	}
	for i, r := range p.Rules {
		for _, fe := range r.check(p.Isodose) {
			add(fe.err, "rules", i, fe.field)
		}
	}
	return errs
}

// normalise writes keywords in their canonical form and fills in defaults.
// It is called only on a checked protocol.
func (p *Protocol) normalise() {
	if n, err := parseNormalisation(p.Criteria.Normalisation); err == nil {
		p.Criteria.Normalisation = n.String()
	}
	p.Criteria.Criteria = strings.TrimSpace(p.Criteria.Criteria)
	p.Criteria.NormDoseFrom = strings.ToLower(strings.TrimSpace(p.Criteria.NormDoseFrom))
	if p.Criteria.NormDoseFrom == "" {
		p.Criteria.NormDoseFrom = NormDoseReferenceMax
		if p.Criteria.NormDoseGy > 0 {
			p.Criteria.NormDoseFrom = NormDoseValue
		}
	}
	p.Inputs.SwappedDoses, _ = inputCheck(p.Inputs.SwappedDoses, DefaultSwappedDoses)
	p.Inputs.DoseTypeMismatch, _ = inputCheck(p.Inputs.DoseTypeMismatch, DefaultDoseTypeMismatch)
	if len(p.KindRules) == 0 {
		p.KindRules = nil
	}
	if len(p.Isodose) == 0 {
		p.Isodose = nil
	}
	p.Noise.Handling = strings.ToLower(strings.TrimSpace(p.Noise.Handling))
	if p.Noise.Handling == "" {
		p.Noise.Handling = DefaultNoiseHandling
	}
	p.Noise.Judge = strings.ToLower(strings.TrimSpace(p.Noise.Judge))
	if p.Noise.Judge == "" {
		p.Noise.Judge = NoiseJudgeCorrected
	}
	for i := range p.KindRules {
		k := &p.KindRules[i]
		k.Pattern = strings.TrimSpace(k.Pattern)
		k.Kind = strings.ToLower(strings.TrimSpace(k.Kind))
	}
	for i := range p.Rules {
		r := &p.Rules[i]
		r.Level = r.level()
		if s, err := parseSubject(r.Subject); err == nil {
			r.Subject = s.String()
		}
		if m, err := parseMetric(r.Metric); err == nil {
			r.Metric = m.String()
		}
		if o, err := parseOp(r.Op); err == nil {
			r.Op = string(o)
		}
		r.WhenMissing = r.whenMissing()
	}
}
