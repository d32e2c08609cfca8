package dicomio

import (
	"fmt"
	"sort"

	"github.com/suyashkumar/dicom/pkg/tag"
)

// RTIonPlanStorage is the SOP class of RT Ion Plan files (PS3.4 annex B),
// read by [ReadPlan] like RT Plans.
const RTIonPlanStorage = "1.2.840.10008.5.1.4.1.1.481.8"

// Plan is what an RT Plan (or RT Ion Plan) file says about the treatment a
// dose was computed for: the RT General Plan module (PS3.3 C.8.8.9), the RT
// Prescription module (C.8.8.10), the RT Fraction Scheme module (C.8.8.13)
// and the beams of the RT Beams module (C.8.8.14) or RT Ion Beams module
// (C.8.8.25). [ReadPlan] fills it; [WritePlan] writes one.
//
// Optional numbers are nil when the file leaves them out (an empty type 2
// attribute, an absent type 3 one).
type Plan struct {
	// Identifiers are the Patient, General Study and Frame of Reference
	// identifiers. The Frame of Reference module is optional in an RT Plan:
	// FrameOfReferenceUID may be empty. ReferencedRTPlanUID is unused.
	Identifiers
	// Path is the file the plan was read from or written to.
	Path string
	// SOPClassUID (0008,0016): [RTPlanStorage] or [RTIonPlanStorage].
	SOPClassUID string
	// SOPInstanceUID (0008,0018): what an RT Dose's
	// ReferencedRTPlanSequence names.
	SOPInstanceUID string
	// SeriesInstanceUID (0020,000E).
	SeriesInstanceUID string
	// Label is RTPlanLabel (300A,0002), Name RTPlanName (300A,0003) and
	// Description RTPlanDescription (300A,0004).
	Label, Name, Description string
	// Date and Time are RTPlanDate (300A,0006) and RTPlanTime (300A,0007)
	// as written (YYYYMMDD, HHMMSS.FFFFFF).
	Date, Time string
	// Intent is PlanIntent (300A,000A): CURATIVE, PALLIATIVE, PROPHYLACTIC,
	// VERIFICATION, MACHINE_QA, RESEARCH, SERVICE.
	Intent string
	// Geometry is RTPlanGeometry (300A,000C): PATIENT or TREATMENT_DEVICE.
	Geometry string
	// ApprovalStatus (300E,0002): APPROVED, UNAPPROVED or REJECTED.
	ApprovalStatus string
	// ReferencedStructureSetUID is the ReferencedSOPInstanceUID (0008,1155)
	// of the first item of ReferencedStructureSetSequence (300C,0060): the
	// structure set the plan was made on (required when Geometry is
	// PATIENT).
	ReferencedStructureSetUID string
	// DoseReferences are the items of DoseReferenceSequence (300A,0010),
	// in file order.
	DoseReferences []DoseReference
	// FractionGroups are the items of FractionGroupSequence (300A,0070), in
	// file order.
	FractionGroups []FractionGroup
	// Beams are the items of BeamSequence (300A,00B0) or IonBeamSequence
	// (300A,03A2), in file order.
	Beams []Beam
	// Notes are remarks about what was not read or looked odd (brachy
	// application setups, a plan without fraction groups, ...).
	Notes []string
}

// DoseReference is one item of DoseReferenceSequence (300A,0010): a point
// or a volume the plan prescribes or limits dose to.
type DoseReference struct {
	// Number is DoseReferenceNumber (300A,0012).
	Number int
	// UID is DoseReferenceUID (300A,0013).
	UID string
	// StructureType is DoseReferenceStructureType (300A,0014): POINT,
	// VOLUME, COORDINATES or SITE.
	StructureType string
	// Description is DoseReferenceDescription (300A,0016).
	Description string
	// Type is DoseReferenceType (300A,0020): TARGET or ORGAN_AT_RISK.
	Type string
	// ReferencedROINumber (3006,0084) is the ROI of the structure set the
	// reference is (for VOLUME and POINT references); 0 when absent.
	ReferencedROINumber int
	// TargetPrescriptionGy is TargetPrescriptionDose (300A,0026): the dose
	// in Gy prescribed to a TARGET reference. PS3.3 does not say whether it
	// is per fraction or for the whole course; planning systems write the
	// course total in practice (common practice, no source).
	TargetPrescriptionGy *float64
	// DeliveryMaximumGy is DeliveryMaximumDose (300A,0023) in Gy.
	DeliveryMaximumGy *float64
}

