package dicomio

import (
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"voxgamma/internal/atomicfile"
)

// formatDS formats v as a DICOM Decimal String value (PS3.5 section 6.2: at
// most 16 characters): the shortest form that reads back as exactly v when
// it fits, else v rounded to as many significant digits as fit.
func formatDS(v float64) (string, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "", fmt.Errorf("%g cannot be written as a decimal string", v)
	}
	if v == 0 {
		return "0", nil // also turns -0 into 0
	}
	s := strconv.FormatFloat(v, 'g', -1, 64)
	for p := 16; len(s) > 16 && p >= 1; p-- {
		s = strconv.FormatFloat(v, 'g', p, 64)
	}
	if len(s) > 16 {
		return "", fmt.Errorf("%g does not fit in a 16-character decimal string", v)
	}
	return s, nil
}

// formatDSAtLeast formats v > 0 as a decimal string whose value is at least
// v, so a scale factor written this way never makes codes overflow.
func formatDSAtLeast(v float64) (string, float64, error) {
	w := v
	for bump := 1e-11; bump < 1e-2; bump *= 10 {
		s, err := formatDS(w)
		if err != nil {
			return "", 0, err
		}
		x, _ := strconv.ParseFloat(s, 64)
		if x >= v {
			return s, x, nil
		}
		w = v * (1 + bump) // rounded down: try a hair above
	}
	return "", 0, fmt.Errorf("cannot format %g as a decimal string not below it", v)
}

// formatDSList formats each value with formatDS.
func formatDSList(vs []float64) ([]string, error) {
	out := make([]string, len(vs))
	for i, v := range vs {
		s, err := formatDS(v)
		if err != nil {
			return nil, err
		}
		out[i] = s
	}
	return out, nil
}

// builder collects the elements of a data set for the library's writer.
// The first error sticks; elements are sorted by tag when built, as PS3.5
// section 7.1 requires.
type builder struct {
	elems []*dicom.Element
	err   error
	// long is set when a value is too long for the 16-bit length of its VR
	// in explicit VR (PS3.5 section 7.1.2).
	long    bool
	nonASCI bool
}

// add appends an element. v is a string, []string, int (binary: US),
// []int, []byte or a sequence ([][]*dicom.Element).
func (b *builder) add(t tag.Tag, v any) {
	if b.err != nil {
		return
	}
	switch x := v.(type) {
	case string:
		v = []string{x}
	case int:
		v = []int{x}
	}
	if s, ok := v.([]string); ok {
		n := len(s) - 1
		for _, x := range s {
			n += len(x)
			if !isASCII(x) {
				b.nonASCI = true
			}
		}
		if n > 0xFFFE {
			b.long = true
		}
	}
	e, err := dicom.NewElement(t, v)
	if err != nil {
		b.err = fmt.Errorf("building %s: %w", tagString(t), err)
		return
	}
	b.elems = append(b.elems, e)
}

// addDS appends a DS element.
func (b *builder) addDS(t tag.Tag, vs ...float64) {
	s, err := formatDSList(vs)
	if err != nil {
		if b.err == nil {
			b.err = fmt.Errorf("%s: %w", tagString(t), err)
		}
		return
	}
	b.add(t, s)
}

// addIS appends an IS element.
func (b *builder) addIS(t tag.Tag, vs ...int) {
	s := make([]string, len(vs))
	for i, v := range vs {
		s[i] = strconv.Itoa(v)
	}
	b.add(t, s)
}

// addSeq appends a sequence whose items are the given builders' elements.
func (b *builder) addSeq(t tag.Tag, items ...*builder) {
	seq := make([][]*dicom.Element, 0, len(items))
	for _, it := range items {
		if it.err != nil && b.err == nil {
			b.err = it.err
		}
		b.long = b.long || it.long
		b.nonASCI = b.nonASCI || it.nonASCI
		seq = append(seq, it.sorted())
	}
	b.add(t, seq)
}

func (b *builder) sorted() []*dicom.Element {
	sort.SliceStable(b.elems, func(i, j int) bool { return b.elems[i].Tag.Compare(b.elems[j].Tag) < 0 })
	return b.elems
}

func isASCII(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] >= utf8.RuneSelf {
			return false
		}
	}
	return true
}

// checkLen checks a string against the maximum length of its VR.
func checkLen(what string, s string, max int) error {
	if utf8.RuneCountInString(s) > max {
		return fmt.Errorf("%s %q is longer than the %d characters DICOM allows", what, s, max)
	}
	return nil
}

