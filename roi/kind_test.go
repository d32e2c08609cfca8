package roi

import (
	"testing"

	"voxgamma/structure"
)

// RTROIInterpretedType values from DICOM PS3.3 (RT ROI Observations Module).
func TestKindOfType(t *testing.T) {
	for typ, want := range map[string]Kind{
		"PTV": Target, "CTV": Target, "GTV": Target, " ptv ": Target,
		"ORGAN": OAR, "AVOIDANCE": OAR, "EXTERNAL": Body,
		"CAVITY": Other, "BOLUS": Other, "SUPPORT": Other, "MARKER": Other, "ISOCENTER": Other, "": Other,
	} {
		if got := KindOfType(typ); got != want {
			t.Errorf("KindOfType(%q) = %v, want %v", typ, got, want)
		}
	}
}

func TestKindStrings(t *testing.T) {
	for _, k := range []Kind{Target, OAR, Body, Other} {
		got, err := ParseKind(k.String())
		if err != nil || got != k {
			t.Errorf("ParseKind(%q) = %v, %v", k.String(), got, err)
		}
	}
	if Target.String() != "target" || OAR.String() != "oar" || Body.String() != "body" || Other.String() != "other" {
		t.Error("wrong string forms")
	}
	if _, err := ParseKind("organ"); err == nil {
		t.Error(`ParseKind("organ") accepted`)
	}
	if got, _ := ParseKind(" TARGET "); got != Target {
		t.Error("ParseKind is not case-insensitive")
	}
}

func TestRules(t *testing.T) {
	rules := []Rule{}
	for _, s := range []string{"PTV*=target", "gtv=target", "*_PRV=oar!", "Bowel ?ag=oar", "Ring*=other!"} {
		r, err := ParseRule(s)
		if err != nil {
			t.Fatal(err)
		}
		if r.String() != s {
			t.Errorf("ParseRule(%q).String() = %q", s, r.String())
		}
		rules = append(rules, r)
	}
	cases := []struct {
		name, typ string
		want      Kind
	}{
		{"PTV_60", "", Target},
		{"ptv boost", "", Target},
		{"xPTV", "", Other},            // glob matches the whole name
		{"GTVp", "", Target},           // prefix
		{"Cord_PRV", "", OAR},          // glob
		{"Cord_PRV", "PTV", OAR},       // override
		{"PTV_60", "ORGAN", OAR},       // typed, rule does not override
		{"Bowel Bag", "", OAR},         // '?' is one character
		{"Bowel Baag", "", Other},      // ... exactly one
		{"Ring PTV", "CTV", Other},     // override to other
		{"Lung_L", "ORGAN", OAR},       // type only
		{"Lung_L", "", Other},          // nothing applies
		{"  ptv_50 ", "", Target},      // spaces ignored
		{"BODY", "EXTERNAL", Body},     // type only
		{"Cord_PRV_x", "", Other},      // glob anchored at the end
		{"cord_prv", "AVOIDANCE", OAR}, // case-insensitive override
	}
	for _, c := range cases {
		if got := Classify(&structure.ROI{Name: c.name, InterpretedType: c.typ}, rules); got != c.want {
			t.Errorf("Classify(%q, type %q) = %v, want %v", c.name, c.typ, got, c.want)
		}
	}
	for _, bad := range []string{"PTV", "=target", "PTV*=tumour", "PTV*=!"} {
		if _, err := ParseRule(bad); err == nil {
			t.Errorf("ParseRule(%q) accepted", bad)
		}
	}
	if (Rule{Pattern: "", Kind: Target}).Matches("anything") {
		t.Error("an empty pattern matches")
	}
	if !(Rule{Pattern: "*a*b*c"}).Matches("xxaxxbxxbxc") || (Rule{Pattern: "*a*b*c"}).Matches("xxaxxbxxbx") {
		t.Error("glob backtracking")
	}
}
