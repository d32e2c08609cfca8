package dicomio

import (
	"fmt"
	"strings"
	"unicode"
)

// Where a dose comes from, as its file says it: the planning system's dose
// (the reference of a secondary check) or an independent dose (a
// recalculation, a Monte Carlo dose, a dose reconstructed from portal
// images, a measurement: the evaluated dose). DICOM has no attribute for
// this; the words of Manufacturer (0008,0070), ManufacturerModelName
// (0008,1090), SeriesDescription (0008,103E) and DoseComment (3004,0006)
// are what there is. The word lists are this project's choice (common
// practice in naming such series, no source); a file whose words point
// both ways, or nowhere, says nothing.

// Origin is what a dose file's words say about where it comes from.
type Origin struct {
	// Planning lists the evidence that the dose is the planning system's,
	// Independent the evidence that it is an independent dose, each as
	// `SeriesDescription "demo planning dose" ("planning")`.
	Planning, Independent []string
}

// OriginKind is the side an Origin points to.
type OriginKind int

// The kinds of origin.
const (
	// OriginUnknown: no evidence, or evidence both ways.
	OriginUnknown OriginKind = iota
	// OriginPlanning: the planning system's dose.
	OriginPlanning
	// OriginIndependent: a recalculation, reconstruction or measurement.
	OriginIndependent
)

// Kind returns the side the evidence points to: Planning or Independent
// when all of it points one way, OriginUnknown otherwise.
func (o Origin) Kind() OriginKind {
	switch {
	case len(o.Planning) > 0 && len(o.Independent) == 0:
		return OriginPlanning
	case len(o.Independent) > 0 && len(o.Planning) == 0:
		return OriginIndependent
	}
	return OriginUnknown
}

// planningWords and independentWords are matched against the words of the
// file's text attributes (letters and digits; case ignored). An entry with
// a space matches consecutive words; an entry ending in "*" matches words
// starting with it.
var (
	planningWords    = []string{"planning", "tps", "planned"}
	independentWords = []string{"recalc*", "re calc*", "recomput*", "re comput*", "monte carlo", "mc", "independent",
		"secondary", "second check", "epid", "portal", "transit", "in vivo", "invivo", "reconstructed", "reconstruction",
		"measured", "measurement"}
)

// DoseOrigin reads what the dose file d says about where it comes from.
func DoseOrigin(d *DoseInfo) Origin {
	var o Origin
	if d == nil {
		return o
	}
	for _, f := range []struct {
		tag  string
		text string
	}{
		{"Manufacturer", d.Manufacturer}, {"ManufacturerModelName", d.ManufacturerModelName},
		{"SeriesDescription", d.SeriesDescription}, {"DoseComment", d.DoseComment},
	} {
		words := splitWords(f.text)
		if w := matchWords(words, planningWords); w != "" {
			o.Planning = append(o.Planning, fmt.Sprintf("%s %q (%q)", f.tag, f.text, w))
		}
		if w := matchWords(words, independentWords); w != "" {
			o.Independent = append(o.Independent, fmt.Sprintf("%s %q (%q)", f.tag, f.text, w))
		}
	}
	return o
}

// splitWords returns the lower-case words (runs of letters and digits) of s.
func splitWords(s string) []string {
	return strings.FieldsFunc(strings.ToLower(s), func(r rune) bool { return !unicode.IsLetter(r) && !unicode.IsDigit(r) })
}

// matchWords returns the first entry of list found in words, or "".
func matchWords(words, list []string) string {
	for _, entry := range list {
		pat := strings.Fields(entry)
		for i := 0; i+len(pat) <= len(words); i++ {
			ok := true
			for j, p := range pat {
				w := words[i+j]
				if strings.HasSuffix(p, "*") {
					ok = ok && strings.HasPrefix(w, strings.TrimSuffix(p, "*"))
				} else {
					ok = ok && w == p
				}
			}
			if ok {
				return strings.TrimSuffix(entry, "*")
			}
		}
	}
	return ""
}

// SwapEvidence returns, when the files say that the reference ref and the
// evaluated dose eval are the wrong way round, the evidence in words; ""
// otherwise. It is said only when both files speak: the reference's words
// point to an independent dose and none to the planning system, and the
// evaluated dose's words point to the planning system and none to an
// independent dose, or the evaluated dose references an RT Plan
// (ReferencedRTPlanSequence) that the reference, which names none, does
// not. One file's words alone are not enough (a clinic may choose a Monte
// Carlo dose as its reference on purpose, or name its series freely), and
// neither is a plan reference alone: a false alarm on every comparison
// teaches users to ignore the warning.
func SwapEvidence(ref, eval *DoseInfo) string {
	ro, eo := DoseOrigin(ref), DoseOrigin(eval)
	if ro.Kind() != OriginIndependent || len(eo.Independent) > 0 {
		return ""
	}
	evalSays := eo.Planning
	if len(evalSays) == 0 {
		if eval.ReferencedRTPlanUID == "" || ref.ReferencedRTPlanUID != "" {
			return ""
		}
		evalSays = []string{fmt.Sprintf("%s names RT Plan %s, which the reference does not reference", tagString(tagReferencedRTPlanSequence), eval.ReferencedRTPlanUID)}
	}
	return fmt.Sprintf("the reference (%s) reads as an independent dose: %s; the evaluated dose (%s) reads as the planning system's: %s",
		fileLabel(ref, "reference"), strings.Join(ro.Independent, ", "), fileLabel(eval, "evaluated"), strings.Join(evalSays, ", "))
}
