package dicomio

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"voxgamma/structure"
)

// ReadStructureSet reads an RT Structure Set file (PS3.3 A.19: Structure Set
// module C.8.8.5, ROI Contour module C.8.8.6, RT ROI Observations module
// C.8.8.8) into a structure set: every ROI of the StructureSetROISequence
// with its number, name, frame of reference, colour, RTROIInterpretedType
// and every contour (CLOSED_PLANAR, POINT, OPEN_PLANAR, ... kept as
// written). Files without a file meta header are read when their encoding
// is unambiguous. Errors name the file, the tag and, for contour data, the
// ROI and the contour.
func ReadStructureSet(path string) (*structure.Set, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.close()
	var set *structure.Set
	err = guard(func() error {
		var err error
		set, err = f.structureSet()
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	set.Path = path
	return set, nil
}

// roiLabel names an ROI in messages: `ROI 3 "PTV"`.
func roiLabel(number int, name string) string {
	if name == "" {
		return fmt.Sprintf("ROI %d", number)
	}
	return fmt.Sprintf("ROI %d %q", number, name)
}

func (f *file) structureSet() (*structure.Set, error) {
	d := f.ds
	if err := d.modality("RTSTRUCT"); err != nil {
		return nil, err
	}
	set := &structure.Set{
		Label:             d.str(tagStructureSetLabel),
		SOPInstanceUID:    d.str(tagSOPInstanceUID),
		PatientID:         d.str(tagPatientID),
		PatientName:       d.str(tagPatientName),
		StudyInstanceUID:  d.str(tagStudyInstanceUID),
		SeriesInstanceUID: d.str(tagSeriesInstanceUID),
	}
	if refs := d.items(tagReferencedFrameOfRefSeq); len(refs) > 0 {
		set.FrameOfReferenceUID = refs[0].str(tagFrameOfReferenceUID)
	}
	if d.find(tagStructureSetROISequence) == nil {
		return nil, missing(tagStructureSetROISequence, "the file defines no ROI")
	}
	index := map[int]int{}
	for n, it := range d.items(tagStructureSetROISequence) {
		num, ok, err := it.integer(tagROINumber)
		if err != nil {
			return nil, fmt.Errorf("%s item %d: %w", tagString(tagStructureSetROISequence), n+1, err)
		}
		if !ok {
			return nil, fmt.Errorf("%s item %d: %w", tagString(tagStructureSetROISequence), n+1, missing(tagROINumber, ""))
		}
		if prev, dup := index[num]; dup {
			return nil, invalid(tagROINumber, "%d is defined twice in %s (%q and %q)", num, tagString(tagStructureSetROISequence), set.ROIs[prev].Name, it.str(tagROIName))
		}
		index[num] = len(set.ROIs)
		set.ROIs = append(set.ROIs, structure.ROI{
			Number:              num,
			Name:                it.str(tagROIName),
			FrameOfReferenceUID: it.str(tagReferencedFrameOfRefUID),
		})
	}
	if set.FrameOfReferenceUID == "" && len(set.ROIs) > 0 {
		set.FrameOfReferenceUID = set.ROIs[0].FrameOfReferenceUID
	}
	for n, it := range d.items(tagROIContourSequence) {
		ref, ok, err := it.integer(tagReferencedROINumber)
		if err != nil {
			return nil, fmt.Errorf("%s item %d: %w", tagString(tagROIContourSequence), n+1, err)
		}
		if !ok {
			return nil, fmt.Errorf("%s item %d: %w", tagString(tagROIContourSequence), n+1, missing(tagReferencedROINumber, "the contours belong to no ROI"))
		}
		at, ok := index[ref]
		if !ok {
			return nil, invalid(tagReferencedROINumber, "%s item %d refers to ROI %d, which %s does not define",
				tagString(tagROIContourSequence), n+1, ref, tagString(tagStructureSetROISequence))
		}
		roi := &set.ROIs[at]
		label := roiLabel(roi.Number, roi.Name)
		if rgb, ok, err := it.integers(tagROIDisplayColor); err != nil {
			return nil, fmt.Errorf("%s: %w", label, err)
		} else if ok {
			if len(rgb) != 3 {
				return nil, fmt.Errorf("%s: %w", label, invalid(tagROIDisplayColor, "has %d values, want 3 (R, G, B)", len(rgb)))
			}
			for c, v := range rgb {
				if v < 0 || v > 255 {
					return nil, fmt.Errorf("%s: %w", label, invalid(tagROIDisplayColor, "component %d is %d, want 0-255", c+1, v))
				}
				roi.Color[c] = uint8(v)
			}
			roi.HasColor = true
		}
		for c, ct := range it.items(tagContourSequence) {
			contour, err := readContour(ct)
			if err != nil {
				num, ok, _ := ct.integer(tagContourNumber)
				which := fmt.Sprintf("contour %d (item %d of %s)", c+1, c+1, tagString(tagContourSequence))
				if ok {
					which = fmt.Sprintf("contour %d (ContourNumber %d)", c+1, num)
				}
				return nil, fmt.Errorf("%s, %s: %w", label, which, err)
			}
			roi.Contours = append(roi.Contours, contour)
		}
	}
	for _, it := range d.items(tagRTROIObservationsSeq) {
		ref, ok, err := it.integer(tagReferencedROINumber)
		if err != nil || !ok {
			continue // an observation about no ROI says nothing we use
		}
		if at, ok := index[ref]; ok {
			if t := it.str(tagRTROIInterpretedType); t != "" {
				set.ROIs[at].InterpretedType = t
			}
		}
	}
	return set, nil
}

// readContour reads one item of a ContourSequence.
func readContour(ct dataset) (structure.Contour, error) {
	c := structure.Contour{Type: structure.GeometricType(ct.str(tagContourGeometricType))}
	if c.Type == "" {
		return c, missing(tagContourGeometricType, "")
	}
	raw := ct.strs(tagContourData)
	if len(raw) == 0 {
		return c, missing(tagContourData, "the contour has no points")
	}
	if len(raw)%3 != 0 {
		return c, invalid(tagContourData, "has %d values, not a multiple of 3 (x, y, z triplets)", len(raw))
	}
	c.Points = make([][3]float64, len(raw)/3)
	for i, s := range raw {
		v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		if err != nil {
			return c, invalid(tagContourData, "value %d (%q) is not a decimal number", i+1, s)
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return c, invalid(tagContourData, "point %d has coordinate %g, want a finite number", i/3+1, v)
		}
		c.Points[i/3][i%3] = v
	}
	if np, ok, err := ct.integer(tagNumberOfContourPoints); err != nil {
		return c, err
	} else if ok && np != len(c.Points) {
		return c, invalid(tagNumberOfContourPoints, "is %d but %s holds %d points", np, tagString(tagContourData), len(c.Points))
	}
	return c, nil
}
