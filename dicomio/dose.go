package dicomio

import (
	"encoding/binary"
	"fmt"
	"math"
	"strings"

	"github.com/suyashkumar/dicom/pkg/tag"

	"voxgamma/volume"
)

// SOP class UIDs (DICOM PS3.4 annex B, PS3.6 annex A).
const (
	// RTDoseStorage is the SOP class of RT Dose files.
	RTDoseStorage = "1.2.840.10008.5.1.4.1.1.481.2"
	// RTStructureSetStorage is the SOP class of RT Structure Set files.
	RTStructureSetStorage = "1.2.840.10008.5.1.4.1.1.481.3"
	// RTPlanStorage is the SOP class of RT Plan files, which doses reference.
	RTPlanStorage = "1.2.840.10008.5.1.4.1.1.481.5"
)

// Identifiers are the attributes that tie the files of one patient, study
// and coordinate system together: the Patient module (PS3.3 C.7.1.1), the
// General Study module (C.7.2.1), the Frame of Reference module (C.7.4.1)
// and the plan the doses belong to.
type Identifiers struct {
	// PatientName (0010,0010), PatientID (0010,0020), PatientBirthDate
	// (0010,0030) and PatientSex (0010,0040), as written.
	PatientName, PatientID, PatientBirthDate, PatientSex string
	// StudyInstanceUID (0020,000D), StudyID (0020,0010), StudyDate
	// (0008,0020) and StudyTime (0008,0030).
	StudyInstanceUID, StudyID, StudyDate, StudyTime string
	// AccessionNumber (0008,0050) and ReferringPhysicianName (0008,0090).
	AccessionNumber, ReferringPhysicianName string
	// FrameOfReferenceUID (0020,0052): the patient coordinate system.
	FrameOfReferenceUID string
	// ReferencedRTPlanUID is the ReferencedSOPInstanceUID (0008,1155) of the
	// first item of ReferencedRTPlanSequence (300C,0002): the plan the dose
	// was computed for. Empty when the file names none.
	ReferencedRTPlanUID string
	// DeidentificationMethod, when not empty, is written as
	// DeidentificationMethod (0012,0063) with PatientIdentityRemoved
	// (0012,0062) YES (Patient module, PS3.3 C.7.1.1): the file says it was
	// de-identified, and how. Files read leave it empty.
	DeidentificationMethod string
}

// DoseInfo is what an RT Dose file says about its dose grid besides the
// dose values: identifiers, dose attributes, encoding and the geometry tags
// as written. [ReadDose] and [ReadDoseInfo] fill it; [WriteDose] returns the
// one it wrote.
type DoseInfo struct {
	Identifiers
	// Path is the file the information was read from or written to.
	Path string
	// TransferSyntaxUID of the data set (inferred for files without file
	// meta header).
	TransferSyntaxUID string
	// SOPClassUID (0008,0016) and SOPInstanceUID (0008,0018).
	SOPClassUID, SOPInstanceUID string
	// SeriesInstanceUID (0020,000E) and SeriesDescription (0008,103E).
	SeriesInstanceUID, SeriesDescription string
	// Manufacturer (0008,0070) and ManufacturerModelName (0008,1090).
	Manufacturer, ManufacturerModelName string
	// DoseUnits (3004,0002): GY or RELATIVE.
	DoseUnits string
	// DoseType (3004,0004): PHYSICAL, EFFECTIVE or ERROR.
	DoseType string
	// DoseSummationType (3004,000A): PLAN, MULTI_PLAN, FRACTION, BEAM, ...
	DoseSummationType string
	// DoseComment (3004,0006).
	DoseComment string
	// ReferencedFractionGroupNumber (300C,0022) and ReferencedBeamNumber
	// (300C,0006) under the referenced plan; 0 when absent.
	ReferencedFractionGroupNumber, ReferencedBeamNumber int
	// ReferencedBeamNumbers lists the ReferencedBeamNumber of every item of
	// the fraction group's ReferencedBeamSequence (300C,0004), in file
	// order: a BEAM dose is of "one or more Beams" (PS3.3 C.8.8.3).
	// ReferencedBeamNumber is the first of them.
	ReferencedBeamNumbers []int
	// SummedFrom lists the files of a dose made by summing several (see
	// [DoseSet]), in the order summed; nil for a dose read from one file.
	SummedFrom []string
	// Rows (0028,0010), Columns (0028,0011) and NumberOfFrames (0028,0008;
	// 1 when absent).
	Rows, Columns, NumberOfFrames int
	// BitsAllocated (0028,0100), BitsStored (0028,0101) and
	// PixelRepresentation (0028,0103: 0 unsigned, 1 two's complement).
	BitsAllocated, BitsStored, PixelRepresentation int
	// DoseGridScaling (3004,000E): dose = stored value × DoseGridScaling.
	DoseGridScaling float64
	// ImagePositionPatient (0020,0032), ImageOrientationPatient (0020,0037)
	// and PixelSpacing (0028,0030, [Δrow, Δcolumn] = [Δy, Δx]) as written.
	ImagePositionPatient    [3]float64
	ImageOrientationPatient [6]float64
	PixelSpacing            [2]float64
	// GridFrameOffsetVector (3004,000C) as written (nil when absent).
	GridFrameOffsetVector []float64
	// Notes are remarks about tolerated oddities of the file (inferred
	// encoding, defaults taken, values ignored), for the user's report.
	Notes []string
}