// FractionGroup is one item of FractionGroupSequence (300A,0070): beams
// delivered together, and how often.
type FractionGroup struct {
	// Number is FractionGroupNumber (300A,0071).
	Number int
	// Description is FractionGroupDescription (300A,0072).
	Description string
	// FractionsPlanned is NumberOfFractionsPlanned (300A,0078); 0 when the
	// file leaves it empty.
	FractionsPlanned int
	// NumberOfBeams (300A,0080) and NumberOfBrachyApplicationSetups
	// (300A,00A0) as written.
	NumberOfBeams, NumberOfBrachySetups int
	// Beams are the items of ReferencedBeamSequence (300C,0004).
	Beams []ReferencedBeam
}

// ReferencedBeam is one item of a fraction group's ReferencedBeamSequence
// (300C,0004): a beam of the group and its meterset per fraction.
type ReferencedBeam struct {
	// BeamNumber is ReferencedBeamNumber (300C,0006): the BeamNumber of an
	// item of Plan.Beams.
	BeamNumber int
	// Meterset is BeamMeterset (300A,0086), per fraction, in the beam's
	// PrimaryDosimeterUnit (MU for photons and electrons).
	Meterset *float64
	// DoseGy is BeamDose (300A,0084): the beam's dose per fraction at its
	// dose specification point, in Gy.
	DoseGy *float64
}

// Beam is one item of BeamSequence (300A,00B0) or IonBeamSequence
// (300A,03A2).
type Beam struct {
	// Number is BeamNumber (300A,00C0), unique within the plan.
	Number int
	// Name is BeamName (300A,00C2) and Description BeamDescription
	// (300A,00C3).
	Name, Description string
	// Type is BeamType (300A,00C4): STATIC or DYNAMIC.
	Type string
	// RadiationType (300A,00C6): PHOTON, ELECTRON, NEUTRON, PROTON, ION.
	RadiationType string
	// MachineName is TreatmentMachineName (300A,00B2).
	MachineName string
	// DosimeterUnit is PrimaryDosimeterUnit (300A,00B3): MU, MINUTE or NP.
	DosimeterUnit string
	// DeliveryType is TreatmentDeliveryType (300A,00CE): TREATMENT,
	// OPEN_PORTFILM, TRMT_PORTFILM, CONTINUATION, SETUP.
	DeliveryType string
	// Ion is true for an item of IonBeamSequence.
	Ion bool
	// ControlPoints is NumberOfControlPoints (300A,0110).
	ControlPoints int
	// FinalCumulativeMetersetWeight (300A,010E).
	FinalCumulativeMetersetWeight *float64
	// NominalEnergy is NominalBeamEnergy (300A,0114) of the first control
	// point: MV for photons, MeV for electrons, MeV per nucleon for ions.
	NominalEnergy *float64
	// GantryAngleDeg is GantryAngle (300A,011E) of the first control point.
	GantryAngleDeg *float64
	// Isocenter is IsocenterPosition (300A,012C) of the first control
	// point, in patient coordinates (mm).
	Isocenter *[3]float64
}

// IsTreatment reports whether the beam delivers treatment dose: its
// TreatmentDeliveryType is TREATMENT or CONTINUATION, or absent (type 2 in
// the RT Beams module; treatment is the usual meaning).
func (b *Beam) IsTreatment() bool {
	switch b.DeliveryType {
	case "", "TREATMENT", "CONTINUATION":
		return true
	}
	return false
}

// Beam returns the beam with BeamNumber n, or nil.
func (p *Plan) Beam(n int) *Beam {
	for i := range p.Beams {
		if p.Beams[i].Number == n {
			return &p.Beams[i]
		}
	}
	return nil
}

