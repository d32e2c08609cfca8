package dicomio

import (
	"fmt"
	"time"
)

// WritePlan writes p as an RT Plan file (PS3.3 A.20) at path, atomically,
// for demonstrations and tests: an invented plan whose dose files name it.
// It writes the RT General Plan module (label, name, description, date,
// intent, geometry and the ReferencedStructureSetSequence when p names a
// structure set), the RT Prescription module (p's dose references: VOLUME
// when they name an ROI, SITE otherwise), the RT Fraction Scheme module (p's
// fraction groups with the meterset and dose of each beam), an RT Patient
// Setup module with one head-first supine setup, the RT Beams module and
// the Approval module (UNAPPROVED unless p says otherwise).
//
// Each beam is written as the plan of a static open field: two control
// points at p's gantry angle and energy, 100 × 100 mm jaws, no wedge,
// compensator, bolus or block. It is not a deliverable plan. Ion beams are
// refused. ids supply the Patient, General Study and Frame of Reference
// identifiers. RTPlanGeometry is PATIENT when p names a structure set,
// TREATMENT_DEVICE otherwise.
//
// The plan's SOPInstanceUID is p's when set, else ids.ReferencedRTPlanUID
// when set (so that doses written with the same identifiers name this
// plan), else a new UID. It returns a copy of p as written, with
// identifiers, SOP instance and new series UIDs, geometry and approval
// status filled in.
func WritePlan(path string, p *Plan, ids Identifiers) (*Plan, error) {
	out, b, err := buildPlan(p, ids, time.Now())
	if err != nil {
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	if err := writeDataset(path, RTPlanStorage, out.SOPInstanceUID, tsExplicitLE, b); err != nil {
		return nil, err
	}
	out.Path = path
	return out, nil
}

func buildPlan(p *Plan, ids Identifiers, now time.Time) (*Plan, *builder, error) {
	if err := checkIdentifiers(ids); err != nil {
		return nil, nil, err
	}
	out := *p
	out.Identifiers = ids
	out.Identifiers.ReferencedRTPlanUID = ""
	out.SOPClassUID = RTPlanStorage
	switch {
	case p.SOPInstanceUID != "":
	case ids.ReferencedRTPlanUID != "":
		out.SOPInstanceUID = ids.ReferencedRTPlanUID
	default:
		out.SOPInstanceUID = NewUID()
	}
	out.SeriesInstanceUID = NewUID()
	out.Notes = nil
	if out.Label == "" {
		out.Label = "VOXGAMMA"
	}
	if out.ApprovalStatus == "" {
		out.ApprovalStatus = "UNAPPROVED"
	}
	out.Geometry = "TREATMENT_DEVICE"
	if out.ReferencedStructureSetUID != "" {
		out.Geometry = "PATIENT"
	}
	if out.Date == "" {
		out.Date, out.Time = now.Format("20060102"), now.Format("150405")
	}
	for _, c := range []struct {
		what string
		s    string
		max  int
	}{{"RTPlanLabel", out.Label, 16}, {"RTPlanName", out.Name, 64}, {"RTPlanDescription", out.Description, 1024}, {"UID", out.ReferencedStructureSetUID, 64}} {
		if err := checkLen(c.what, c.s, c.max); err != nil {
			return nil, nil, err
		}
	}

	b := &builder{}
	b.addCommon(RTPlanStorage, out.SOPInstanceUID, "RTPLAN", out.SeriesInstanceUID, out.Label, 0, ids, now)
	b.add(tagFrameOfReferenceUID, ids.FrameOfReferenceUID)
	b.add(tagPositionReferenceInd, "")
	b.add(tagRTPlanLabel, out.Label)
	if out.Name != "" {
		b.add(tagRTPlanName, out.Name)
	}
	if out.Description != "" {
		b.add(tagRTPlanDescription, out.Description)
	}
	b.add(tagRTPlanDate, out.Date)
	b.add(tagRTPlanTime, out.Time)
	if out.Intent != "" {
		b.add(tagPlanIntent, out.Intent)
	}
	b.add(tagRTPlanGeometry, out.Geometry)
	if out.ReferencedStructureSetUID != "" {
		rs := &builder{}
		rs.add(tagReferencedSOPClassUID, RTStructureSetStorage)
		rs.add(tagReferencedSOPInstanceUID, out.ReferencedStructureSetUID)
		b.addSeq(tagReferencedStructureSetSeq, rs)
	}
	b.add(tagApprovalStatus, out.ApprovalStatus)

	// RT Prescription.
	var refs []*builder
	seen := map[int]bool{}
	for i, r := range out.DoseReferences {
		if seen[r.Number] {
			return nil, nil, fmt.Errorf("dose reference %d: DoseReferenceNumber %d used twice", i+1, r.Number)
		}
		seen[r.Number] = true
		it := &builder{}
		it.addIS(tagDoseReferenceNumber, r.Number)
		if r.UID != "" {
			it.add(tagDoseReferenceUID, r.UID)
		}
		st := "SITE"
		if r.ReferencedROINumber != 0 {
			st = "VOLUME"
			it.addIS(tagReferencedROINumber, r.ReferencedROINumber)
		}
		out.DoseReferences[i].StructureType = st
		it.add(tagDoseReferenceStructType, st)
		if r.Description != "" {
			it.add(tagDoseReferenceDescription, r.Description)
		}
		if r.Type != "TARGET" && r.Type != "ORGAN_AT_RISK" {
			return nil, nil, fmt.Errorf("dose reference %d: DoseReferenceType %q, want TARGET or ORGAN_AT_RISK", r.Number, r.Type)
		}
		it.add(tagDoseReferenceType, r.Type)
		if r.DeliveryMaximumGy != nil {
			it.addDS(tagDeliveryMaximumDose, *r.DeliveryMaximumGy)
		}
		if r.TargetPrescriptionGy != nil {
			it.addDS(tagTargetPrescriptionDose, *r.TargetPrescriptionGy)
		}
		refs = append(refs, it)
	}
	if len(refs) > 0 {
		b.addSeq(tagDoseReferenceSequence, refs...)
	}

	// RT Beams.
	beams := map[int]bool{}
	var beamItems []*builder
	for _, bm := range out.Beams {
		if bm.Ion {
			return nil, nil, fmt.Errorf("beam %d: ion beams are not written", bm.Number)
		}
		if beams[bm.Number] {
			return nil, nil, fmt.Errorf("beam %d: BeamNumber used twice", bm.Number)
		}
		beams[bm.Number] = true
		if err := checkLen(fmt.Sprintf("beam %d: BeamName", bm.Number), bm.Name, 64); err != nil {
			return nil, nil, err
		}
		beamItems = append(beamItems, planBeam(bm))
	}
	if len(beamItems) > 0 {
		setup := &builder{}
		setup.add(tagPatientPosition, "HFS")
		setup.addIS(tagPatientSetupNumber, 1)
		b.addSeq(tagPatientSetupSequence, setup)
		b.addSeq(tagBeamSequence, beamItems...)
	}

	// RT Fraction Scheme.
	var groups []*builder
	gseen := map[int]bool{}
	for _, g := range out.FractionGroups {
		if gseen[g.Number] {
			return nil, nil, fmt.Errorf("fraction group %d: FractionGroupNumber used twice", g.Number)
		}
		gseen[g.Number] = true
		it := &builder{}
		it.addIS(tagFractionGroupNumber, g.Number)
		if g.Description != "" {
			it.add(tagFractionGroupDescription, g.Description)
		}
		if g.FractionsPlanned > 0 {
			it.addIS(tagNumberOfFractionsPlanned, g.FractionsPlanned)
		} else {
			it.add(tagNumberOfFractionsPlanned, "")
		}
		it.addIS(tagNumberOfBeams, len(g.Beams))
		it.addIS(tagNumberOfBrachySetups, 0)
		var rbs []*builder
		for _, rb := range g.Beams {
			if !beams[rb.BeamNumber] {
				return nil, nil, fmt.Errorf("fraction group %d references beam %d, which the plan does not define", g.Number, rb.BeamNumber)
			}
			r := &builder{}
			r.addIS(tagReferencedBeamNumber, rb.BeamNumber)
			if rb.Meterset != nil {
				r.addDS(tagBeamMeterset, *rb.Meterset)
			}
			if rb.DoseGy != nil {
				r.addDS(tagBeamDose, *rb.DoseGy)
			}
			rbs = append(rbs, r)
		}
		if len(rbs) > 0 {
			it.addSeq(tagReferencedBeamSequence, rbs...)
		}
		groups = append(groups, it)
	}
	if len(groups) > 0 {
		b.addSeq(tagFractionGroupSequence, groups...)
	}
	if b.err != nil {
		return nil, nil, b.err
	}
	return &out, b, nil
}

// planBeam builds one BeamSequence item: a static open field with two
// control points.
func planBeam(bm Beam) *builder {
	it := &builder{}
	it.addIS(tagBeamNumber, bm.Number)
	if bm.Name != "" {
		it.add(tagBeamName, bm.Name)
	}
	if bm.Description != "" {
		it.add(tagBeamDescription, bm.Description)
	}
	it.add(tagBeamType, "STATIC")
	rad := bm.RadiationType
	if rad == "" {
		rad = "PHOTON"
	}
	it.add(tagRadiationType, rad)
	it.add(tagTreatmentMachineName, bm.MachineName)
	unit := bm.DosimeterUnit
	if unit == "" {
		unit = "MU"
	}
	it.add(tagPrimaryDosimeterUnit, unit)
	it.addDS(tagSourceAxisDistance, 1000)
	var bld []*builder
	for _, d := range []string{"X", "Y"} {
		x := &builder{}
		x.add(tagRTBeamLimitingDeviceType, d)
		x.addIS(tagNumberOfLeafJawPairs, 1)
		bld = append(bld, x)
	}
	it.addSeq(tagBeamLimitingDeviceSeq, bld...)
	it.addIS(tagReferencedPatientSetupNo, 1)
	delivery := bm.DeliveryType
	if delivery == "" {
		delivery = "TREATMENT"
	}
	it.add(tagTreatmentDeliveryType, delivery)
	it.addIS(tagNumberOfWedges, 0)
	it.addIS(tagNumberOfCompensators, 0)
	it.addIS(tagNumberOfBoli, 0)
	it.addIS(tagNumberOfBlocks, 0)
	final := 1.0
	if bm.FinalCumulativeMetersetWeight != nil {
		final = *bm.FinalCumulativeMetersetWeight
	}
	it.addDS(tagFinalCumulativeMSWeight, final)
	it.addIS(tagNumberOfControlPoints, 2)
	gantry := 0.0
	if bm.GantryAngleDeg != nil {
		gantry = *bm.GantryAngleDeg
	}
	cp0 := &builder{}
	cp0.addIS(tagControlPointIndex, 0)
	if bm.NominalEnergy != nil {
		cp0.addDS(tagNominalBeamEnergy, *bm.NominalEnergy)
	}
	var pos []*builder
	for _, d := range []string{"X", "Y"} {
		x := &builder{}
		x.add(tagRTBeamLimitingDeviceType, d)
		x.addDS(tagLeafJawPositions, -50, 50)
		pos = append(pos, x)
	}
	cp0.addSeq(tagBeamLimitingDevicePosSeq, pos...)
	cp0.addDS(tagGantryAngle, gantry)
	cp0.add(tagGantryRotationDirection, "NONE")
	cp0.addDS(tagBeamLimitingDeviceAngle, 0)
	cp0.add(tagBLDRotationDirection, "NONE")
	cp0.addDS(tagPatientSupportAngle, 0)
	cp0.add(tagPatientSupportRotDir, "NONE")
	cp0.addDS(tagTableTopEccentricAngle, 0)
	cp0.add(tagTableTopEccentricRotDir, "NONE")
	cp0.add(tagTableTopVerticalPosition, "")
	cp0.add(tagTableTopLongitudinalPos, "")
	cp0.add(tagTableTopLateralPosition, "")
	if bm.Isocenter != nil {
		cp0.addDS(tagIsocenterPosition, bm.Isocenter[0], bm.Isocenter[1], bm.Isocenter[2])
	} else {
		cp0.add(tagIsocenterPosition, "")
	}
	cp0.addDS(tagCumulativeMetersetWeight, 0)
	cp1 := &builder{}
	cp1.addIS(tagControlPointIndex, 1)
	cp1.addDS(tagCumulativeMetersetWeight, final)
	it.addSeq(tagControlPointSequence, cp0, cp1)
	return it
}
