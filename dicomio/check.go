package dicomio

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"voxgamma/structure"
	"voxgamma/volume"
)

// Findings are the results of [CheckConsistency]: errors forbid the
// comparison, warnings must be shown to the user.
type Findings struct {
	Errors   []string
	Warnings []string
}

// Err returns the errors joined into one error, or nil when there are none.
func (f *Findings) Err() error {
	if len(f.Errors) == 0 {
		return nil
	}
	return errors.New(strings.Join(f.Errors, "; "))
}

func (f *Findings) errorf(format string, args ...any) {
	f.Errors = append(f.Errors, fmt.Sprintf(format, args...))
}

func (f *Findings) warnf(format string, args ...any) {
	f.Warnings = append(f.Warnings, fmt.Sprintf(format, args...))
}

// HighDoseFraction defines the reference high-dose region that
// [CheckConsistency] wants the evaluated grid to cover: the reference
// voxels with at least this fraction of the reference maximum.
const HighDoseFraction = 0.5

// partialSummation lists the DoseSummationTypes of doses that are a part of
// a plan's dose (one beam, one fraction, ...).
var partialSummation = map[string]bool{"BEAM": true, "FRACTION": true, "CONTROL_POINT": true,
	"BEAM_SESSION": true, "FRACTION_SESSION": true, "BRACHY_SESSION": true}

// CheckConsistency checks that a reference and an evaluated dose (and the
// structure set, when not nil) can be compared:
//
//   - frames of reference differ: an error, or a warning when
//     allowDifferentFrames (the user vouches the coordinates agree);
//   - dose units differ (GY against RELATIVE): an error; both RELATIVE: a
//     warning (their normalisations must agree);
//   - a DoseType missing: a warning (different types: see
//     [DoseTypeMismatch], which the caller applies by its policy);
//   - the doses reference different RT Plans: a warning;
//   - summation types differ: a warning (a beam, fraction-group or session dose compared
//     with a plan dose is a classic mistake); the same partial type of
//     different beams or fraction groups: a warning;
//   - patient IDs differ: a warning;
//   - the evaluated grid does not cover the reference high-dose region (at
//     least [HighDoseFraction] of the reference maximum): a warning saying
//     how much lies outside, an error when none of it is covered.
func CheckConsistency(ref *DoseInfo, refGrid *volume.Grid, eval *DoseInfo, evalGrid *volume.Grid, set *structure.Set, allowDifferentFrames bool) *Findings {
	f := &Findings{}
	rn, en := fileLabel(ref, "reference"), fileLabel(eval, "evaluated")

	frameCheck := func(what, a, b string) {
		switch {
		case a == "" || b == "":
			f.warnf("%s: a frame of reference UID is missing (%s, %s): cannot check that they share coordinates", what, orNone(a), orNone(b))
		case a != b && allowDifferentFrames:
			f.warnf("%s are in different frames of reference (%s, %s); compared as if their coordinates agreed, as asked", what, a, b)
		case a != b:
			f.errorf("%s are in different frames of reference (%s, %s): their coordinates need not agree; register them first, or allow different frames if you know they agree", what, a, b)
		}
	}
	frameCheck(fmt.Sprintf("the reference (%s) and evaluated (%s) doses", rn, en), ref.FrameOfReferenceUID, eval.FrameOfReferenceUID)
	if set != nil {
		sn := fmt.Sprintf("%q", set.Label)
		if set.Path != "" {
			sn = fmt.Sprintf("%q (%s)", set.Label, filepath.Base(set.Path))
		}
		frameCheck(fmt.Sprintf("the reference dose (%s) and the structure set %s", rn, sn), ref.FrameOfReferenceUID, set.FrameOfReferenceUID)
		for _, r := range set.ROIs {
			if r.FrameOfReferenceUID != "" && set.FrameOfReferenceUID != "" && r.FrameOfReferenceUID != set.FrameOfReferenceUID {
				frameCheck(fmt.Sprintf("the reference dose (%s) and %s", rn, roiLabel(r.Number, r.Name)), ref.FrameOfReferenceUID, r.FrameOfReferenceUID)
			}
		}
	}
	if ref.DoseUnits != eval.DoseUnits {
		f.errorf("dose units differ: reference (%s) %s, evaluated (%s) %s: an absolute and a relative dose cannot be compared", rn, orNone(ref.DoseUnits), en, orNone(eval.DoseUnits))
	} else if ref.Relative() {
		f.warnf("both doses are RELATIVE (%s): the dose differences mean something only if both are normalised the same way; check that they are", tagString(tagDoseUnits))
	}
	if ref.DoseType == "" || eval.DoseType == "" {
		f.warnf("%s missing (reference %s, evaluated %s): cannot check that both are physical doses", tagString(tagDoseType), orNone(ref.DoseType), orNone(eval.DoseType))
	}
	if a, b := ref.ReferencedRTPlanUID, eval.ReferencedRTPlanUID; a != "" && b != "" && a != b {
		f.warnf("the doses reference different RT Plans (%s: reference %s, evaluated %s): a recalculation of the same plan may carry a copy's UID, but check that both doses are of this plan",
			tagString(tagReferencedRTPlanSequence), a, b)
	}
	rs, es := ref.DoseSummationType, eval.DoseSummationType
	refSum, evalSum := len(ref.SummedFrom) > 1, len(eval.SummedFrom) > 1
	switch {
	case (refSum || evalSum) && rs == es && summableTypes[rs] == "beam" && FormatNumbers(ref.ReferencedBeamNumbers) != FormatNumbers(eval.ReferencedBeamNumbers):
		f.errorf("the doses hold different beams: reference (%s) beams %s, evaluated (%s) beams %s (%s): a sum that lacks a beam is not the plan's dose",
			rn, FormatNumbers(ref.ReferencedBeamNumbers), en, FormatNumbers(eval.ReferencedBeamNumbers), tagString(tagReferencedBeamNumber))
	case rs != es && (refSum && partialSummation[rs] || evalSum && partialSummation[es]):
		side, sum, other, otherType := "reference", ref, "evaluated", es
		if !refSum || !partialSummation[rs] {
			side, sum, other, otherType = "evaluated", eval, "reference", rs
		}
		f.warnf("the %s dose is %s and the %s dose is %s: that the sum holds every part of the plan is checked only against the plan's RT Plan (give it with --plan)",
			side, sum.SumLabel(), other, orNone(otherType))
	case rs == "" || es == "":
		f.warnf("DoseSummationType missing (reference %s, evaluated %s): cannot check that both are the same kind of dose", orNone(rs), orNone(es))
	case rs != es && (partialSummation[rs] || partialSummation[es]):
		f.warnf("DoseSummationType differs: reference (%s) %s, evaluated (%s) %s: comparing a beam, fraction-group or session dose with a plan dose is a classic mistake (PS3.3 C.8.8.3: FRACTION is the whole delivery of one fraction group, the *_SESSION types one session, which differs from the course total by the number of sessions); check that these are the files you mean", rn, rs, en, es)
	case rs != es:
		f.warnf("DoseSummationType differs: reference (%s) %s, evaluated (%s) %s", rn, rs, en, es)
	case partialSummation[rs] && (ref.ReferencedFractionGroupNumber != eval.ReferencedFractionGroupNumber || ref.ReferencedBeamNumber != eval.ReferencedBeamNumber):
		f.warnf("both doses are %s doses but of different parts of the plan: reference (%s) fraction group %d, beam %d; evaluated (%s) fraction group %d, beam %d",
			rs, rn, ref.ReferencedFractionGroupNumber, ref.ReferencedBeamNumber, en, eval.ReferencedFractionGroupNumber, eval.ReferencedBeamNumber)
	}
	if ref.PatientID != "" && eval.PatientID != "" && ref.PatientID != eval.PatientID {
		f.warnf("patient IDs differ: reference (%s) %q, evaluated (%s) %q", rn, ref.PatientID, en, eval.PatientID)
	}
	if refGrid != nil && evalGrid != nil {
		coverage(f, ref, refGrid, evalGrid, rn, en)
	}
	return f
}

