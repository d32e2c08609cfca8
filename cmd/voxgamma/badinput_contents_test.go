package main

// Bad input through the real command (docs/bad-input.md): what the files
// say, changed in valid files: geometry, dose values and units, structure
// sets. The files are the corpus of testdata/bad-input; badinput_test.go
// has the contract every test checks.

import (
	"path/filepath"
	"strings"
	"testing"
)

// ---------------------------------------------------------------------------
// Geometry, dose values and units.

// corpusFile is a file of the corpus (testdata/bad-input/NAME.dcm, the
// uniform reference dose damaged in one place) and the causes its refusal
// must name.
type corpusFile struct {
	name  string
	cause []string
}

// refuseReferences gives each file as the reference dose and checks that
// compare refuses it, naming the file and each cause.
func refuseReferences(t *testing.T, f *badFixture, cases []corpusFile) {
	t.Helper()
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			p := corpus(t, tc.name+".dcm")
			refused(t, compareArgs(p, f.eval, ""), append([]string{"reading " + p + ": "}, tc.cause...)...)
		})
	}
}

// TestBadInputGeometry: the Image Plane module (PS3.3 C.7.6.2) and the
// GridFrameOffsetVector (C.8.8.3.2) with values a grid cannot have, each
// patched into a valid file. PixelSpacing (0028,0030) is the physical
// distance between the centres of adjacent rows and columns (C.7.6.2), so
// zero, negative or non-finite values place no voxel; the row and column
// direction cosines of ImageOrientationPatient (0020,0037) are unit
// vectors and orthogonal (C.7.6.2.1.1); GridFrameOffsetVector
// offsets, with the Frame Increment Pointer, place each frame
// (C.8.8.3.2), so repeated or back-tracking offsets describe no grid;
// Rows × Columns × NumberOfFrames samples of BitsAllocated bits fill
// PixelData exactly (C.7.6.3, C.7.6.6; PS3.5 section 8.1.1).
func TestBadInputGeometry(t *testing.T) {
	f := newBadFixture(t)
	ref := f.refBytes
	// The fixture's values as written: PixelSpacing 2\2, IPP -11\-11\-7,
	// IOP 1\0\0\0\1\0, 8 frames at 0\2\...\14, Rows = Columns = 12.
	if got := string(ref[findElem(t, ref, tgGFOV, 0).val:findElem(t, ref, tgGFOV, 0).end()]); strings.TrimSpace(got) != `0\2\4\6\8\10\12\14` {
		t.Fatalf("GridFrameOffsetVector %q: the fixture changed", got)
	}
	refuseReferences(t, f, []corpusFile{
		{"PixelSpacing_zero", []string{"PixelSpacing (0028,0030): value 1 is 0 mm, want a positive finite spacing"}},
		{"PixelSpacing_negative", []string{"PixelSpacing (0028,0030): value 2 is -2 mm"}},
		{"PixelSpacing_NaN", []string{"PixelSpacing (0028,0030): value 1 is NaN mm"}},
		{"PixelSpacing_Inf", []string{"PixelSpacing (0028,0030): value 2 is +Inf mm"}},
		{"PixelSpacing_one_value", []string{"PixelSpacing (0028,0030): has 1 values, want 2"}},
		{"ImagePositionPatient_NaN", []string{"ImagePositionPatient (0020,0032): value 2 is NaN, want a finite number"}},
		{"ImagePositionPatient_Inf", []string{"ImagePositionPatient (0020,0032): value 1 is -Inf, want a finite number"}},
		{"ImagePositionPatient_two_values", []string{"ImagePositionPatient (0020,0032): has 2 values, want 3"}},
		{"ImageOrientationPatient_oblique", []string{"ImageOrientationPatient (0020,0037)", "is oblique"}},
		{"ImageOrientationPatient_not_orthogonal", []string{"ImageOrientationPatient (0020,0037)"}},
		{"ImageOrientationPatient_parallel", []string{"ImageOrientationPatient (0020,0037)", "parallel"}},
		{"ImageOrientationPatient_not_unit", []string{"ImageOrientationPatient (0020,0037)"}},
		{"ImageOrientationPatient_NaN", []string{"ImageOrientationPatient (0020,0037): value 5 is NaN"}},
		{"GridFrameOffsetVector_not_monotonic", []string{"GridFrameOffsetVector (3004,000C): not strictly monotonic at frame 5"}},
		{"GridFrameOffsetVector_repeated", []string{"GridFrameOffsetVector (3004,000C): not strictly monotonic at frame 4"}},
		{"GridFrameOffsetVector_wrong_count", []string{"GridFrameOffsetVector (3004,000C): has 7 values but NumberOfFrames (0028,0008) is 8"}},
		{"GridFrameOffsetVector_NaN", []string{"GridFrameOffsetVector (3004,000C): value 4 is NaN"}},
		{"Rows_too_many", []string{"Rows (0028,0010) × Columns (0028,0011) × NumberOfFrames (0028,0008) = 13 × 12 × 8 voxels of 16 bits need 2496 bytes but PixelData (7FE0,0010) holds 2304"}},
		{"Columns_too_few", []string{"= 12 × 11 × 8 voxels of 16 bits need 2112 bytes but PixelData (7FE0,0010) holds 2304"}},
		{"NumberOfFrames_too_few", []string{"= 12 × 12 × 7 voxels of 16 bits need 2016 bytes but PixelData (7FE0,0010) holds 2304"}},
		{"Rows_zero", []string{"Rows (0028,0010): is 0, want at least 1"}},
	})
}

