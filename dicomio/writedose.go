package dicomio

import (
	"encoding/binary"
	"fmt"
	"math"
	"time"

	"github.com/suyashkumar/dicom"

	"voxgamma/volume"
)

// WriteOptions say what the values of a grid written by [WriteDose] are and
// how to store them.
type WriteOptions struct {
	// Description says what the values are, in words a user reads in a
	// viewer: "gamma index 3%/2mm global, unitless", "dose difference
	// evaluated−reference, Gy". It becomes the SeriesDescription (0008,103E)
	// and the DoseComment (3004,0006), so it must fit in 64 characters.
	Description string
	// DoseUnits (3004,0002): GY for doses and dose differences, RELATIVE for
	// unitless maps such as gamma.
	DoseUnits string
	// DoseType (3004,0004): PHYSICAL or EFFECTIVE for doses; ERROR for maps
	// of disagreement between doses (differences, gamma).
	DoseType string
	// DoseSummationType (3004,000A). Empty means PLAN, or MapSummationType
	// for DoseType ERROR when the identifiers name no RT Plan. The
	// references it requires (PS3.3 C.8.8.3) must be given: an RT Plan in
	// the identifiers for PLAN, FRACTION and BEAM (and their sessions), a
	// fraction group for FRACTION and BEAM, a beam for BEAM; MULTI_PLAN,
	// BRACHY, CONTROL_POINT, RECORD and PLAN_OVERVIEW are not written.
	DoseSummationType string
	// ReferencedFractionGroupNumber and ReferencedBeamNumber go under the
	// referenced plan (needed for FRACTION and BEAM doses); 0 omits them.
	ReferencedFractionGroupNumber, ReferencedBeamNumber int
	// Bits is BitsAllocated: 16 (the default when 0) or 32.
	Bits int
	// Signed stores two's complement values (PixelRepresentation 1). DICOM
	// allows it only with DoseType ERROR.
	Signed bool
	// NaNValue is written in place of NaN samples (points not evaluated):
	// RT Dose has no "no value" code. The default 0 makes them vanish from
	// colour washes; the count is reported in the returned DoseInfo's Notes.
	NaNValue float32
	// SeriesNumber (0020,0011); 1 when 0.
	SeriesNumber int
	// OmitDates leaves the instance creation and content dates and times
	// out (empty where the standard needs the attribute present), for
	// de-identified maps. The study date comes from the Identifiers.
	OmitDates bool
}

// GammaOptions returns the options for a gamma index map: unitless
// (DoseUnits RELATIVE), DoseType ERROR (the standard's term for a map of
// disagreement between doses, which gamma is), unsigned 16-bit, NaN (not
// evaluated) written as 0.
func GammaOptions(description string) WriteOptions {
	return WriteOptions{Description: description, DoseUnits: "RELATIVE", DoseType: "ERROR", Bits: 16}
}

// DifferenceOptions returns the options for a dose difference map in Gy:
// DoseType ERROR, signed 16-bit, NaN written as 0.
func DifferenceOptions(description string) WriteOptions {
	return WriteOptions{Description: description, DoseUnits: "GY", DoseType: "ERROR", Bits: 16, Signed: true}
}

// DoseOptions returns the options for a physical dose in Gy, unsigned
// 16-bit.
func DoseOptions(description string) WriteOptions {
	return WriteOptions{Description: description, DoseUnits: "GY", DoseType: "PHYSICAL", Bits: 16}
}

func (o *WriteOptions) check() error {
	if o.Description == "" {
		return fmt.Errorf("WriteOptions.Description is empty: say what the values are")
	}
	if err := checkLen("description", o.Description, 64); err != nil {
		return err
	}
	o.DoseUnits, o.DoseType, o.DoseSummationType = upper(o.DoseUnits), upper(o.DoseType), upper(o.DoseSummationType)
	if o.DoseUnits != "GY" && o.DoseUnits != "RELATIVE" {
		return fmt.Errorf("DoseUnits %q: want GY or RELATIVE", o.DoseUnits)
	}
	switch o.DoseType {
	case "PHYSICAL", "EFFECTIVE", "ERROR":
	default:
		return fmt.Errorf("DoseType %q: want PHYSICAL, EFFECTIVE or ERROR", o.DoseType)
	}
	if err := checkLen("DoseSummationType", o.DoseSummationType, 16); err != nil {
		return err
	}
	if o.Bits == 0 {
		o.Bits = 16
	}
	if o.Bits != 16 && o.Bits != 32 {
		return fmt.Errorf("Bits %d: want 16 or 32", o.Bits)
	}
	if o.Signed && o.DoseType != "ERROR" {
		return fmt.Errorf("signed values need DoseType ERROR (PS3.3 C.8.8.3.4), not %s", o.DoseType)
	}
	if v := o.NaNValue; math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
		return fmt.Errorf("NaNValue %g is not finite", v)
	}
	return nil
}

