package dicomio

import (
	"fmt"
	"time"

	"voxgamma/structure"
)

// WriteStructureSet writes set as an RT Structure Set file (PS3.3 A.19) at
// path, atomically: the Structure Set module with its
// ReferencedFrameOfReferenceSequence and StructureSetROISequence, the ROI
// Contour module (ROIContourSequence with each ROI's display colour and
// ContourSequence) and the RT ROI Observations module (RTROIInterpretedType
// of each ROI). ids supply the Patient and General Study attributes and the
// frame of reference; the set's own FrameOfReferenceUID, when not empty,
// must agree with them, and ROIs without one get it. The file is explicit
// VR little endian unless a value (a long contour) is too long for that
// encoding's 16-bit lengths; it is then implicit VR little endian.
//
// It returns a copy of set as written: identifiers, frame of reference and
// new SOP instance and series UIDs filled in.
func WriteStructureSet(path string, set *structure.Set, ids Identifiers) (*structure.Set, error) {
	out, b, err := buildStructureSet(set, ids)
	if err != nil {
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	ts := tsExplicitLE
	if b.long {
		ts = tsImplicitLE
	}
	if err := writeDataset(path, RTStructureSetStorage, out.SOPInstanceUID, ts, b); err != nil {
		return nil, err
	}
	return out, nil
}

func buildStructureSet(set *structure.Set, ids Identifiers) (*structure.Set, *builder, error) {
	if err := checkIdentifiers(ids); err != nil {
		return nil, nil, err
	}
	if set.FrameOfReferenceUID != "" && set.FrameOfReferenceUID != ids.FrameOfReferenceUID {
		return nil, nil, fmt.Errorf("the structure set's frame of reference %s differs from the identifiers' %s", set.FrameOfReferenceUID, ids.FrameOfReferenceUID)
	}
	label := set.Label
	if label == "" {
		label = "VOXGAMMA"
	}
	if err := checkLen("StructureSetLabel", label, 16); err != nil {
		return nil, nil, err
	}
	out := &structure.Set{
		FrameOfReferenceUID: ids.FrameOfReferenceUID,
		Label:               label,
		SOPInstanceUID:      NewUID(),
		PatientID:           ids.PatientID,
		PatientName:         ids.PatientName,
		StudyInstanceUID:    ids.StudyInstanceUID,
		SeriesInstanceUID:   NewUID(),
		ROIs:                make([]structure.ROI, len(set.ROIs)),
	}
	now := time.Now()
	b := &builder{}
	b.addCommon(RTStructureSetStorage, out.SOPInstanceUID, "RTSTRUCT", out.SeriesInstanceUID, label, 0, ids, now)
	// Frame of Reference module (C.7.4.1), which recent editions of the
	// RT Structure Set IOD include.
	b.add(tagFrameOfReferenceUID, ids.FrameOfReferenceUID)
	b.add(tagPositionReferenceInd, "")
	b.add(tagStructureSetLabel, label)
	b.add(tagStructureSetDate, now.Format("20060102"))
	b.add(tagStructureSetTime, now.Format("150405"))
	frame := &builder{}
	frame.add(tagFrameOfReferenceUID, ids.FrameOfReferenceUID)
	b.addSeq(tagReferencedFrameOfRefSeq, frame)

	seen := map[int]bool{}
	var roiItems, contourItems, obsItems []*builder
	for r, roi := range set.ROIs {
		what := roiLabel(roi.Number, roi.Name)
		if seen[roi.Number] {
			return nil, nil, fmt.Errorf("%s: ROI number %d used twice", what, roi.Number)
		}
		seen[roi.Number] = true
		if err := checkLen(what+": ROIName", roi.Name, 64); err != nil {
			return nil, nil, err
		}
		if err := checkLen(what+": RTROIInterpretedType", roi.InterpretedType, 16); err != nil {
			return nil, nil, err
		}
		w := roi
		if w.FrameOfReferenceUID == "" {
			w.FrameOfReferenceUID = ids.FrameOfReferenceUID
		}
		w.Contours = append([]structure.Contour(nil), roi.Contours...)
		out.ROIs[r] = w

		it := &builder{}
		it.addIS(tagROINumber, roi.Number)
		it.add(tagReferencedFrameOfRefUID, w.FrameOfReferenceUID)
		it.add(tagROIName, roi.Name)
		it.add(tagROIGenerationAlgorithm, "")
		roiItems = append(roiItems, it)

		rc := &builder{}
		if roi.HasColor {
			rc.addIS(tagROIDisplayColor, int(roi.Color[0]), int(roi.Color[1]), int(roi.Color[2]))
		}
		var cts []*builder
		for c, ct := range roi.Contours {
			if ct.Type == "" {
				return nil, nil, fmt.Errorf("%s, contour %d: no ContourGeometricType", what, c+1)
			}
			if len(ct.Points) == 0 {
				return nil, nil, fmt.Errorf("%s, contour %d: no points", what, c+1)
			}
			flat := make([]float64, 0, 3*len(ct.Points))
			for _, p := range ct.Points {
				flat = append(flat, p[0], p[1], p[2])
			}
			cb := &builder{}
			cb.add(tagContourGeometricType, string(ct.Type))
			cb.addIS(tagNumberOfContourPoints, len(ct.Points))
			cb.addIS(tagContourNumber, c+1)
			cb.addDS(tagContourData, flat...)
			if cb.err != nil {
				return nil, nil, fmt.Errorf("%s, contour %d: %w", what, c+1, cb.err)
			}
			cts = append(cts, cb)
		}
		if len(cts) > 0 {
			rc.addSeq(tagContourSequence, cts...)
		}
		rc.addIS(tagReferencedROINumber, roi.Number)
		contourItems = append(contourItems, rc)

		ob := &builder{}
		ob.addIS(tagObservationNumber, r+1)
		ob.addIS(tagReferencedROINumber, roi.Number)
		ob.add(tagRTROIInterpretedType, roi.InterpretedType)
		ob.add(tagROIInterpreter, "")
		obsItems = append(obsItems, ob)
	}
	b.addSeq(tagStructureSetROISequence, roiItems...)
	b.addSeq(tagROIContourSequence, contourItems...)
	b.addSeq(tagRTROIObservationsSeq, obsItems...)
	if b.err != nil {
		return nil, nil, b.err
	}
	return out, b, nil
}