// TestBadInputDose: dose values that are not doses. RT Dose stores
// integers (BitsAllocated 16 or 32) and dose = stored value ×
// DoseGridScaling (PS3.3 C.8.8.3, RT Dose module), so a non-finite dose
// can only come from DoseGridScaling; DoseGridScaling is type 1C and
// required with integer pixel data (C.8.8.3); PixelRepresentation 1
// (signed) is allowed only when DoseType is ERROR (C.8.8.3.4, as
// dicomio/writedose.go cites it), so a
// negative PHYSICAL dose is a contradiction; DoseUnits is GY or RELATIVE
// (C.8.8.3) and an absolute dose cannot be compared with a relative one.
func TestBadInputDose(t *testing.T) {
	f := newBadFixture(t)
	// negative_*: a signed dose holding −0.5 Gy at voxel (3,4,5), written
	// legally as DoseType ERROR, then relabelled PHYSICAL or left without
	// a DoseType; RELATIVE_evaluated: the evaluated dose in RELATIVE units.
	relative := corpus(t, "RELATIVE_evaluated.dcm")
	refuseReferences(t, f, []corpusFile{
		{"DoseGridScaling_NaN", []string{"DoseGridScaling (3004,000E): is NaN, want a positive finite number"}},
		{"DoseGridScaling_Inf", []string{"DoseGridScaling (3004,000E): is +Inf, want a positive finite number"}},
		{"DoseGridScaling_zero", []string{"DoseGridScaling (3004,000E): is 0, want a positive finite number"}},
		{"DoseGridScaling_negative", []string{"DoseGridScaling (3004,000E): is -3.1e-05"}},
		{"DoseGridScaling_missing", []string{"DoseGridScaling (3004,000E): missing"}},
		{"DoseGridScaling_empty", []string{"DoseGridScaling (3004,000E): missing"}},
		{"DoseGridScaling_not_a_number", []string{"DoseGridScaling (3004,000E): value 1 (\"0,001\") is not a decimal number"}},
		// 1e300 Gy per code: the dose overflows float32 (values are kept
		// as float32, volume.Grid).
		{"dose_overflows", []string{"is not a finite dose", "DoseGridScaling (3004,000E)"}},
		{"negative_PHYSICAL_dose", []string{"has dose -0.5", "DoseType (3004,0004) is \"PHYSICAL\": negative doses are allowed only for DoseType ERROR"}},
		{"negative_dose_no_DoseType", []string{"has dose -0.5", "DoseType (3004,0004) is \"\""}},
		{"DoseUnits_CGY", []string{"DoseUnits (3004,0002): is CGY, want GY or RELATIVE"}},
		{"DoseUnits_missing", []string{"DoseUnits (3004,0002): missing"}},
	})
	t.Run("RELATIVE_against_GY", func(t *testing.T) {
		refused(t, compareArgs(f.ref, relative, ""), "dose units differ", filepath.Base(f.ref), "GY", filepath.Base(relative), "RELATIVE")
	})
	t.Run("GY_against_RELATIVE", func(t *testing.T) {
		refused(t, compareArgs(relative, f.eval, ""), "dose units differ", filepath.Base(relative), "RELATIVE", filepath.Base(f.eval), "GY")
	})
}

