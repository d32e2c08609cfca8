package dicomio

import (
	"fmt"
	"strings"
)

// Maps of disagreement (gamma, dose difference) written as RT Dose.
//
// PS3.3 C.8.8.3 defines DoseType (3004,0004) ERROR as a dose difference (the
// difference between a desired and a planned dose): such a file holds no
// dose a plan delivers, and comparing it as one is meaningless. voxgamma
// writes its gamma and difference maps with DoseType ERROR, so any reader
// (this one included) can tell them from doses.

// MapSummationType is the DoseSummationType (3004,000A) of a map whose
// reference dose names no RT Plan (or a summation whose references voxgamma
// does not carry: MULTI_PLAN, BRACHY, CONTROL_POINT, ...). DoseSummationType
// has Defined Terms, which an implementation may extend (unlike Enumerated
// Values; the conventions of PS3.3, from memory): every standard term requires references the map cannot
// honestly give (PLAN ... CONTROL_POINT a ReferencedRTPlanSequence, RECORD a
// ReferencedTreatmentRecordSequence, PLAN_OVERVIEW plan overview
// parameters), and a reference to a plan that does not exist would be worse
// than a term a validator does not know. dciodvfy reports it as an
// unrecognised defined term (a warning), not an error.
const MapSummationType = "DOSE_COMPARISON"

// MapSummation returns the DoseSummationType and plan references of a map
// made on the grid of ref: the reference's own summation and references
// when they name an RT Plan and this package writes what that summation
// requires (PLAN; FRACTION and FRACTION_SESSION with a fraction group; BEAM
// and BEAM_SESSION with a fraction group and a beam), else
// MapSummationType without a plan reference.
func MapSummation(ref *DoseInfo) (summation string, fractionGroup, beam int) {
	if ref == nil || ref.ReferencedRTPlanUID == "" {
		return MapSummationType, 0, 0
	}
	fg, b := ref.ReferencedFractionGroupNumber, ref.ReferencedBeamNumber
	switch s := ref.DoseSummationType; s {
	case "PLAN":
		return s, 0, 0
	case "FRACTION", "FRACTION_SESSION":
		if fg > 0 {
			return s, fg, 0
		}
	case "BEAM", "BEAM_SESSION":
		if fg > 0 && b > 0 {
			return s, fg, b
		}
	}
	return MapSummationType, 0, 0
}

// The conditions of PS3.3 C.8.8.3 (Table C.8-39) on the references a
// DoseSummationType needs, as dicom3tools' dciodvfy checks them: a
// ReferencedRTPlanSequence (300C,0002) is required for the summations
// below and not present otherwise; a ReferencedFractionGroupSequence
// (300C,0020) for the per-fraction-group ones; a ReferencedBeamSequence
// (300C,0004) for the per-beam ones. The others (MULTI_PLAN: two or more
// plans; BRACHY: application setups; CONTROL_POINT: control points; RECORD:
// a treatment record) need references this package does not write.
var (
	needsPlan = map[string]bool{"PLAN": true, "MULTI_PLAN": true, "FRACTION": true, "BEAM": true, "BRACHY": true,
		"FRACTION_SESSION": true, "BEAM_SESSION": true, "BRACHY_SESSION": true, "CONTROL_POINT": true}
	needsFractionGroup = map[string]bool{"FRACTION": true, "BEAM": true, "BRACHY": true,
		"FRACTION_SESSION": true, "BEAM_SESSION": true, "BRACHY_SESSION": true, "CONTROL_POINT": true}
	needsBeam            = map[string]bool{"BEAM": true, "BEAM_SESSION": true, "CONTROL_POINT": true}
	summationNotWritable = map[string]string{
		"MULTI_PLAN":     "two or more RT Plans",
		"BRACHY":         "brachy application setups",
		"BRACHY_SESSION": "brachy application setups",
		"CONTROL_POINT":  "control points",
		"RECORD":         "an RT treatment record",
		"PLAN_OVERVIEW":  "plan overview parameters",
	}
)

// checkSummation checks that the references a DoseSummationType requires
// can be written from the identifiers and options given.
func checkSummation(sum string, ids Identifiers, opt *WriteOptions) error {
	if what, ok := summationNotWritable[sum]; ok {
		return fmt.Errorf("DoseSummationType %s requires references to %s, which this writer does not write", sum, what)
	}
	if needsPlan[sum] && ids.ReferencedRTPlanUID == "" {
		return fmt.Errorf("DoseSummationType %s requires %s (PS3.3 C.8.8.3, type 1C) but the identifiers name no RT Plan", sum, tagString(tagReferencedRTPlanSequence))
	}
	if needsFractionGroup[sum] && opt.ReferencedFractionGroupNumber <= 0 {
		return fmt.Errorf("DoseSummationType %s requires a referenced fraction group (ReferencedFractionGroupNumber)", sum)
	}
	if needsBeam[sum] && opt.ReferencedBeamNumber <= 0 {
		return fmt.Errorf("DoseSummationType %s requires a referenced beam (ReferencedBeamNumber)", sum)
	}
	return nil
}

// DisagreementMap returns why the dose file d is a map of disagreement
// between doses (a gamma or dose difference map) rather than a dose, or ""
// when it is a dose. Such a file is never taken as a plan dose: a folder
// scan sets it aside, and a comparison refuses it as either dose.
func (d *DoseInfo) DisagreementMap() string {
	if d == nil || d.DoseType != "ERROR" {
		return ""
	}
	why := tagString(tagDoseType) + " is ERROR: a map of differences between doses, not a dose"
	if d.WrittenByVoxgamma() {
		what := "map"
		desc := strings.ToLower(d.DoseComment + " " + d.SeriesDescription)
		switch {
		case strings.Contains(desc, "gamma"):
			what = "gamma map"
		case strings.Contains(desc, "difference"):
			what = "dose difference map"
		}
		why += fmt.Sprintf(" (a %s voxgamma wrote: %q)", what, firstNonEmpty(d.DoseComment, d.SeriesDescription))
	}
	return why
}

// WrittenByVoxgamma reports whether the file names voxgamma as its
// Manufacturer (0008,0070), as every file this package writes does.
func (d *DoseInfo) WrittenByVoxgamma() bool {
	return strings.EqualFold(strings.TrimSpace(d.Manufacturer), writerManufacturer)
}

// writerManufacturer is the Manufacturer and model this package writes.
const writerManufacturer = "voxgamma"

func firstNonEmpty(s ...string) string {
	for _, x := range s {
		if strings.TrimSpace(x) != "" {
			return x
		}
	}
	return ""
}