// Prescriptions returns the dose references of type TARGET that carry a
// TargetPrescriptionDose, in file order.
func (p *Plan) Prescriptions() []DoseReference {
	var out []DoseReference
	for _, d := range p.DoseReferences {
		if d.Type == "TARGET" && d.TargetPrescriptionGy != nil {
			out = append(out, d)
		}
	}
	return out
}

// PrescriptionGy returns the highest TargetPrescriptionDose of the plan's
// TARGET dose references (the primary prescription of a plan with several
// dose levels) and true, or 0 and false when the plan states none.
func (p *Plan) PrescriptionGy() (float64, bool) {
	best, ok := 0.0, false
	for _, d := range p.Prescriptions() {
		if !ok || *d.TargetPrescriptionGy > best {
			best, ok = *d.TargetPrescriptionGy, true
		}
	}
	return best, ok
}

// Meterset returns the meterset per fraction of beam n in fraction group
// g (BeamMeterset of its ReferencedBeamSequence item) and true, or 0 and
// false when the group does not list the beam or gives no meterset.
func (g *FractionGroup) Meterset(n int) (float64, bool) {
	for _, b := range g.Beams {
		if b.BeamNumber == n && b.Meterset != nil {
			return *b.Meterset, true
		}
	}
	return 0, false
}