// ---------------------------------------------------------------------------
// Structure sets.

// skippedContourReported checks the outcome of a structure set with a
// contour that cannot be rasterised: either voxgamma refuses it (exit 1,
// one line naming the file, the ROI and the reason) or it evaluates and
// says, in the result's warnings, which ROI lost a contour and why. What
// it may not do is drop the contour without a word (README: reports
// "state what was not evaluated"; NOTES.md: "never silently wrong").
func skippedContourReported(t *testing.T, f *badFixture, rs, roiName, reason string) {
	t.Helper()
	out := t.TempDir()
	r := vgRun(t, compareArgs(f.ref, f.eval, rs, "--json", filepath.Join(out, "r.json"), "--quiet")...)
	switch r.code {
	case exitError:
		oneErrorLine(t, r, rs, roiName, reason)
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder: %v", names)
		}
		return
	case exitPass, exitRuleFail:
	default:
		t.Fatalf("exit %d\n%s", r.code, r)
	}
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	found := false
	for _, w := range res.Warnings {
		found = found || strings.Contains(w, roiName) && strings.Contains(w, reason)
	}
	if !found {
		t.Errorf("BUG: ROI %q lost a contour (%s) without a warning: exit %d, warnings %q, notes %q", roiName, reason, r.code, res.Warnings, res.Notes)
	}
}

