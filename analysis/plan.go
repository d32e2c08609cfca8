package analysis

import (
	"fmt"

	"voxgamma/dicomio"
)

// The uses of the RT Plan beyond context (issue 18): the beams of doses
// summed from parts checked against its beam list, normalisation to its
// prescription, and a per-fraction dose scaled by its number of fractions.
// Each needs the plan to be the doses' own.

// planLabel names the plan in messages.
func planLabel(p *dicomio.Plan) string {
	return fmt.Sprintf("RT Plan %q (%s)", p.Label, p.Path)
}

// checkPlanParts checks each dose summed from parts against the RT Plan
// (dicomio.DoseSet.CheckPlan): a part of a beam the plan does not define,
// or a treatment beam of the plan no part holds, is refused; a sum found
// complete stands for the dose it is (PLAN, or one fraction group's), so
// that it compares with a plan dose without a warning. Without a plan, the
// result says the beams were not checked.
func (l *Loaded) checkPlanParts() error {
	if l.Plan == nil {
		return nil
	}
	for _, x := range []struct {
		role, label string
		set         *dicomio.DoseSet
		info        *dicomio.DoseInfo
	}{{"reference", "reference", l.ReferenceSet, l.ReferenceInfo}, {"evaluated", "evaluated dose", l.EvaluatedSet, l.EvaluatedInfo}} {
		if x.set == nil || len(x.set.Parts) < 2 {
			continue
		}
		c, err := x.set.CheckPlan(l.Plan)
		if err != nil {
			return badInput("the %s given as %d RT Dose files to sum: %v", x.label, len(x.set.Parts), err)
		}
		for _, w := range c.Warnings {
			l.Warnings = append(l.Warnings, fmt.Sprintf("the %s: %s", x.label, w))
		}
		for i := range l.DoseSums {
			if l.DoseSums[i].Role == x.role {
				l.DoseSums[i].PlanCheck = c.Text
			}
		}
		if c.Complete && c.SummationType != x.info.DoseSummationType {
			l.Notes = append(l.Notes, fmt.Sprintf("the %s holds %s: taken as a %s dose", x.label, c.Text, c.SummationType))
			x.info.DoseSummationType = c.SummationType
			if c.FractionGroup != 0 {
				x.info.ReferencedFractionGroupNumber = c.FractionGroup
			}
		}
	}
	return nil
}

// planOfReference refuses a use of the RT Plan (what, e.g. "--norm-dose
// prescription") when the reference dose names another plan.
func (p *Prepared) planOfReference(what string) error {
	ref := p.ReferenceInfo
	if ref == nil || ref.ReferencedRTPlanUID == "" || p.Plan.SOPInstanceUID == "" || ref.ReferencedRTPlanUID == p.Plan.SOPInstanceUID {
		return nil
	}
	return badInput("%s: the reference dose was computed for RT Plan %s, not for %s (%s): that plan's figures are not this dose's",
		what, ref.ReferencedRTPlanUID, planLabel(p.Plan), p.Plan.SOPInstanceUID)
}

// prescription is the normalisation dose of --norm-dose prescription (or a
// protocol's norm_dose_from: prescription): the RT Plan's highest
// TargetPrescriptionDose of a TARGET dose reference (PS3.3 C.8.8.10).
func (p *Prepared) prescription() (float64, error) {
	const what = "--norm-dose prescription (or the protocol's norm_dose_from: prescription)"
	if p.Plan == nil {
		return 0, badInput("%s needs the RT Plan: give --plan, or put the plan the reference dose names in the reference folder", what)
	}
	rx, ok := p.Plan.PrescriptionGy()
	if !ok {
		return 0, badInput("%s: %s states no prescription (no TargetPrescriptionDose (300A,0026) in a TARGET item of DoseReferenceSequence (300A,0010)); give the normalisation dose in Gy instead",
			what, planLabel(p.Plan))
	}
	if err := p.planOfReference(what); err != nil {
		return 0, err
	}
	if p.ReferenceInfo != nil && p.ReferenceInfo.Relative() {
		return 0, badInput("%s: the reference dose is RELATIVE (%s), and a prescription in Gy cannot normalise it", what, "DoseUnits (3004,0002)")
	}
	return rx, nil
}

// fractionsPlanned is the number of fractions the RT Plan plans for the
// evaluated dose, for --scale-evaluated fractions: NumberOfFractionsPlanned
// (300A,0078) of the fraction group the evaluated dose names, or of the
// plan's only fraction group. It says where the number came from.
func (p *Prepared) fractionsPlanned() (int, string, error) {
	const what = "--scale-evaluated fractions"
	if p.Plan == nil {
		return 0, "", badInput("%s takes the number of fractions from the RT Plan, and none was given: give the plan, or the factor (e.g. --scale-evaluated 30)", what)
	}
	if err := p.planOfReference(what); err != nil {
		return 0, "", err
	}
	ev := p.EvaluatedInfo
	if ev != nil && ev.ReferencedRTPlanUID != "" && p.Plan.SOPInstanceUID != "" && ev.ReferencedRTPlanUID != p.Plan.SOPInstanceUID {
		return 0, "", badInput("%s: the evaluated dose names RT Plan %s, not %s (%s): give the factor (e.g. --scale-evaluated 30)",
			what, ev.ReferencedRTPlanUID, planLabel(p.Plan), p.Plan.SOPInstanceUID)
	}
	groups := p.Plan.FractionGroups
	g := 0
	if ev != nil {
		g = ev.ReferencedFractionGroupNumber
	}
	var group *dicomio.FractionGroup
	switch {
	case g != 0:
		for i := range groups {
			if groups[i].Number == g {
				group = &groups[i]
			}
		}
		if group == nil {
			return 0, "", badInput("%s: the evaluated dose names fraction group %d, which %s does not define", what, g, planLabel(p.Plan))
		}
	case len(groups) == 1:
		group = &groups[0]
	case len(groups) == 0:
		return 0, "", badInput("%s: %s has no fraction group (FractionGroupSequence (300A,0070)): give the factor", what, planLabel(p.Plan))
	default:
		return 0, "", badInput("%s: %s has %d fraction groups and the evaluated dose names none: give the factor", what, planLabel(p.Plan), len(groups))
	}
	if group.FractionsPlanned < 1 {
		return 0, "", badInput("%s: fraction group %d of %s states no NumberOfFractionsPlanned (300A,0078): give the factor", what, group.Number, planLabel(p.Plan))
	}
	return group.FractionsPlanned, fmt.Sprintf("NumberOfFractionsPlanned of fraction group %d of RT Plan %q", group.Number, p.Plan.Label), nil
}