// Relative reports whether the dose is relative (DoseUnits RELATIVE) rather
// than absolute in Gy.
func (d *DoseInfo) Relative() bool { return d.DoseUnits == "RELATIVE" }

// UnitLabel returns "Gy" for absolute doses and "(relative)" otherwise, for
// messages.
func (d *DoseInfo) UnitLabel() string {
	if d.Relative() {
		return "(relative)"
	}
	return "Gy"
}

// doseGeometry is the grid a header describes, ready for volume.New.
type doseGeometry struct {
	dims      [3]int
	origin    [3]float64
	direction [3][3]float64
	offsets   [3][]float64
	bytes     int64 // pixel data bytes the header claims
}

// ReadDose reads an RT Dose file (PS3.3 A.18, RT Dose module C.8.8.3) into a
// grid of doses in Gy (or relative doses when info.Relative()) and its
// metadata. See the package documentation for what is read and refused.
// Errors name the file and, when one is at fault, the tag.
func ReadDose(path string) (*volume.Grid, *DoseInfo, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.close()
	var g *volume.Grid
	var info *DoseInfo
	err = guard(func() error {
		var geo *doseGeometry
		var err error
		if info, geo, err = f.doseHeader(); err != nil {
			return err
		}
		g, err = f.decodeDose(info, geo)
		return err
	})
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return g, info, nil
}

