// Package structure holds the regions of interest (ROIs) of a radiotherapy
// structure set as plain data in patient coordinates, independent of the file
// format they were read from: what dicomio produces and what rasterisation
// and per-ROI statistics consume.
package structure

// GeometricType is the DICOM ContourGeometricType (3006,0042) of a contour.
type GeometricType string

// Contour geometric types defined by DICOM PS3.3 (ROI Contour Module).
const (
	ClosedPlanar  GeometricType = "CLOSED_PLANAR"
	OpenPlanar    GeometricType = "OPEN_PLANAR"
	OpenNonPlanar GeometricType = "OPEN_NONPLANAR"
	Point         GeometricType = "POINT"
)

// Contour is one contour of an ROI: a polygon (closed, the last point joined
// to the first), a polyline or a single point, in patient coordinates (mm).
type Contour struct {
	Type   GeometricType
	Points [][3]float64
}

// ROI is one region of interest with all its contours.
type ROI struct {
	// Number is the ROINumber (3006,0022), unique within the set.
	Number int
	// Name is the ROIName (3006,0026) as written.
	Name string
	// FrameOfReferenceUID is the ROI's ReferencedFrameOfReferenceUID (3006,0024).
	FrameOfReferenceUID string
	// InterpretedType is the RTROIInterpretedType (3006,00A4) as written
	// (PTV, CTV, GTV, ORGAN, AVOIDANCE, EXTERNAL, ...), empty when absent.
	InterpretedType string
	// Color is the ROIDisplayColor (3006,002A) as RGB; HasColor is false
	// when the file gives none.
	Color    [3]uint8
	HasColor bool
	// Contours are the ROI's contours in file order.
	Contours []Contour
}

// Set is a structure set: its ROIs and the identifiers that tie it to doses.
type Set struct {
	// Path is the file the set was read from; empty for a set made in code.
	Path string
	// FrameOfReferenceUID is the frame of reference the set's contours are in
	// (the first ReferencedFrameOfReference; ROIs may name their own).
	FrameOfReferenceUID string
	// Label is the StructureSetLabel (3006,0002).
	Label string
	// SOPInstanceUID identifies the structure set file.
	SOPInstanceUID string
	// PatientID and PatientName as written in the file.
	PatientID, PatientName string
	// StudyInstanceUID and SeriesInstanceUID as written in the file.
	StudyInstanceUID, SeriesInstanceUID string
	// ROIs in the order of the StructureSetROISequence.
	ROIs []ROI
}

// ByName returns the ROI with the given name and whether one exists.
func (s *Set) ByName(name string) (*ROI, bool) {
	for i := range s.ROIs {
		if s.ROIs[i].Name == name {
			return &s.ROIs[i], true
		}
	}
	return nil, false
}
