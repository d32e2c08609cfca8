package gamma

import (
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"
)

// Normalisation says how the dose-difference criterion ΔD is obtained from
// the percentage δ.
type Normalisation int

const (
	// Global: ΔD = δ·D_norm for every point (D_norm: the reference maximum,
	// or a dose the caller gives such as the prescription).
	Global Normalisation = iota
	// Local: ΔD = δ·D_ref at each reference point.
	Local
)

// String returns "global" or "local".
func (n Normalisation) String() string {
	if n == Local {
		return "local"
	}
	return "global"
}

// Criteria are the gamma criteria of one comparison.
type Criteria struct {
	// DosePercent is the dose-difference criterion δ in percent (3 for 3 %).
	DosePercent float64
	// DTA is the distance-to-agreement criterion Δd in mm.
	DTA float64
	// Normalisation selects global or local ΔD.
	Normalisation Normalisation
	// NormDose is D_norm in Gy: the dose the global criterion and the
	// low-dose threshold are percentages of. 0 means the maximum reference
	// dose.
	NormDose float64
	// ThresholdPercent is the low-dose threshold in percent of D_norm:
	// reference points below it are not evaluated.
	ThresholdPercent float64
	// Search is the maximum search distance in mm. 0 means 3·DTA.
	Search float64
}

// TG218 returns the criteria AAPM TG-218 recommends for patient-specific
// IMRT/VMAT QA (Miften et al., Med Phys 45 (2018) e53): 3 %/2 mm, global
// normalisation to the maximum dose, 10 % low-dose threshold; with the
// search distance at 3·DTA (common practice, no source).
func TG218() Criteria {
	return Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
}

// SearchRadius returns the search distance in mm: Search, or 3·DTA when
// Search is 0.
func (c Criteria) SearchRadius() float64 {
	if c.Search > 0 {
		return c.Search
	}
	return 3 * c.DTA
}

// Label returns the criteria in the trade's notation, e.g. "3%/2mm global".
func (c Criteria) Label() string {
	return fmt.Sprintf("%s%%/%smm %s", trim(c.DosePercent), trim(c.DTA), c.Normalisation)
}

func trim(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// CriteriaError is the error of Validate: which criterion is out of
// range, its value, and what is wanted.
type CriteriaError struct {
	// Field names the criterion: "dose", "dta", "threshold", "norm-dose",
	// "search" or "normalisation" (the command-line option's name where
	// there is one).
	Field string
	// Value is the value refused.
	Value float64
	// Want says what is wanted.
	Want string
	// Zero, when set, says what 0 means for this criterion (the default).
	Zero string
}

// Error names the criterion, its value and what is wanted.
func (e *CriteriaError) Error() string {
	names := map[string]string{"dose": "dose criterion", "dta": "DTA", "threshold": "threshold", "norm-dose": "normalisation dose",
		"search": "search distance", "normalisation": "normalisation"}
	msg := fmt.Sprintf("%s %g: %s", names[e.Field], e.Value, e.Want)
	if e.Zero != "" {
		msg += " (or 0 for " + e.Zero + ")"
	}
	return msg
}

// Validate reports the first criterion that is out of range, as a
// *CriteriaError.
func (c Criteria) Validate() error {
	bad := func(field string, v float64, want string) error {
		return &CriteriaError{Field: field, Value: v, Want: want}
	}
	switch {
	case !(c.DosePercent > 0) || math.IsInf(c.DosePercent, 0):
		return bad("dose", c.DosePercent, "want a positive percentage")
	case !(c.DTA > 0) || math.IsInf(c.DTA, 0):
		return bad("dta", c.DTA, "want a positive distance in mm")
	case !(c.ThresholdPercent >= 0 && c.ThresholdPercent < 100):
		return bad("threshold", c.ThresholdPercent, "want a percentage from 0 to below 100")
	case c.NormDose < 0 || math.IsNaN(c.NormDose) || math.IsInf(c.NormDose, 0):
		return &CriteriaError{Field: "norm-dose", Value: c.NormDose, Want: "want a positive dose in Gy", Zero: "the reference maximum"}
	case c.Search < 0 || math.IsNaN(c.Search) || math.IsInf(c.Search, 0):
		return &CriteriaError{Field: "search", Value: c.Search, Want: "want a positive distance in mm", Zero: "3×DTA"}
	case c.Search > 0 && c.Search <= c.DTA:
		// Any point with Γ ≤ 1 has its minimum within Δd of the reference
		// point, and a point with none within the search distance is
		// reported as Γ = search/Δd and failed: a search no longer than Δd
		// would fail points that pass, with a Γ of at most 1.
		return bad("search", c.Search, fmt.Sprintf("not longer than the DTA %g mm: points that pass could be missed and reported failing", c.DTA))
	case c.Normalisation != Global && c.Normalisation != Local:
		return bad("normalisation", float64(c.Normalisation), "want global or local")
	}
	return nil
}

var criteriaPattern = regexp.MustCompile(`^([0-9]*\.?[0-9]+)\s*%\s*/\s*([0-9]*\.?[0-9]+)\s*mm$`)

// ParseCriteria reads the trade's notation for gamma criteria, "3%/2mm"
// (also "3%/2 mm", "2 % / 1 mm", "2.5%/1.5mm"), and returns the dose
// criterion in percent and the DTA in mm. Both must be positive.
func ParseCriteria(s string) (dosePercent, dtaMM float64, err error) {
	m := criteriaPattern.FindStringSubmatch(strings.ToLower(strings.TrimSpace(s)))
	if m == nil {
		return 0, 0, fmt.Errorf("criteria %q: want the form DOSE%%/DTAmm, e.g. 3%%/2mm", s)
	}
	var err1, err2 error
	dosePercent, err1 = strconv.ParseFloat(m[1], 64)
	dtaMM, err2 = strconv.ParseFloat(m[2], 64)
	if err1 != nil || err2 != nil || math.IsInf(dosePercent, 0) || math.IsInf(dtaMM, 0) {
		return 0, 0, fmt.Errorf("criteria %q: a number is out of range", s)
	}
	if dosePercent <= 0 {
		return 0, 0, fmt.Errorf("criteria %q: dose criterion must be above 0 %%", s)
	}
	if dtaMM <= 0 {
		return 0, 0, fmt.Errorf("criteria %q: DTA must be above 0 mm", s)
	}
	return dosePercent, dtaMM, nil
}
