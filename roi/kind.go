package roi

import (
	"fmt"
	"strings"

	"voxgamma/structure"
)

// Kind is the clinical role of an ROI in a per-structure report.
type Kind int

// ROI kinds. The zero value is Other.
const (
	// Other is anything that is neither a target, an organ at risk nor the
	// body outline (CAVITY, BOLUS, SUPPORT, MARKER, isodose ROIs, ...).
	Other Kind = iota
	// Target is a planning, clinical or gross tumour volume (PTV, CTV, GTV).
	Target
	// OAR is an organ at risk (ORGAN, AVOIDANCE).
	OAR
	// Body is the external outline of the patient (EXTERNAL).
	Body
)

// String returns "target", "oar", "body" or "other".
func (k Kind) String() string {
	switch k {
	case Target:
		return "target"
	case OAR:
		return "oar"
	case Body:
		return "body"
	case Other:
		return "other"
	}
	return fmt.Sprintf("Kind(%d)", int(k))
}

// ParseKind parses the string form of a Kind ("target", "oar", "body",
// "other"; case-insensitive, surrounding spaces ignored).
func ParseKind(s string) (Kind, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "target":
		return Target, nil
	case "oar":
		return OAR, nil
	case "body":
		return Body, nil
	case "other":
		return Other, nil
	}
	return Other, fmt.Errorf("roi: unknown ROI kind %q (want target, oar, body or other)", s)
}

// KindOfType maps an RTROIInterpretedType (DICOM PS3.3, RT ROI Observations
// Module) to a Kind: PTV, CTV, GTV → Target; ORGAN, AVOIDANCE → OAR;
// EXTERNAL → Body; anything else, including the empty string, → Other.
// Case and surrounding spaces are ignored.
func KindOfType(interpretedType string) Kind {
	switch strings.ToUpper(strings.TrimSpace(interpretedType)) {
	case "PTV", "CTV", "GTV":
		return Target
	case "ORGAN", "AVOIDANCE":
		return OAR
	case "EXTERNAL":
		return Body
	}
	return Other
}

// Rule assigns a Kind to ROIs by name.
type Rule struct {
	// Pattern is matched against the ROI name, case-insensitively, with
	// surrounding spaces of both ignored. A pattern containing '*' (any run
	// of characters, also none) or '?' (exactly one character) is a glob that
	// must match the whole name; any other pattern is a prefix ("PTV" matches
	// "PTV", "PTV_60" and "ptvboost").
	Pattern string
	// Kind is the kind given to matching ROIs.
	Kind Kind
	// Override makes the rule apply even when the ROI has an
	// RTROIInterpretedType; without it the rule applies only to ROIs whose
	// type is empty.
	Override bool
}

// ParseRule parses a rule written "PATTERN=KIND", or "PATTERN=KIND!" for a
// rule that overrides the interpreted type, e.g. "PTV*=target" or
// "Bowel*=oar!". The pattern is everything before the last '='.
func ParseRule(s string) (Rule, error) {
	eq := strings.LastIndexByte(s, '=')
	if eq < 0 {
		return Rule{}, fmt.Errorf("roi: rule %q: want PATTERN=KIND or PATTERN=KIND!", s)
	}
	pat, ks := strings.TrimSpace(s[:eq]), strings.TrimSpace(s[eq+1:])
	r := Rule{Pattern: pat}
	if strings.HasSuffix(ks, "!") {
		r.Override = true
		ks = strings.TrimSpace(strings.TrimSuffix(ks, "!"))
	}
	k, err := ParseKind(ks)
	if err != nil {
		return Rule{}, fmt.Errorf("roi: rule %q: %w", s, err)
	}
	r.Kind = k
	if pat == "" {
		return Rule{}, fmt.Errorf("roi: rule %q: empty pattern", s)
	}
	return r, nil
}

// String returns the rule in the form ParseRule reads.
func (r Rule) String() string {
	s := r.Pattern + "=" + r.Kind.String()
	if r.Override {
		s += "!"
	}
	return s
}

// Matches reports whether the rule's pattern matches an ROI name (see
// [Rule.Pattern]). An empty pattern matches nothing.
func (r Rule) Matches(name string) bool {
	p := []rune(strings.ToLower(strings.TrimSpace(r.Pattern)))
	n := []rune(strings.ToLower(strings.TrimSpace(name)))
	if len(p) == 0 {
		return false
	}
	if !strings.ContainsAny(r.Pattern, "*?") {
		return len(n) >= len(p) && string(n[:len(p)]) == string(p)
	}
	return glob(p, n)
}

// glob matches pattern p ('*', '?', literal runes) against the whole of n,
// iteratively with single-star backtracking (linear in practice, never
// exponential).
func glob(p, n []rune) bool {
	pi, ni := 0, 0
	star, mark := -1, 0
	for ni < len(n) {
		switch {
		case pi < len(p) && (p[pi] == '?' || p[pi] == n[ni]):
			pi++
			ni++
		case pi < len(p) && p[pi] == '*':
			star, mark = pi, ni
			pi++
		case star >= 0:
			pi = star + 1
			mark++
			ni = mark
		default:
			return false
		}
	}
	for pi < len(p) && p[pi] == '*' {
		pi++
	}
	return pi == len(p)
}

// Classify returns the Kind of an ROI: the first rule (in order) that
// matches its name and applies (its type is empty, or the rule overrides),
// else the kind of its RTROIInterpretedType (see [KindOfType]).
func Classify(r *structure.ROI, rules []Rule) Kind {
	k, _ := ClassifyBy(r, rules)
	return k
}

// ClassifyBy is [Classify] that also says which rule decided: its index in
// rules, or -1 when the kind comes from the RTROIInterpretedType.
func ClassifyBy(r *structure.ROI, rules []Rule) (Kind, int) {
	typed := strings.TrimSpace(r.InterpretedType) != ""
	for i, ru := range rules {
		if (!typed || ru.Override) && ru.Matches(r.Name) {
			return ru.Kind, i
		}
	}
	return KindOfType(r.InterpretedType), -1
}