// ReadPlan reads an RT Plan or RT Ion Plan file (Modality RTPLAN; PS3.3
// A.20 and A.49): plan label, name, description, date, intent, geometry and
// approval; every dose reference with its TargetPrescriptionDose; every
// fraction group with its NumberOfFractionsPlanned and the meterset and
// dose of each referenced beam; every beam with its name, type, radiation,
// machine, delivery type and first control point's energy, gantry angle and
// isocentre. Control points beyond the first, beam limiting devices and
// brachytherapy application setups are not read.
//
// Refused, with an error naming the file and the tag: another Modality; a
// number that does not parse or is not finite; a negative prescription,
// meterset or number of fractions; two beams, fraction groups or dose
// references with the same number; a fraction group that references a beam
// the plan does not define. Absent optional attributes are not errors.
func ReadPlan(path string) (*Plan, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.close()
	var p *Plan
	err = guard(func() error {
		var err error
		p, err = f.ds.plan()
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	p.Path = path
	return p, nil
}

// optDecimal reads a single-valued DS: nil when absent or empty, an error
// when it is not a finite number.
func (d dataset) optDecimal(t tag.Tag) (*float64, error) {
	v, ok, err := d.finiteDecimals(t, 1)
	if err != nil || !ok {
		return nil, err
	}
	x := v[0]
	return &x, nil
}

// optInt reads a single-valued IS: 0 when absent.
func (d dataset) optInt(t tag.Tag) (int, error) {
	n, _, err := d.integer(t)
	return n, err
}

// seqItem names an item of a sequence in messages.
func seqItem(t tag.Tag, n int) string {
	return fmt.Sprintf("%s item %d", tagString(t), n+1)
}

func (d dataset) plan() (*Plan, error) {
	if err := d.modality("RTPLAN"); err != nil {
		return nil, err
	}
	p := &Plan{
		Identifiers:       d.identifiers(),
		SOPClassUID:       d.str(tagSOPClassUID),
		SOPInstanceUID:    d.str(tagSOPInstanceUID),
		SeriesInstanceUID: d.str(tagSeriesInstanceUID),
		Label:             d.str(tagRTPlanLabel),
		Name:              d.str(tagRTPlanName),
		Description:       d.str(tagRTPlanDescription),
		Date:              d.str(tagRTPlanDate),
		Time:              d.str(tagRTPlanTime),
		Intent:            d.str(tagPlanIntent),
		Geometry:          d.str(tagRTPlanGeometry),
		ApprovalStatus:    d.str(tagApprovalStatus),
	}
	p.ReferencedRTPlanUID = ""
	if refs := d.items(tagReferencedStructureSetSeq); len(refs) > 0 {
		p.ReferencedStructureSetUID = refs[0].str(tagReferencedSOPInstanceUID)
	}
	if p.Label == "" {
		p.Notes = append(p.Notes, tagString(tagRTPlanLabel)+" is missing (type 1)")
	}
	switch p.SOPClassUID {
	case "", RTPlanStorage, RTIonPlanStorage:
	default:
		p.Notes = append(p.Notes, fmt.Sprintf("%s is %s, neither RT Plan nor RT Ion Plan Storage", tagString(tagSOPClassUID), p.SOPClassUID))
	}

	seen := map[int]bool{}
	for n, it := range d.items(tagDoseReferenceSequence) {
		where := seqItem(tagDoseReferenceSequence, n)
		var r DoseReference
		var err error
		if r.Number, err = it.optInt(tagDoseReferenceNumber); err != nil {
			return nil, fmt.Errorf("%s: %w", where, err)
		}
		if seen[r.Number] {
			return nil, fmt.Errorf("%s: %w", where, invalid(tagDoseReferenceNumber, "%d is used twice", r.Number))
		}
		seen[r.Number] = true
		r.UID = it.str(tagDoseReferenceUID)
		r.StructureType = it.str(tagDoseReferenceStructType)
		r.Description = it.str(tagDoseReferenceDescription)
		r.Type = it.str(tagDoseReferenceType)
		if r.ReferencedROINumber, err = it.optInt(tagReferencedROINumber); err != nil {
			return nil, fmt.Errorf("%s: %w", where, err)
		}
		for _, v := range []struct {
			t   tag.Tag
			dst **float64
		}{{tagTargetPrescriptionDose, &r.TargetPrescriptionGy}, {tagDeliveryMaximumDose, &r.DeliveryMaximumGy}} {
			x, err := it.optDecimal(v.t)
			if err != nil {
				return nil, fmt.Errorf("%s: %w", where, err)
			}
			if x != nil && *x < 0 {
				return nil, fmt.Errorf("%s: %w", where, invalid(v.t, "is %g Gy, want a dose of 0 Gy or more", *x))
			}
			*v.dst = x
		}
		p.DoseReferences = append(p.DoseReferences, r)
	}

	beams, ion := d.items(tagBeamSequence), false
	beamSeq := tagBeamSequence
	if ib := d.items(tagIonBeamSequence); len(ib) > 0 {
		if len(beams) > 0 {
			return nil, invalid(tagIonBeamSequence, "present together with %s: a plan is either an RT Plan or an RT Ion Plan", tagString(tagBeamSequence))
		}
		beams, ion, beamSeq = ib, true, tagIonBeamSequence
	}
	seen = map[int]bool{}
	for n, it := range beams {
		where := seqItem(beamSeq, n)
		b, err := it.beam(ion)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", where, err)
		}
		if seen[b.Number] {
			return nil, fmt.Errorf("%s: %w", where, invalid(tagBeamNumber, "%d is used twice", b.Number))
		}
		seen[b.Number] = true
		p.Beams = append(p.Beams, b)
	}

	groups := map[int]bool{}
	for n, it := range d.items(tagFractionGroupSequence) {
		where := seqItem(tagFractionGroupSequence, n)
		g, err := it.fractionGroup()
		if err != nil {
			return nil, fmt.Errorf("%s: %w", where, err)
		}
		if groups[g.Number] {
			return nil, fmt.Errorf("%s: %w", where, invalid(tagFractionGroupNumber, "%d is used twice", g.Number))
		}
		groups[g.Number] = true
		for r, rb := range g.Beams {
			if p.Beam(rb.BeamNumber) == nil {
				return nil, fmt.Errorf("%s, %s: %w", where, seqItem(tagReferencedBeamSequence, r),
					invalid(tagReferencedBeamNumber, "%d names no beam of the plan (beams: %s)", rb.BeamNumber, beamNumbers(p.Beams)))
			}
		}
		if g.NumberOfBrachySetups > 0 {
			p.Notes = append(p.Notes, fmt.Sprintf("fraction group %d has %d brachytherapy application setups, which are not read", g.Number, g.NumberOfBrachySetups))
		}
		p.FractionGroups = append(p.FractionGroups, g)
	}
	if len(p.FractionGroups) == 0 {
		p.Notes = append(p.Notes, "the plan has no "+tagString(tagFractionGroupSequence)+": no fractions or metersets")
	}
	return p, nil
}

func beamNumbers(beams []Beam) string {
	if len(beams) == 0 {
		return "none"
	}
	nums := make([]int, len(beams))
	for i, b := range beams {
		nums[i] = b.Number
	}
	sort.Ints(nums)
	return fmt.Sprint(nums)
}

func (it dataset) beam(ion bool) (Beam, error) {
	b := Beam{
		Name:          it.str(tagBeamName),
		Description:   it.str(tagBeamDescription),
		Type:          it.str(tagBeamType),
		RadiationType: it.str(tagRadiationType),
		MachineName:   it.str(tagTreatmentMachineName),
		DosimeterUnit: it.str(tagPrimaryDosimeterUnit),
		DeliveryType:  it.str(tagTreatmentDeliveryType),
		Ion:           ion,
	}
	num, ok, err := it.integer(tagBeamNumber)
	if err != nil {
		return b, err
	}
	if !ok {
		return b, missing(tagBeamNumber, "type 1")
	}
	b.Number = num
	if b.ControlPoints, err = it.optInt(tagNumberOfControlPoints); err != nil {
		return b, err
	}
	if b.ControlPoints < 0 {
		return b, invalid(tagNumberOfControlPoints, "is %d, want 0 or more", b.ControlPoints)
	}
	if b.FinalCumulativeMetersetWeight, err = it.optDecimal(tagFinalCumulativeMSWeight); err != nil {
		return b, err
	}
	cpSeq := tagControlPointSequence
	if ion {
		cpSeq = tagIonControlPointSequence
	}
	if cps := it.items(cpSeq); len(cps) > 0 {
		cp := cps[0]
		where := seqItem(cpSeq, 0)
		if b.NominalEnergy, err = cp.optDecimal(tagNominalBeamEnergy); err != nil {
			return b, fmt.Errorf("%s: %w", where, err)
		}
		if b.GantryAngleDeg, err = cp.optDecimal(tagGantryAngle); err != nil {
			return b, fmt.Errorf("%s: %w", where, err)
		}
		iso, ok, err := cp.finiteDecimals(tagIsocenterPosition, 3)
		if err != nil {
			return b, fmt.Errorf("%s: %w", where, err)
		}
		if ok {
			b.Isocenter = &[3]float64{iso[0], iso[1], iso[2]}
		}
	}
	return b, nil
}

func (it dataset) fractionGroup() (FractionGroup, error) {
	g := FractionGroup{Description: it.str(tagFractionGroupDescription)}
	num, ok, err := it.integer(tagFractionGroupNumber)
	if err != nil {
		return g, err
	}
	if !ok {
		return g, missing(tagFractionGroupNumber, "type 1")
	}
	g.Number = num
	for _, v := range []struct {
		t   tag.Tag
		dst *int
	}{{tagNumberOfFractionsPlanned, &g.FractionsPlanned}, {tagNumberOfBeams, &g.NumberOfBeams}, {tagNumberOfBrachySetups, &g.NumberOfBrachySetups}} {
		n, err := it.optInt(v.t)
		if err != nil {
			return g, err
		}
		if n < 0 {
			return g, invalid(v.t, "is %d, want 0 or more", n)
		}
		*v.dst = n
	}
	for r, rb := range it.items(tagReferencedBeamSequence) {
		where := seqItem(tagReferencedBeamSequence, r)
		var b ReferencedBeam
		n, ok, err := rb.integer(tagReferencedBeamNumber)
		if err != nil {
			return g, fmt.Errorf("%s: %w", where, err)
		}
		if !ok {
			return g, fmt.Errorf("%s: %w", where, missing(tagReferencedBeamNumber, "type 1"))
		}
		b.BeamNumber = n
		if b.Meterset, err = rb.optDecimal(tagBeamMeterset); err != nil {
			return g, fmt.Errorf("%s: %w", where, err)
		}
		if b.Meterset != nil && *b.Meterset < 0 {
			return g, fmt.Errorf("%s: %w", where, invalid(tagBeamMeterset, "is %g, want 0 or more", *b.Meterset))
		}
		if b.DoseGy, err = rb.optDecimal(tagBeamDose); err != nil {
			return g, fmt.Errorf("%s: %w", where, err)
		}
		g.Beams = append(g.Beams, b)
	}
	return g, nil
}
