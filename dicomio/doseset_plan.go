package dicomio

// A dose set checked against its RT Plan's beams and fraction groups.

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
)

// PlanCheck is what [DoseSet.CheckPlan] found.
type PlanCheck struct {
	// Complete is true when the parts hold every part of what the plan
	// delivers: every treatment beam of the plan (BEAM), of one fraction
	// group (BEAM_SESSION: one session of it), or every fraction group
	// (FRACTION).
	Complete bool
	// SummationType is the DoseSummationType the sum stands for once
	// checked: PLAN for every beam or fraction group of the plan,
	// FRACTION for every beam of one of several fraction groups,
	// FRACTION_SESSION for one session of every beam of a group; the
	// parts' own type otherwise.
	SummationType string
	// FractionGroup is the fraction group the sum is of, 0 when the whole
	// plan's or not known.
	FractionGroup int
	// Text says in words what was checked, for the result.
	Text string
	// Warnings are for the user (a plan the parts do not name).
	Warnings []string
}

// CheckPlan checks the parts against the RT Plan's beam list or fraction
// groups: a part holding a beam (or fraction group) the plan does not
// define is refused naming the file, and a treatment beam (or fraction
// group) of the plan that no part holds is refused naming it (a
// [DoseSetError] with MissingBeams). Beams whose TreatmentDeliveryType is
// SETUP or a portal film need not be there. Parts that name another plan
// are checked by number, with a warning. FRACTION_SESSION parts carry no
// beam or session number: only their count is compared with the plan's
// number of fractions, in words.
func (s *DoseSet) CheckPlan(p *Plan) (*PlanCheck, error) {
	c := &PlanCheck{SummationType: s.SummationType}
	label := fmt.Sprintf("RT Plan %q", p.Label)
	if s.PlanUID != "" && p.SOPInstanceUID != "" && s.PlanUID != p.SOPInstanceUID {
		c.Warnings = append(c.Warnings, fmt.Sprintf("the doses summed were computed for plan %s, not for %s (%s): their beams are checked against it by number",
			s.PlanUID, label, p.SOPInstanceUID))
	}
	groupOf := map[int]int{}
	for _, g := range p.FractionGroups {
		for _, b := range g.Beams {
			if _, ok := groupOf[b.BeamNumber]; !ok {
				groupOf[b.BeamNumber] = g.Number
			}
		}
	}
	beamName := func(n int) string {
		if b := p.Beam(n); b != nil && b.Name != "" {
			return fmt.Sprintf("beam %d %q", n, b.Name)
		}
		return fmt.Sprintf("beam %d", n)
	}
	switch summableTypes[s.SummationType] {
	case "beam":
		// Every beam named must be the plan's.
		for _, part := range s.Parts {
			for _, b := range part.Info.ReferencedBeamNumbers {
				if p.Beam(b) == nil {
					var defined []int
					for _, pb := range p.Beams {
						defined = append(defined, pb.Number)
					}
					sort.Ints(defined)
					return nil, setErr(part.Path, "%s holds beam %d, which %s does not define (beams %s)", pathLabel(part.Path), b, label, FormatNumbers(defined))
				}
			}
		}
		// Which beams the sum must hold: the plan's treatment beams, of
		// the one fraction group the parts name when they all name the
		// same one and the plan has several.
		group := 0
		if len(s.FractionGroups) == 1 && len(p.FractionGroups) > 1 {
			group = s.FractionGroups[0]
		}
		have := map[int]bool{}
		for _, b := range s.Beams {
			have[b] = true
		}
		var missing []int
		var names []string
		for _, b := range p.Beams {
			if !b.IsTreatment() {
				continue
			}
			if g, ok := groupOf[b.Number]; len(p.FractionGroups) > 0 && (!ok || group != 0 && g != group) {
				continue // delivered by no fraction group, or by another
			}
			if !have[b.Number] {
				missing = append(missing, b.Number)
				names = append(names, beamName(b.Number))
			}
		}
		if len(missing) > 0 {
			what := "the plan"
			if group != 0 {
				what = fmt.Sprintf("fraction group %d", group)
			}
			return nil, &DoseSetError{MissingBeams: missing, msg: fmt.Sprintf("%s of %s %s no dose among the %d files summed (beams %s): the sum is not the dose of %s",
				strings.Join(names, ", "), label, map[bool]string{true: "have", false: "has"}[len(missing) > 1], len(s.Parts), FormatNumbers(s.Beams), what)}
		}
		c.Complete = true
		switch {
		case group != 0 && s.SummationType == "BEAM":
			c.SummationType, c.FractionGroup = "FRACTION", group
		case s.SummationType == "BEAM":
			c.SummationType = "PLAN"
		case s.SummationType == "BEAM_SESSION" && (group != 0 || len(p.FractionGroups) == 1):
			c.SummationType, c.FractionGroup = "FRACTION_SESSION", group
			if group == 0 {
				c.FractionGroup = p.FractionGroups[0].Number
			}
		}
		c.Text = fmt.Sprintf("every treatment beam of %s (beams %s)", label, FormatNumbers(s.Beams))
		if group != 0 {
			c.Text = fmt.Sprintf("every treatment beam of fraction group %d of %s (beams %s)", group, label, FormatNumbers(s.Beams))
		}
	case "fraction group":
		defined := map[int]bool{}
		for _, g := range p.FractionGroups {
			defined[g.Number] = true
		}
		for _, part := range s.Parts {
			if g := part.Info.ReferencedFractionGroupNumber; !defined[g] {
				return nil, setErr(part.Path, "%s holds fraction group %d, which %s does not define", pathLabel(part.Path), g, label)
			}
		}
		have := map[int]bool{}
		for _, g := range s.FractionGroups {
			have[g] = true
		}
		var missing []string
		for _, g := range p.FractionGroups {
			if !have[g.Number] {
				missing = append(missing, strconv.Itoa(g.Number))
			}
		}
		if len(missing) > 0 {
			return nil, setErr("", "fraction group %s of %s has no dose among the %d files summed: the sum is not the plan's dose", strings.Join(missing, ", "), label, len(s.Parts))
		}
		c.Complete, c.SummationType = true, "PLAN"
		c.Text = fmt.Sprintf("every fraction group of %s (%s)", label, FormatNumbers(s.FractionGroups))
	default:
		planned := 0
		for _, g := range p.FractionGroups {
			if len(s.FractionGroups) == 0 || g.Number == s.FractionGroups[0] {
				planned += g.FractionsPlanned
			}
		}
		c.Text = fmt.Sprintf("not checked: single sessions carry no number; %d sessions summed, %s plans %d fractions", len(s.Parts), label, planned)
	}
	return c, nil
}