// TestBadInputStructures: structure sets whose contours cannot be used.
// ContourData (3006,0050) holds x, y, z triplets in mm, a CLOSED_PLANAR
// contour is a closed polygon of coplanar points (PS3.3 C.8.8.6, ROI
// Contour module, ContourGeometricType; a polygon needs 3 vertices), every item of
// ROIContourSequence refers by ReferencedROINumber (3006,0084) to an ROI
// of StructureSetROISequence, ROINumber is unique in the set (C.8.8.5),
// and contours lie in the frame of reference they name (C.8.8.5,
// C.7.4.1): the roi package documents that such contours are skipped
// (roi/doc.go), dicomio that non-finite coordinates and undefined ROIs are
// errors (dicomio/doc.go).
func TestBadInputStructures(t *testing.T) {
	f := newBadFixture(t)
	frame, other := f.c.FrameOfReferenceUID, f.c.OtherFrameOfReferenceUID
	// The corpus's structure sets (testdata/generate.py): PTV_1 of the
	// uniform case with one value of a contour's ContourData replaced
	// (contour 2 is the plane z = −1 mm; 32 points per contour), with a
	// ReferencedROINumber or ROINumber changed, or with a second ROI
	// (Eye_L, a sphere of radius 3 mm at (6, 6, 0); Cord, one unusable
	// contour), or in another frame of reference.
	for _, tc := range []struct {
		name  string
		cause []string
	}{
		{"NaN_coordinate", []string{`ROI 1 "PTV_1", contour 2`, "ContourData (3006,0050): point 3 has coordinate NaN, want a finite number"}},
		{"Inf_coordinate", []string{`ROI 1 "PTV_1", contour 1`, "ContourData (3006,0050): point 1 has coordinate -Inf"}},
		{"coordinate_not_a_number", []string{"ContourData (3006,0050)", `"4,56789"`, "is not a decimal number"}},
		// One value replaced by "1\2\3": two values more, 98 in all.
		{"ContourData_not_triplets", []string{`ROI 1 "PTV_1", contour 1`, "ContourData (3006,0050): has 98 values, not a multiple of 3"}},
		// One value replaced by "1\2\3\4": one point more than the 32
		// NumberOfContourPoints (3006,0046) says (C.8.8.6: the number of
		// points in ContourData).
		{"NumberOfContourPoints_disagrees", []string{`ROI 1 "PTV_1", contour 1`, "NumberOfContourPoints (3006,0046): is 32 but ContourData (3006,0050) holds 33 points"}},
		// The first ReferencedROINumber is the ROIContourSequence item's
		// (tags ascend: (3006,0039) before (3006,0080)): 7.
		{"ROI_referenced_not_defined", []string{"ReferencedROINumber (3006,0084)", "refers to ROI 7", "StructureSetROISequence (3006,0020) does not define"}},
		// Eye_L's ROINumber made 1.
		{"ROI_number_defined_twice", []string{"ROINumber (3006,0022): 1 is defined twice"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := corpus(t, tc.name+".dcm")
			refused(t, compareArgs(f.ref, f.eval, p), append([]string{"reading " + p + ": "}, tc.cause...)...)
		})
	}
	t.Run("observation_of_undefined_ROI", func(t *testing.T) {
		// An RTROIObservationsSequence item about ROI 7, which does not
		// exist: it says nothing about any ROI and is ignored
		// (dicomio/structureset.go); PTV_1 then has no interpreted type
		// and its kind comes from the name rules.
		p := corpus(t, "observation_of_undefined_ROI.dcm")
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitPass, compareArgs(f.ref, f.eval, p, "--json", out, "--kind", "PTV*=target", "--quiet")...)
		roi := resultROI(t, readResultJSON(t, out), "PTV_1")
		if roi.InterpretedType != "" || roi.Kind != "target" || roi.Status != "evaluated" {
			t.Errorf("PTV_1: interpreted type %q, kind %q, status %q; want none, target by the name rule, evaluated", roi.InterpretedType, roi.Kind, roi.Status)
		}
	})
	t.Run("structure_set_in_other_frame", func(t *testing.T) {
		p := corpus(t, "structure_set_in_other_frame.dcm")
		refused(t, compareArgs(f.ref, f.eval, p), "different frames of reference", frame, other, filepath.Base(p))
	})
	t.Run("ROI_in_other_frame", func(t *testing.T) {
		p := corpus(t, "ROI_in_other_frame.dcm")
		refused(t, compareArgs(f.ref, f.eval, p), "different frames of reference", `ROI 2 "Eye_L"`, other)
	})
	t.Run("other_frame_allowed", func(t *testing.T) {
		p := corpus(t, "structure_set_in_other_frame.dcm")
		out := filepath.Join(t.TempDir(), "r.json")
		r := vgExit(t, exitPass, compareArgs(f.ref, f.eval, p, "--allow-frame-mismatch", "--json", out)...)
		if !strings.Contains(r.stderr, "warning: ") || !strings.Contains(r.stderr, "different frames of reference") {
			t.Errorf("no warning on stderr about the frames:\n%s", r)
		}
		found := false
		for _, w := range readResultJSON(t, out).Warnings {
			found = found || strings.Contains(w, "different frames of reference")
		}
		if !found {
			t.Errorf("no warning in the result about the frames")
		}
	})

	// Contours the rasteriser skips (roi/doc.go): an ROI made only of
	// one of them (Cord: 2 points at z = 1 mm; 4 points with z from −1 to
	// 3 mm) is "not evaluated", with a status saying why.
	for _, tc := range []struct{ name, reason string }{
		{"only_contour_has_2_points", "fewer than 3 points"},
		{"only_contour_not_planar", "not in an axial plane"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := corpus(t, tc.name+".dcm")
			out := filepath.Join(t.TempDir(), "r.json")
			vgExit(t, exitPass, compareArgs(f.ref, f.eval, p, "--json", out, "--quiet")...)
			roi := resultROI(t, readResultJSON(t, out), "Cord")
			if !strings.HasPrefix(string(roi.Status), "not evaluated") || roi.Voxels != 0 || roi.PassRate != nil {
				t.Errorf("Cord: status %q, %d voxels, pass rate %v; want not evaluated, no voxel, null", roi.Status, roi.Voxels, roi.PassRate)
			}
			// Its one contour is CLOSED_PLANAR: a status blaming "points or
			// open contours" tells the physicist the wrong thing.
			if strings.Contains(string(roi.Status), "points or open contours only") {
				t.Errorf("BUG: Cord's only contour is CLOSED_PLANAR (%s), but its status says %q", tc.reason, roi.Status)
			}
			skippedContourReported(t, f, p, "Cord", tc.reason)
		})
	}
	// A target that keeps its other contours (PTV_1 and a fifth contour
	// at z = 5 mm: 2 points, or 4 points with z from 5 to 7 mm): the
	// skipped contour changes its volume and voxels, and must not vanish
	// in silence.
	for _, tc := range []struct{ name, reason string }{
		{"target_contour_has_2_points", "fewer than 3 points"},
		{"target_contour_not_planar", "not in an axial plane"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			skippedContourReported(t, f, corpus(t, tc.name+".dcm"), "PTV_1", tc.reason)
		})
	}
}
