// Package batchtest writes small invented radiotherapy cases (an RT Dose
// reference, an RT Dose evaluated dose and an RT Structure Set) for the
// tests of the batch and watch commands. Everything in them is made up: a
// Gaussian dose cloud on a 2 mm grid, a spherical target and a spherical
// organ at risk, a phantom patient (dicomio.DemoPatientName). No patient
// data is involved.
package batchtest

import (
	"fmt"
	"os"
	"path/filepath"

	"voxgamma/dicomio"
	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

// Spec describes one invented case. The zero value is a small case whose
// evaluated dose equals the reference: it passes any protocol.
type Spec struct {
	// Dims of both grids; zero means 24×24×16 (2 mm voxels).
	Dims [3]int
	// Scale multiplies the evaluated dose; zero means 1. The reference is
	// a Gaussian of peak 2 Gy, so with global 3 % criteria a scale of 0.85
	// fails near the peak (a uniform scale k in a flat region gives
	// Γ = |k−1|·D/ΔD, domain NOTES "closed form").
	Scale float64
	// Peak is the reference maximum in Gy; zero means 2.
	Peak float64
	// EvaluatedFrame puts the evaluated dose in a new frame of reference
	// of its own (a broken case) when true.
	EvaluatedFrame bool
	// NoStructures leaves the structure set out.
	NoStructures bool
	// Reference, Evaluated and Structures are the file names written in
	// the case folder; empty means reference.dcm, evaluated.dcm and
	// structures.dcm.
	Reference, Evaluated, Structures string
	// PatientID is the phantom's ID; empty means dicomio.DemoPatientID.
	PatientID string
	// Sigma is the width (standard deviation, mm) of the Gaussian dose
	// cloud; zero means 9 mm. A wider cloud puts more of the grid above
	// the low-dose threshold, and so makes the case slower to compute.
	Sigma float64
	// PatientName, PatientBirthDate and StudyDate replace the phantom's
	// (dicomio.DemoPatientName, none, 20260101) when not empty.
	PatientName, PatientBirthDate, StudyDate string
	// Description becomes both doses' SeriesDescription and DoseComment
	// (at most 64 characters) when not empty; Label the structure set's
	// StructureSetLabel (at most 16).
	Description, Label string
	// ROIs replace the structure set's ROIs (a target PTV_A and an organ
	// at risk Organ_B) when not nil: spheres of radius 4 mm along x, 8 mm
	// apart, centred on the dose cloud (at most 5).
	ROIs []ROI
}

// ROI names an ROI of [Spec.ROIs] and gives its RTROIInterpretedType.
type ROI struct {
	Name, InterpretedType string
}

// Files are the paths of a written case ("" for a file left out).
type Files struct {
	Dir, Reference, Evaluated, Structures string
	// FrameOfReferenceUID of the reference dose and the structures.
	FrameOfReferenceUID string
}

// Write writes the case described by spec into dir (created if needed).
func Write(dir string, spec Spec) (*Files, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	dims := spec.Dims
	if dims == [3]int{} {
		dims = [3]int{24, 24, 16}
	}
	scale, peak := spec.Scale, spec.Peak
	if scale == 0 {
		scale = 1
	}
	if peak == 0 {
		peak = 2
	}
	name := func(n, def string) string {
		if n == "" {
			n = def
		}
		return filepath.Join(dir, n)
	}
	f := &Files{Dir: dir, Reference: name(spec.Reference, "reference.dcm"), Evaluated: name(spec.Evaluated, "evaluated.dcm")}
	patient := dicomio.DemoPatientName
	if spec.PatientName != "" {
		patient = spec.PatientName
	}
	ids := dicomio.PhantomIdentifiers(patient, spec.PatientID)
	ids.StudyDate, ids.StudyTime = "20260101", "090000"
	if spec.StudyDate != "" {
		ids.StudyDate = spec.StudyDate
	}
	ids.PatientBirthDate = spec.PatientBirthDate
	f.FrameOfReferenceUID = ids.FrameOfReferenceUID

	origin := [3]float64{-float64(dims[0]-1) / 2 * 2, -float64(dims[1]-1) / 2 * 2, -float64(dims[2]-1) / 2 * 2}
	ref, err := volume.NewUniform(dims, origin, [3]float64{2, 2, 2}, volume.Identity)
	if err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	sigma := spec.Sigma
	if sigma == 0 {
		sigma = 9
	}
	cloud := phantom.Gaussian([3]float64{0, 0, 0}, sigma, peak)
	if err := phantom.Fill(ref, cloud); err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	eval := ref.EmptyLike()
	for i, v := range ref.Data {
		eval.Data[i] = v * float32(scale)
	}
	refDesc, evalDesc := "invented planning dose, Gy", "invented recalculation, Gy"
	if spec.Description != "" {
		refDesc, evalDesc = spec.Description, spec.Description
	}
	if _, err := dicomio.WriteDose(f.Reference, ref, ids, dicomio.DoseOptions(refDesc)); err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	evalIDs := ids
	if spec.EvaluatedFrame {
		evalIDs.FrameOfReferenceUID = dicomio.NewUID()
	}
	opt := dicomio.DoseOptions(evalDesc)
	opt.SeriesNumber = 2
	if _, err := dicomio.WriteDose(f.Evaluated, eval, evalIDs, opt); err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	if spec.NoStructures {
		return f, nil
	}
	f.Structures = name(spec.Structures, "structures.dcm")
	label := "INVENTED"
	if spec.Label != "" {
		label = spec.Label
	}
	set := &structure.Set{Label: label, FrameOfReferenceUID: ids.FrameOfReferenceUID}
	type roiSpec struct {
		name, kind string
		shape      phantom.Shape
	}
	rois := []roiSpec{
		{"PTV_A", "PTV", phantom.Sphere{Centre: [3]float64{0, 0, 0}, Radius: 8}},
		{"Organ_B", "ORGAN", phantom.Sphere{Centre: [3]float64{14, 0, 0}, Radius: 5}},
	}
	if spec.ROIs != nil {
		if len(spec.ROIs) > 5 {
			return nil, fmt.Errorf("batchtest: %d ROIs, at most 5", len(spec.ROIs))
		}
		rois = nil
		for i, r := range spec.ROIs {
			x := 8 * (float64(i) - float64(len(spec.ROIs)-1)/2)
			rois = append(rois, roiSpec{r.Name, r.InterpretedType, phantom.Sphere{Centre: [3]float64{x, 0, 0}, Radius: 4}})
		}
	}
	for i, it := range rois {
		r, err := phantom.NewROI(it.shape, phantom.ROISpec{Name: it.name, Number: i + 1, InterpretedType: it.kind,
			Color: [3]uint8{200, uint8(60 * i), 60}, FrameOfReferenceUID: ids.FrameOfReferenceUID, PlaneSpacing: 2, PointsPerContour: 32})
		if err != nil {
			return nil, fmt.Errorf("batchtest: %w", err)
		}
		set.ROIs = append(set.ROIs, r)
	}
	if _, err := dicomio.WriteStructureSet(f.Structures, set, ids); err != nil {
		return nil, fmt.Errorf("batchtest: %w", err)
	}
	return f, nil
}