// ReadDoseInfo reads and checks the header of an RT Dose file without
// decoding its dose values (only their length is checked).
func ReadDoseInfo(path string) (*DoseInfo, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.close()
	var info *DoseInfo
	err = guard(func() error {
		var err error
		info, _, err = f.doseHeader()
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return info, nil
}

// identifiers reads the patient, study and frame of reference identifiers.
func (d dataset) identifiers() Identifiers {
	id := Identifiers{
		PatientName:            d.str(tagPatientName),
		PatientID:              d.str(tagPatientID),
		PatientBirthDate:       d.str(tagPatientBirthDate),
		PatientSex:             d.str(tagPatientSex),
		StudyInstanceUID:       d.str(tagStudyInstanceUID),
		StudyID:                d.str(tagStudyID),
		StudyDate:              d.str(tagStudyDate),
		StudyTime:              d.str(tagStudyTime),
		AccessionNumber:        d.str(tagAccessionNumber),
		ReferringPhysicianName: d.str(tagReferringPhysicianName),
		FrameOfReferenceUID:    d.str(tagFrameOfReferenceUID),
	}
	if plans := d.items(tagReferencedRTPlanSequence); len(plans) > 0 {
		id.ReferencedRTPlanUID = plans[0].str(tagReferencedSOPInstanceUID)
	}
	return id
}

// modality checks the Modality (0008,0060).
func (d dataset) modality(want string) error {
	if m := d.str(tagModality); m != want {
		return &ModalityError{Got: m, Want: want}
	}
	return nil
}

// doseHeader reads and checks everything but the dose values.
func (f *file) doseHeader() (*DoseInfo, *doseGeometry, error) {
	d := f.ds
	if err := d.modality("RTDOSE"); err != nil {
		return nil, nil, err
	}
	info := &DoseInfo{
		Identifiers:           d.identifiers(),
		Path:                  f.path,
		TransferSyntaxUID:     f.transferSyntax,
		SOPClassUID:           d.str(tagSOPClassUID),
		SOPInstanceUID:        d.str(tagSOPInstanceUID),
		SeriesInstanceUID:     d.str(tagSeriesInstanceUID),
		SeriesDescription:     d.str(tagSeriesDescription),
		Manufacturer:          d.str(tagManufacturer),
		ManufacturerModelName: d.str(tagManufacturerModelName),
		DoseUnits:             strings.ToUpper(d.str(tagDoseUnits)),
		DoseType:              strings.ToUpper(d.str(tagDoseType)),
		DoseSummationType:     strings.ToUpper(d.str(tagDoseSummationType)),
		DoseComment:           d.str(tagDoseComment),
		Notes:                 append([]string(nil), f.notes...),
	}
	if plans := d.items(tagReferencedRTPlanSequence); len(plans) > 0 {
		if fg := plans[0].items(tagReferencedFractionGroupS); len(fg) > 0 {
			info.ReferencedFractionGroupNumber, _, _ = fg[0].integer(tagReferencedFractionGroupN)
			for _, b := range fg[0].items(tagReferencedBeamSequence) {
				if n, ok, _ := b.integer(tagReferencedBeamNumber); ok {
					info.ReferencedBeamNumbers = append(info.ReferencedBeamNumbers, n)
				}
			}
			if len(info.ReferencedBeamNumbers) > 0 {
				info.ReferencedBeamNumber = info.ReferencedBeamNumbers[0]
			}
		}
	}
	if info.SOPClassUID != "" && info.SOPClassUID != RTDoseStorage {
		info.Notes = append(info.Notes, fmt.Sprintf("%s is %s, not RT Dose Storage %s", tagString(tagSOPClassUID), info.SOPClassUID, RTDoseStorage))
	}
	switch info.DoseUnits {
	case "GY", "RELATIVE":
	case "":
		return nil, nil, missing(tagDoseUnits, "cannot tell Gy from relative dose")
	default:
		return nil, nil, invalid(tagDoseUnits, "is %s, want GY or RELATIVE", info.DoseUnits)
	}
	switch info.DoseType {
	case "PHYSICAL", "EFFECTIVE", "ERROR":
	case "":
		info.Notes = append(info.Notes, tagString(tagDoseType)+" missing: negative doses will be refused")
	default:
		info.Notes = append(info.Notes, fmt.Sprintf("%s is %s, not one of PHYSICAL, EFFECTIVE, ERROR", tagString(tagDoseType), info.DoseType))
	}
	if info.DoseSummationType == "" {
		info.Notes = append(info.Notes, tagString(tagDoseSummationType)+" missing")
	}
	if err := f.pixelModule(info); err != nil {
		return nil, nil, err
	}
	scale, ok, err := d.decimals(tagDoseGridScaling)
	switch {
	case err != nil:
		return nil, nil, err
	case !ok:
		return nil, nil, missing(tagDoseGridScaling, "needed to turn stored values into dose")
	case len(scale) != 1:
		return nil, nil, invalid(tagDoseGridScaling, "has %d values, want 1", len(scale))
	case !(scale[0] > 0) || math.IsInf(scale[0], 0):
		return nil, nil, invalid(tagDoseGridScaling, "is %g, want a positive finite number", scale[0])
	}
	info.DoseGridScaling = scale[0]
	if err := f.otherScalings(info); err != nil {
		return nil, nil, err
	}
	// The size claimed is checked against the file before anything else
	// is built from it.
	need, err := f.checkPixelLength(info)
	if err != nil {
		return nil, nil, err
	}
	geo, err := f.doseGeometry(info)
	if err != nil {
		return nil, nil, err
	}
	geo.bytes = need
	return info, geo, nil
}

// otherScalings checks the attributes that would turn stored values into
// something other than stored value × DoseGridScaling. The RT Dose IOD
// (PS3.3 A.18.3) has no Modality LUT module: DoseGridScaling (C.8.8.3) alone
// scales the values. A file that also carries a RescaleSlope (0028,1053) /
// RescaleIntercept (0028,1052), a ModalityLUTSequence (0028,3000) or a
// RealWorldValueMappingSequence (0040,9096) says two things about its
// values; readers differ in which they apply (a generic image reader
// applies the rescale, an RT reader DoseGridScaling), so:
//
//   - an identity (slope 1, intercept 0) changes nothing: a note;
//   - a slope equal to DoseGridScaling with intercept 0 (the same scaling
//     written twice, for generic viewers) is applied once: a note;
//   - anything else, and any Modality LUT, is refused: the dose cannot be
//     told, and applying one and ignoring the other could be wrong either
//     way.
func (f *file) otherScalings(info *DoseInfo) error {
	d := f.ds
	scale := info.DoseGridScaling
	same := func(a, b float64) bool { return math.Abs(a-b) <= 1e-9*math.Max(math.Abs(a), math.Abs(b)) }
	check := func(slopeTag, interceptTag tag.Tag, slopeV, interceptV []float64, slopeOK, interceptOK bool, where string) error {
		slope, intercept := 1.0, 0.0
		if slopeOK {
			if len(slopeV) != 1 || math.IsNaN(slopeV[0]) || math.IsInf(slopeV[0], 0) {
				return invalid(slopeTag, "%s%v: want one finite number", where, slopeV)
			}
			slope = slopeV[0]
		}
		if interceptOK {
			if len(interceptV) != 1 || math.IsNaN(interceptV[0]) || math.IsInf(interceptV[0], 0) {
				return invalid(interceptTag, "%s%v: want one finite number", where, interceptV)
			}
			intercept = interceptV[0]
		}
		switch {
		case !slopeOK && !interceptOK:
		case slope == 1 && intercept == 0:
			info.Notes = append(info.Notes, fmt.Sprintf("%s%s 1 and %s 0: an identity, no effect on the doses", where, tagString(slopeTag), tagString(interceptTag)))
		case same(slope, scale) && intercept == 0:
			info.Notes = append(info.Notes, fmt.Sprintf("%s%s %g equals %s: the same scaling written twice, applied once",
				where, tagString(slopeTag), slope, tagString(tagDoseGridScaling)))
		default:
			return unsupportedf("%s%s %g and %s %g in an RT Dose whose %s is %g: the RT Dose IOD scales stored values by %s alone (PS3.3 C.8.8.3), "+
				"and a second scaling that disagrees leaves the dose ambiguous (stored × %g + %g, or stored × %g?); refusing rather than guessing",
				where, tagString(slopeTag), slope, tagString(interceptTag), intercept, tagString(tagDoseGridScaling), scale, tagString(tagDoseGridScaling),
				slope, intercept, scale)
		}
		return nil
	}
	slopeV, slopeOK, err := d.decimals(tagRescaleSlope)
	if err != nil {
		return err
	}
	interceptV, interceptOK, err := d.decimals(tagRescaleIntercept)
	if err != nil {
		return err
	}
	if err := check(tagRescaleSlope, tagRescaleIntercept, slopeV, interceptV, slopeOK, interceptOK, ""); err != nil {
		return err
	}
	if d.find(tagModalityLUTSequence) != nil {
		return unsupportedf("%s present in an RT Dose: a lookup table from stored values to output values, which the RT Dose IOD does not have (PS3.3 A.18.3; its doses are stored value × %s); refusing rather than ignoring it",
			tagString(tagModalityLUTSequence), tagString(tagDoseGridScaling))
	}
	for n, it := range d.items(tagRWVMSequence) {
		sv, sok, err := it.numbers(tagRWVSlope)
		if err != nil {
			return fmt.Errorf("%s item %d: %w", tagString(tagRWVMSequence), n+1, err)
		}
		iv, iok, err := it.numbers(tagRWVIntercept)
		if err != nil {
			return fmt.Errorf("%s item %d: %w", tagString(tagRWVMSequence), n+1, err)
		}
		if err := check(tagRWVSlope, tagRWVIntercept, sv, iv, sok, iok, fmt.Sprintf("%s item %d: ", tagString(tagRWVMSequence), n+1)); err != nil {
			return err
		}
	}
	return nil
}

// pixelModule reads the Image Pixel and Multi-frame attributes.
func (f *file) pixelModule(info *DoseInfo) error {
	d := f.ds
	spp, ok, err := d.integer(tagSamplesPerPixel)
	if err != nil {
		return err
	}
	if !ok {
		info.Notes = append(info.Notes, tagString(tagSamplesPerPixel)+" missing: 1 assumed")
	} else if spp != 1 {
		return invalid(tagSamplesPerPixel, "is %d, want 1 (dose grids are monochrome)", spp)
	}
	if pi := d.str(tagPhotometric); pi != "" && pi != "MONOCHROME2" {
		info.Notes = append(info.Notes, fmt.Sprintf("%s is %s, not MONOCHROME2", tagString(tagPhotometric), pi))
	}
	rows, ok, err := d.integer(tagRows)
	if err != nil {
		return err
	}
	if !ok {
		return missing(tagRows, "")
	}
	cols, ok, err := d.integer(tagColumns)
	if err != nil {
		return err
	}
	if !ok {
		return missing(tagColumns, "")
	}
	if rows < 1 {
		return invalid(tagRows, "is %d, want at least 1", rows)
	}
	if cols < 1 {
		return invalid(tagColumns, "is %d, want at least 1", cols)
	}
	frames, ok, err := d.integer(tagNumberOfFrames)
	if err != nil {
		return err
	}
	if !ok {
		frames = 1
		info.Notes = append(info.Notes, tagString(tagNumberOfFrames)+" absent: single-frame dose grid")
	} else if frames < 1 {
		return invalid(tagNumberOfFrames, "is %d, want at least 1", frames)
	}
	info.Rows, info.Columns, info.NumberOfFrames = rows, cols, frames

	bits, ok, err := d.integer(tagBitsAllocated)
	if err != nil {
		return err
	}
	if !ok {
		return missing(tagBitsAllocated, "")
	}
	if bits != 16 && bits != 32 {
		return &contentError{kind: ErrUnsupported, msg: fmt.Sprintf("%s: is %d; RT Dose pixel data are 16 or 32 bits", tagString(tagBitsAllocated), bits)}
	}
	stored, ok, err := d.integer(tagBitsStored)
	if err != nil {
		return err
	}
	if !ok {
		stored = bits
	}
	if stored < 1 || stored > bits {
		return invalid(tagBitsStored, "is %d with %s %d", stored, tagString(tagBitsAllocated), bits)
	}
	if hb, ok, err := d.integer(tagHighBit); err != nil {
		return err
	} else if ok && hb != stored-1 {
		return invalid(tagHighBit, "is %d, want %s − 1 = %d", hb, tagString(tagBitsStored), stored-1)
	}
	rep, ok, err := d.integer(tagPixelRepresentation)
	if err != nil {
		return err
	}
	if !ok {
		return missing(tagPixelRepresentation, "cannot tell signed from unsigned values")
	}
	if rep != 0 && rep != 1 {
		return invalid(tagPixelRepresentation, "is %d, want 0 (unsigned) or 1 (signed)", rep)
	}
	if rep == 1 && info.DoseType != "ERROR" {
		info.Notes = append(info.Notes, fmt.Sprintf("%s is 1 (signed) but %s is %q: the standard allows signed values only for ERROR doses; negative values will be refused",
			tagString(tagPixelRepresentation), tagString(tagDoseType), info.DoseType))
	}
	info.BitsAllocated, info.BitsStored, info.PixelRepresentation = bits, stored, rep
	return nil
}

// axisAligned snaps a direction cosine vector to the patient axis it runs
// along; ok is false for oblique or non-unit vectors.
func axisAligned(v []float64) (out [3]float64, ok bool) {
	const tol = 1e-4 // as volume: "1.0000" and "-0.99999" pass, a real tilt does not
	count := 0
	for p := 0; p < 3; p++ {
		switch {
		case math.Abs(math.Abs(v[p])-1) <= tol:
			out[p] = math.Copysign(1, v[p])
			count++
		case math.Abs(v[p]) <= tol:
		default:
			return out, false
		}
	}
	return out, count == 1
}

func cross(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

// doseGeometry reads the Image Plane module and the GridFrameOffsetVector
// and turns them into the grid geometry.
func (f *file) doseGeometry(info *DoseInfo) (*doseGeometry, error) {
	d := f.ds
	ipp, ok, err := d.finiteDecimals(tagImagePositionPatient, 3)
	if err != nil {
		return nil, err
	}
	if !ok {
		return nil, missing(tagImagePositionPatient, "the grid cannot be placed")
	}
	iop, ok, err := d.finiteDecimals(tagImageOrientationPatient, 6)
	if err != nil {
		return nil, err
	}
	if !ok {
		return nil, missing(tagImageOrientationPatient, "the grid cannot be oriented")
	}
	ps, ok, err := d.decimals(tagPixelSpacing)
	if err != nil {
		return nil, err
	}
	if !ok {
		return nil, missing(tagPixelSpacing, "the grid spacing is unknown")
	}
	if len(ps) != 2 {
		return nil, invalid(tagPixelSpacing, "has %d values, want 2 ([row spacing, column spacing])", len(ps))
	}
	for i, s := range ps {
		if !(s > 0) || math.IsInf(s, 0) {
			return nil, invalid(tagPixelSpacing, "value %d is %g mm, want a positive finite spacing", i+1, s)
		}
	}
	copy(info.ImagePositionPatient[:], ipp)
	copy(info.ImageOrientationPatient[:], iop)
	copy(info.PixelSpacing[:], ps)

	row, okR := axisAligned(iop[0:3])
	col, okC := axisAligned(iop[3:6])
	if !okR || !okC {
		return nil, unsupportedf("%s: %v is oblique: only axis-aligned dose grids are supported (head-first or feet-first, supine or prone)", tagString(tagImageOrientationPatient), iop)
	}
	normal := cross(row, col)
	if normal == ([3]float64{}) {
		return nil, invalid(tagImageOrientationPatient, "%v: row and column directions are parallel", iop)
	}
	geo := &doseGeometry{
		dims:      [3]int{info.Columns, info.Rows, info.NumberOfFrames},
		direction: [3][3]float64{row, col, normal},
	}
	copy(geo.origin[:], ipp)
	// PixelSpacing is [Δrow, Δcolumn]: ps[1] is the step along a row (index
	// i, columns), ps[0] the step down a column (index j, rows).
	geo.offsets[0] = uniform(info.Columns, ps[1])
	geo.offsets[1] = uniform(info.Rows, ps[0])

	gfov, present, err := d.finiteDecimals(tagGridFrameOffsetVector, -1)
	if err != nil {
		return nil, err
	}
	info.GridFrameOffsetVector = gfov
	n := info.NumberOfFrames
	if n == 1 {
		geo.offsets[2] = []float64{0}
		if present && (len(gfov) != 1 || gfov[0] != 0 && gfov[0] != ipp[2]) {
			info.Notes = append(info.Notes, fmt.Sprintf("single-frame grid: %s (%d values) ignored; the frame lies at %s",
				tagString(tagGridFrameOffsetVector), len(gfov), tagString(tagImagePositionPatient)))
		}
		return geo, nil
	}
	if !present {
		return nil, missing(tagGridFrameOffsetVector, fmt.Sprintf("required for %d frames", n))
	}
	if len(gfov) != n {
		return nil, invalid(tagGridFrameOffsetVector, "has %d values but %s is %d", len(gfov), tagString(tagNumberOfFrames), n)
	}
	off := make([]float64, n)
	if gfov[0] == 0 {
		copy(off, gfov)
	} else {
		// Absolute form: the z coordinates of the frames (PS3.3 C.8.8.3.2).
		if math.Abs(normal[2]) != 1 {
			return nil, invalid(tagGridFrameOffsetVector, "starts at %g, so it holds absolute z positions, but the frame normal (row × column of %s) is %v, not along patient z",
				gfov[0], tagString(tagImageOrientationPatient), normal)
		}
		if math.Abs(gfov[0]-ipp[2]) > 1e-3 {
			return nil, invalid(tagGridFrameOffsetVector, "starts at z = %g mm (absolute form) but %s gives z = %g mm for the first frame",
				gfov[0], tagString(tagImagePositionPatient), ipp[2])
		}
		for k := range gfov {
			off[k] = (gfov[k] - gfov[0]) * normal[2]
		}
		info.Notes = append(info.Notes, tagString(tagGridFrameOffsetVector)+" holds absolute z positions: converted to offsets along the frame normal")
	}
	inc := off[1] > off[0]
	for k := 1; k < n; k++ {
		if (off[k] > off[k-1]) != inc || off[k] == off[k-1] {
			return nil, invalid(tagGridFrameOffsetVector, "not strictly monotonic at frame %d (%g then %g)", k, gfov[k-1], gfov[k])
		}
	}
	geo.offsets[2] = off
	return geo, nil
}

func uniform(n int, s float64) []float64 {
	o := make([]float64, n)
	for i := range o {
		o[i] = float64(i) * s
	}
	return o
}

// maxVoxels is the largest grid read (volume.New's limit).
const maxVoxels = math.MaxInt32

// checkPixelLength checks the pixel data against what the header claims and
// against the file size, before anything is allocated for the grid.
func (f *file) checkPixelLength(info *DoseInfo) (int64, error) {
	if !f.pixelFound {
		return 0, missing(tagPixelData, "the file holds no dose values")
	}
	if f.pixelEncapsulated {
		return 0, unsupportedf("%s is encapsulated (compressed) although the transfer syntax %s is uncompressed", tagString(tagPixelData), f.transferSyntax)
	}
	bpv := int64(info.BitsAllocated / 8)
	voxels := float64(info.Rows) * float64(info.Columns) * float64(info.NumberOfFrames)
	claim := fmt.Sprintf("%s × %s × %s = %d × %d × %d", tagString(tagRows), tagString(tagColumns), tagString(tagNumberOfFrames),
		info.Rows, info.Columns, info.NumberOfFrames)
	if voxels > maxVoxels || voxels*float64(bpv) > float64(f.size) {
		return 0, invalidf("%s voxels (%.0f bytes) cannot fit in the %d-byte file (%s holds %d bytes)", claim, voxels*float64(bpv), f.size, tagString(tagPixelData), f.pixelLen)
	}
	need := int64(voxels) * bpv
	if f.pixelLen != need {
		return 0, invalidf("%s voxels of %d bits need %d bytes but %s holds %d", claim, info.BitsAllocated, need, tagString(tagPixelData), f.pixelLen)
	}
	return need, nil
}

// decodeChunk is the size of the buffer the pixel data are read through.
const decodeChunk = 1 << 20

// decodeDose allocates the grid and decodes the stored values into doses.
func (f *file) decodeDose(info *DoseInfo, geo *doseGeometry) (*volume.Grid, error) {
	g, err := volume.New(geo.dims, geo.origin, geo.direction, geo.offsets)
	if err != nil {
		return nil, invalidf("dose grid geometry: %v", err)
	}
	bpv := info.BitsAllocated / 8
	signed := info.PixelRepresentation == 1
	shift := uint(info.BitsAllocated - info.BitsStored)
	mask := uint32(1)<<uint(info.BitsStored) - 1
	if info.BitsStored == 32 {
		mask = math.MaxUint32
	}
	scale := info.DoseGridScaling
	allowNegative := info.DoseType == "ERROR"
	buf := make([]byte, min(geo.bytes, decodeChunk))
	n := 0
	for pos := int64(0); pos < geo.bytes; {
		chunk := buf[:min(int64(len(buf)), geo.bytes-pos)]
		if _, err := f.f.ReadAt(chunk, f.pixelOff+pos); err != nil {
			return nil, invalid(tagPixelData, "reading the values: %v", err)
		}
		pos += int64(len(chunk))
		for b := 0; b+bpv <= len(chunk); b += bpv {
			var v float64
			if bpv == 2 {
				c := binary.LittleEndian.Uint16(chunk[b:])
				if signed {
					v = float64(int16(c<<shift) >> shift)
				} else {
					v = float64(uint32(c) & mask)
				}
			} else {
				c := binary.LittleEndian.Uint32(chunk[b:])
				if signed {
					v = float64(int32(c<<shift) >> shift)
				} else {
					v = float64(c & mask)
				}
			}
			x := float32(v * scale)
			if math.IsInf(float64(x), 0) || x != x {
				i, j, k := g.IJK(n)
				return nil, invalidf("voxel (%d,%d,%d): stored value %g × %s %g = %g is not a finite dose", i, j, k, v, tagString(tagDoseGridScaling), scale, x)
			}
			if x < 0 && !allowNegative {
				i, j, k := g.IJK(n)
				return nil, invalidf("voxel (%d,%d,%d) has dose %g but %s is %q: negative doses are allowed only for DoseType ERROR",
					i, j, k, x, tagString(tagDoseType), info.DoseType)
			}
			g.Data[n] = x
			n++
		}
	}
	return g, nil
}