// addCommon appends the attributes every file written here shares: SOP
// Common (PS3.3 C.12.1), Patient (C.7.1.1), General Study (C.7.2.1), the
// series and equipment attributes of RT Series (C.8.8.1) and General
// Equipment (C.7.5.1).
//
// A zero now leaves the instance creation date and time out (de-identified
// files carry no dates).
func (b *builder) addCommon(sopClass, sopInstance, modality, seriesUID, seriesDescription string, seriesNumber int, id Identifiers, now time.Time) {
	if !now.IsZero() {
		b.add(tagInstanceCreationDate, now.Format("20060102"))
		b.add(tagInstanceCreationTime, now.Format("150405"))
	}
	b.add(tagSOPClassUID, sopClass)
	b.add(tagSOPInstanceUID, sopInstance)
	b.add(tagStudyDate, id.StudyDate)
	b.add(tagStudyTime, id.StudyTime)
	b.add(tagAccessionNumber, id.AccessionNumber)
	b.add(tagModality, modality)
	b.add(tagManufacturer, writerManufacturer)
	b.add(tagReferringPhysicianName, id.ReferringPhysicianName)
	if seriesDescription != "" {
		b.add(tagSeriesDescription, seriesDescription)
	}
	b.add(tagOperatorsName, "")
	b.add(tagManufacturerModelName, writerManufacturer)
	b.add(tagPatientName, id.PatientName)
	b.add(tagPatientID, id.PatientID)
	b.add(tagPatientBirthDate, id.PatientBirthDate)
	b.add(tagPatientSex, id.PatientSex)
	if id.DeidentificationMethod != "" {
		b.add(tagPatientIdentityRemoved, "YES")
		b.add(tagDeidentificationMethod, id.DeidentificationMethod)
	}
	b.add(tagSoftwareVersions, "voxgamma")
	b.add(tagStudyInstanceUID, id.StudyInstanceUID)
	b.add(tagSeriesInstanceUID, seriesUID)
	b.add(tagStudyID, id.StudyID)
	if seriesNumber <= 0 {
		seriesNumber = 1
	}
	b.addIS(tagSeriesNumber, seriesNumber)
	b.addIS(tagInstanceNumber, 1)
}

// checkIdentifiers checks what the written files need from the identifiers.
func checkIdentifiers(id Identifiers) error {
	if id.StudyInstanceUID == "" {
		return fmt.Errorf("identifiers: StudyInstanceUID is empty (type 1 in the General Study module)")
	}
	if id.FrameOfReferenceUID == "" {
		return fmt.Errorf("identifiers: FrameOfReferenceUID is empty: the written file would not be placed in any patient coordinate system")
	}
	for _, u := range []string{id.StudyInstanceUID, id.FrameOfReferenceUID, id.ReferencedRTPlanUID} {
		if err := checkLen("UID", u, 64); err != nil {
			return err
		}
	}
	if err := checkLen("PatientID", id.PatientID, 64); err != nil {
		return err
	}
	if err := checkLen("StudyID", id.StudyID, 16); err != nil {
		return err
	}
	return nil
}

// writeDataset writes the elements with a file meta header (PS3.10 section
// 7.1) in the given transfer syntax, atomically.
func writeDataset(path, sopClass, sopInstance, ts string, b *builder) (err error) {
	if b.err != nil {
		return fmt.Errorf("writing %s: %w", path, b.err)
	}
	if b.nonASCI {
		// Strings are Go (UTF-8) strings: say so (PS3.3 C.12.1.1.2).
		b.add(tagSpecificCharacterSet, "ISO_IR 192")
	}
	b.add(tagFileMetaVersion, []byte{0, 1})
	b.add(tagMediaStorageSOPClass, sopClass)
	b.add(tagMediaStorageSOPInstance, sopInstance)
	b.add(tagTransferSyntaxUID, ts)
	b.add(tagImplementationClassUID, ImplementationClassUID)
	b.add(tagImplementationVersion, ImplementationVersionName)
	if b.err != nil {
		return fmt.Errorf("writing %s: %w", path, b.err)
	}
	ds := dicom.Dataset{Elements: b.sorted()}
	return atomicfile.Write(path, func(w io.Writer) (err error) {
		defer func() {
			if r := recover(); r != nil {
				err = fmt.Errorf("encoding failed: %v", r)
			}
		}()
		return dicom.Write(w, ds)
	})
}

// upper returns s in upper case with surrounding spaces removed.
func upper(s string) string { return strings.ToUpper(strings.TrimSpace(s)) }
