package protocol

import (
	"slices"
	"strings"
)

// presets builds each built-in protocol afresh, so that a caller may change
// the one it gets.
var presets = map[string]func() *Protocol{
	"tg218":               tg218,
	"stereotactic":        stereotactic,
	"epid-invivo-example": epidInVivoExample,
}

// Preset returns a built-in protocol by name (case-insensitive), and
// whether there is one of that name. Each call returns a new copy.
func Preset(name string) (*Protocol, bool) {
	f, ok := presets[strings.ToLower(strings.TrimSpace(name))]
	if !ok {
		return nil, false
	}
	p := f()
	p.normalise()
	return p, true
}

// PresetNames returns the names of the built-in protocols, sorted.
func PresetNames() []string {
	names := make([]string, 0, len(presets))
	for n := range presets {
		names = append(names, n)
	}
	slices.Sort(names)
	return names
}

// targetNames classifies ROIs without an RTROIInterpretedType whose names
// start with the usual target prefixes. They never override a type that is
// set.
func targetNames() []KindRule {
	return []KindRule{
		{Pattern: "PTV", Kind: "target"},
		{Pattern: "CTV", Kind: "target"},
		{Pattern: "GTV", Kind: "target"},
	}
}

func tg218() *Protocol {
	return &Protocol{
		Name:        "tg218",
		Description: "Patient-specific IMRT/VMAT QA with the AAPM TG-218 universal tolerance and action limits on the overall pass rate; each target is held to the tolerance limit as well.",
		Source: "AAPM TG-218, Miften et al., Med Phys 45 (2018) e53: 3%/2mm, global normalisation, " +
			"10 % low-dose threshold, universal tolerance limit ≥ 95 % and universal action limit ≥ 90 % " +
			"of points passing. Applying the universal tolerance limit to each target ROI is this tool's " +
			"choice, not a TG-218 recommendation. The search distance of 3×DTA and the name prefixes " +
			"PTV, CTV, GTV for ROIs without an interpreted type are common practice.",
		Criteria:  Criteria{Criteria: "3%/2mm", Normalisation: "global", ThresholdPercent: 10},
		KindRules: targetNames(),
		Coverage:  DefaultCoverage(),
		Rules: []Rule{
			{Level: "tolerance", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
			{Level: "action", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 90},
			{Level: "tolerance", Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95},
		},
	}
}

func stereotactic() *Protocol {
	return &Protocol{
		Name:        "stereotactic",
		Description: "Stricter checks for stereotactic treatments: 2%/1mm, every target and the whole distribution at ≥ 95 %, D95 of each target within 3 %, each organ at risk at ≥ 90 %.",
		Source: "Common practice in stereotactic QA; there is no single published source for these " +
			"numbers. Check them against your own commissioning before use.",
		Criteria:  Criteria{Criteria: "2%/1mm", Normalisation: "global", ThresholdPercent: 10},
		KindRules: targetNames(),
		Coverage:  DefaultCoverage(),
		Rules: []Rule{
			{Level: "tolerance", Subject: "overall", Metric: "pass_rate", Op: ">=", Limit: 95},
			{Level: "tolerance", Subject: "targets", Metric: "pass_rate", Op: ">=", Limit: 95},
			{Level: "tolerance", Subject: "targets", Metric: "dvh_diff_percent:d95", Op: "abs<=", Limit: 3},
			{Level: "tolerance", Subject: "oars", Metric: "pass_rate", Op: ">=", Limit: 90},
		},
	}
}

func epidInVivoExample() *Protocol {
	return &Protocol{
		Name:        "epid-invivo-example",
		Description: "Example for in-vivo EPID dosimetry: mean Γ ≤ 0.5 and near-maximum Γ (99th percentile) ≤ 2 inside the 50 % isodose, at 3%/3mm.",
		Source: "Example alert levels of the kind used in in-vivo EPID dosimetry; not taken from a " +
			"specific paper — set your own. The criteria (3%/3mm global, 10 % threshold) are an " +
			"example too.",
		Criteria:  Criteria{Criteria: "3%/3mm", Normalisation: "global", ThresholdPercent: 10},
		KindRules: targetNames(),
		Coverage:  DefaultCoverage(),
		Isodose:   []float64{50},
		Rules: []Rule{
			{Level: "alert", Subject: "isodose:50", Metric: "gamma_mean", Op: "<=", Limit: 0.5},
			{Level: "alert", Subject: "isodose:50", Metric: "gamma_p99", Op: "<=", Limit: 2},
		},
	}
}