// WriteDose writes g as an RT Dose file (explicit VR little endian, with a
// file meta header) at path, atomically. ids supply the Patient, General
// Study and Frame of Reference attributes and the referenced plan (pass the
// reference dose's info.Identifiers so the file sits with it); the SOP
// instance and series get new UIDs.
//
// Values are stored as integers × DoseGridScaling, the scaling chosen so
// the largest magnitude takes the largest code (max|v|/65535 unsigned,
// /32767 signed, /4294967295 and /2147483647 for 32 bits): each value is
// written to within half a scaling step. NaN samples are written as
// opt.NaNValue; ±Inf samples and negative values with unsigned storage
// (beyond half a step) are errors.
//
// Geometry is written as read by [ReadDose]: ImagePositionPatient is the
// origin, ImageOrientationPatient the directions of index axes i and j,
// PixelSpacing [spacing along j, spacing along i] (1 for an axis with one
// sample), GridFrameOffsetVector relative (first 0) along row × column, with
// the grid's frame offsets kept as they are (non-uniform ones too; negated
// when axis k runs against row × column). A grid of one frame is written
// without the Multi-frame module and GridFrameOffsetVector. Non-uniform
// spacing along i or j cannot be written in RT Dose and is an error.
// Geometry values are written exactly when their shortest decimal form fits
// the 16 characters of a DICOM decimal string (as for any value with up to
// about 12 significant digits); longer ones are rounded to 16 characters.
//
// It returns the DoseInfo of the file written.
func WriteDose(path string, g *volume.Grid, ids Identifiers, opt WriteOptions) (*DoseInfo, error) {
	info, b, err := buildDose(path, g, ids, opt)
	if err != nil {
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	if err := writeDataset(path, RTDoseStorage, info.SOPInstanceUID, tsExplicitLE, b); err != nil {
		return nil, err
	}
	return info, nil
}

// buildDose checks the grid and options and builds the data set.
func buildDose(path string, g *volume.Grid, ids Identifiers, opt WriteOptions) (*DoseInfo, *builder, error) {
	if err := opt.check(); err != nil {
		return nil, nil, err
	}
	if err := checkIdentifiers(ids); err != nil {
		return nil, nil, err
	}
	if opt.DoseSummationType == "" {
		// PLAN for a dose of the plan named; a map without a plan gets
		// MapSummationType (see there).
		opt.DoseSummationType = "PLAN"
		if ids.ReferencedRTPlanUID == "" && opt.DoseType == "ERROR" {
			opt.DoseSummationType = MapSummationType
		}
	}
	if err := checkSummation(opt.DoseSummationType, ids, &opt); err != nil {
		return nil, nil, err
	}
	dims := g.Dims()
	if dims[0] > 65535 || dims[1] > 65535 {
		return nil, nil, fmt.Errorf("grid of %d×%d samples per frame: Rows and Columns are 16-bit (at most 65535)", dims[0], dims[1])
	}
	var ps [2]float64 // [Δrow (axis j), Δcolumn (axis i)]
	for a, slot := range [2]int{1, 0} {
		s, ok := g.Spacing(a)
		if !ok {
			return nil, nil, fmt.Errorf("index axis %c has non-uniform spacing, which RT Dose PixelSpacing (0028,0030) cannot express; resample the grid first", "ij"[a])
		}
		if s == 0 {
			s = 1 // one sample: any positive spacing describes it
		}
		ps[slot] = s
	}
	dir := g.Direction()
	row, col := dir[0], dir[1]
	normal := cross(row, col)
	sense := normal[0]*dir[2][0] + normal[1]*dir[2][1] + normal[2]*dir[2][2] // ±1
	gfov := make([]float64, dims[2])
	for k, o := range g.Offsets(2) {
		gfov[k] = sense * o
	}

	// Quantise.
	maxCode := map[[2]int]float64{{16, 0}: 65535, {16, 1}: 32767, {32, 0}: 4294967295, {32, 1}: 2147483647}[[2]int{opt.Bits, boolInt(opt.Signed)}]
	nan := 0
	peak := math.Abs(float64(opt.NaNValue))
	for n, v := range g.Data {
		switch {
		case v != v:
			nan++
		case math.IsInf(float64(v), 0):
			i, j, k := g.IJK(n)
			return nil, nil, fmt.Errorf("voxel (%d,%d,%d) is %g: infinite values cannot be stored", i, j, k, v)
		default:
			peak = math.Max(peak, math.Abs(float64(v)))
		}
	}
	scaleStr, scale := "1", 1.0
	if peak > 0 {
		var err error
		if scaleStr, scale, err = formatDSAtLeast(peak / maxCode); err != nil {
			return nil, nil, fmt.Errorf("DoseGridScaling: %w", err)
		}
	}
	bpv := opt.Bits / 8
	pixels := make([]byte, len(g.Data)*bpv)
	for n, v := range g.Data {
		x := float64(v)
		if v != v {
			x = float64(opt.NaNValue)
		}
		c := math.Round(x / scale)
		if c > maxCode {
			c = maxCode
		}
		if c < -maxCode {
			c = -maxCode
		}
		if c < 0 && !opt.Signed {
			i, j, k := g.IJK(n)
			return nil, nil, fmt.Errorf("voxel (%d,%d,%d) is %g: negative values need signed storage (DifferenceOptions, DoseType ERROR)", i, j, k, v)
		}
		switch {
		case opt.Bits == 16 && opt.Signed:
			binary.LittleEndian.PutUint16(pixels[n*2:], uint16(int16(c)))
		case opt.Bits == 16:
			binary.LittleEndian.PutUint16(pixels[n*2:], uint16(c))
		case opt.Signed:
			binary.LittleEndian.PutUint32(pixels[n*4:], uint32(int32(c)))
		default:
			binary.LittleEndian.PutUint32(pixels[n*4:], uint32(c))
		}
	}

	now := time.Now()
	if opt.OmitDates {
		now = time.Time{}
	}
	info := &DoseInfo{
		Identifiers:           ids,
		Path:                  path,
		TransferSyntaxUID:     tsExplicitLE,
		SOPClassUID:           RTDoseStorage,
		SOPInstanceUID:        NewUID(),
		SeriesInstanceUID:     NewUID(),
		SeriesDescription:     opt.Description,
		Manufacturer:          writerManufacturer,
		ManufacturerModelName: writerManufacturer,
		DoseUnits:             opt.DoseUnits,
		DoseType:              opt.DoseType,
		DoseSummationType:     opt.DoseSummationType,
		DoseComment:           opt.Description,
		Rows:                  dims[1],
		Columns:               dims[0],
		NumberOfFrames:        dims[2],
		BitsAllocated:         opt.Bits,
		BitsStored:            opt.Bits,
		PixelRepresentation:   boolInt(opt.Signed),
		PixelSpacing:          ps,
	}
	if dims[2] > 1 {
		info.GridFrameOffsetVector = gfov
	}
	info.DoseGridScaling = scale
	info.ImagePositionPatient = g.Origin()
	copy(info.ImageOrientationPatient[:3], row[:])
	copy(info.ImageOrientationPatient[3:], col[:])
	if nan > 0 {
		info.Notes = append(info.Notes, fmt.Sprintf("%d NaN samples (not evaluated) written as %g", nan, opt.NaNValue))
	}

	b := &builder{}
	b.addCommon(RTDoseStorage, info.SOPInstanceUID, "RTDOSE", info.SeriesInstanceUID, opt.Description, opt.SeriesNumber, ids, now)
	if now.IsZero() {
		// Type 2: present, empty.
		b.add(tagContentDate, "")
		b.add(tagContentTime, "")
	} else {
		b.add(tagContentDate, now.Format("20060102"))
		b.add(tagContentTime, now.Format("150405"))
	}
	// Image Plane (C.7.6.2).
	if s, ok := g.Spacing(2); ok && s > 0 {
		b.addDS(tagSliceThickness, s)
	} else {
		b.add(tagSliceThickness, "")
	}
	b.addDS(tagImagePositionPatient, info.ImagePositionPatient[:]...)
	b.addDS(tagImageOrientationPatient, info.ImageOrientationPatient[:]...)
	b.addDS(tagPixelSpacing, ps[:]...)
	// Frame of Reference (C.7.4.1).
	b.add(tagFrameOfReferenceUID, ids.FrameOfReferenceUID)
	b.add(tagPositionReferenceInd, "")
	// Image Pixel (C.7.6.3), Multi-frame (C.7.6.6), RT Dose (C.8.8.3).
	b.add(tagSamplesPerPixel, 1)
	b.add(tagPhotometric, "MONOCHROME2")
	if dims[2] > 1 {
		// Multi-frame module; a single frame is a plain image, without it
		// (GridFrameOffsetVector has VM 2-n).
		b.addIS(tagNumberOfFrames, dims[2])
		b.add(tagFrameIncrementPointer, []int{int(tagGridFrameOffsetVector.Group), int(tagGridFrameOffsetVector.Element)})
	}
	b.add(tagRows, dims[1])
	b.add(tagColumns, dims[0])
	b.add(tagBitsAllocated, opt.Bits)
	b.add(tagBitsStored, opt.Bits)
	b.add(tagHighBit, opt.Bits-1)
	b.add(tagPixelRepresentation, boolInt(opt.Signed))
	b.add(tagDoseUnits, opt.DoseUnits)
	b.add(tagDoseType, opt.DoseType)
	b.add(tagDoseComment, opt.Description)
	b.add(tagDoseSummationType, opt.DoseSummationType)
	if dims[2] > 1 {
		b.addDS(tagGridFrameOffsetVector, gfov...)
	}
	b.add(tagDoseGridScaling, scaleStr)
	if needsPlan[opt.DoseSummationType] {
		plan := &builder{}
		plan.add(tagReferencedSOPClassUID, RTPlanStorage)
		plan.add(tagReferencedSOPInstanceUID, ids.ReferencedRTPlanUID)
		if opt.ReferencedFractionGroupNumber > 0 {
			fg := &builder{}
			fg.addIS(tagReferencedFractionGroupN, opt.ReferencedFractionGroupNumber)
			if opt.ReferencedBeamNumber > 0 {
				beam := &builder{}
				beam.addIS(tagReferencedBeamNumber, opt.ReferencedBeamNumber)
				fg.addSeq(tagReferencedBeamSequence, beam)
			}
			plan.addSeq(tagReferencedFractionGroupS, fg)
		}
		b.addSeq(tagReferencedRTPlanSequence, plan)
		info.ReferencedFractionGroupNumber = opt.ReferencedFractionGroupNumber
		info.ReferencedBeamNumber = opt.ReferencedBeamNumber
		if opt.ReferencedFractionGroupNumber > 0 && opt.ReferencedBeamNumber > 0 {
			info.ReferencedBeamNumbers = []int{opt.ReferencedBeamNumber}
		}
	} else {
		// Not present otherwise (PS3.3 C.8.8.3 as dciodvfy checks it).
		info.ReferencedRTPlanUID = ""
		if ids.ReferencedRTPlanUID != "" {
			info.Notes = append(info.Notes, fmt.Sprintf("written without %s: DoseSummationType %s does not take one", tagString(tagReferencedRTPlanSequence), opt.DoseSummationType))
		}
	}
	b.add(tagPixelData, dicom.PixelDataInfo{IntentionallyUnprocessed: true, UnprocessedValueData: pixels})
	if b.err != nil {
		return nil, nil, b.err
	}
	if b.long {
		return nil, nil, fmt.Errorf("a value is longer than explicit VR allows (65534 bytes): too many frames for %s?", tagString(tagGridFrameOffsetVector))
	}
	return info, b, nil
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}