// DoseTypeMismatch returns, when the reference and the evaluated dose have
// different DoseType (3004,0004) values, why they cannot simply be compared;
// "" when the types agree or one is missing (which CheckConsistency warns
// about). PS3.3 C.8.8.3 defines PHYSICAL as physical dose, EFFECTIVE as
// physical dose corrected for biological effect by a user-defined model,
// and ERROR as a difference between doses: a physical and an effective dose
// differ by that model (an RBE of 1.1, say, is 10 %) whatever the delivery,
// and an ERROR "dose" is no dose at all (refused on its own, see
// DoseInfo.DisagreementMap).
func DoseTypeMismatch(ref, eval *DoseInfo) string {
	a, b := ref.DoseType, eval.DoseType
	if a == "" || b == "" || a == b {
		return ""
	}
	return fmt.Sprintf("dose types differ: reference (%s) %s, evaluated (%s) %s (%s): an effective dose is a physical dose corrected for biological effect by a model (PS3.3 C.8.8.3), so the two differ by that model whatever the delivery",
		fileLabel(ref, "reference"), a, fileLabel(eval, "evaluated"), b, tagString(tagDoseType))
}

// coverage checks that the evaluated grid covers the reference high-dose
// region.
func coverage(f *Findings, ref *DoseInfo, refGrid, evalGrid *volume.Grid, rn, en string) {
	peak, _ := refGrid.Max()
	if !(peak > 0) {
		f.errorf("the reference dose (%s) has no positive value (maximum %g): nothing to compare", rn, peak)
		return
	}
	thr := float32(HighDoseFraction) * peak
	total, outside := 0, 0
	n := 0
	dims := refGrid.Dims()
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				v := refGrid.Data[n]
				n++
				if !(v >= thr) {
					continue
				}
				total++
				u := evalGrid.WorldToLocal(refGrid.WorldOf(i, j, k))
				for a := 0; a < 3; a++ {
					if _, _, ok := evalGrid.Cell(a, u[a]); !ok {
						outside++
						break
					}
				}
			}
		}
	}
	region := fmt.Sprintf("the reference high-dose region (%d voxels at ≥ %g %% of the reference maximum %.4g %s)", total, HighDoseFraction*100, peak, ref.UnitLabel())
	files := fmt.Sprintf("reference %s, evaluated %s", rn, en)
	switch {
	case outside == total:
		f.errorf("the evaluated grid covers none of %s: the grids do not overlap where it matters (%s)", region, files)
	case outside > 0:
		f.warnf("%.1f %% (%d voxels) of %s lies outside the evaluated grid and cannot be compared (%s)", 100*float64(outside)/float64(total), outside, region, files)
	}
}

func fileLabel(d *DoseInfo, fallback string) string {
	if n := len(d.SummedFrom); n > 1 {
		return fmt.Sprintf("%s and %d more summed", filepath.Base(d.SummedFrom[0]), n-1)
	}
	if d.Path == "" {
		return fallback
	}
	return filepath.Base(d.Path)
}
