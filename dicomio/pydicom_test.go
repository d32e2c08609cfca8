package dicomio_test

import (
	"errors"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/fixture"
	"voxgamma/structure"
	"voxgamma/volume"
)

// compareWithPydicom checks a grid and its info against what pydicom and
// numpy decode from the same file: every dose value, the position of every
// voxel, and the metadata.
func compareWithPydicom(t *testing.T, ref *refDose, g *volume.Grid, info *dicomio.DoseInfo) {
	t.Helper()
	if d := g.Dims(); d != [3]int{ref.Cols, ref.Rows, ref.Frames} {
		t.Fatalf("dims %v, pydicom: columns %d rows %d frames %d", d, ref.Cols, ref.Rows, ref.Frames)
	}
	bad := 0
	for n, v := range g.Data {
		i, j, k := g.IJK(n)
		if v != float32(ref.Dose[n]) {
			if bad++; bad < 5 {
				t.Errorf("voxel (%d,%d,%d): dose %v, pydicom × DoseGridScaling %v", i, j, k, v, ref.Dose[n])
			}
		}
		p := g.WorldOf(i, j, k)
		if !approx(p[0], ref.X[n], 1e-9) || !approx(p[1], ref.Y[n], 1e-9) || !approx(p[2], ref.Z[n], 1e-9) {
			if bad++; bad < 5 {
				t.Errorf("voxel (%d,%d,%d) at %v, position from the tags by numpy (%v, %v, %v)", i, j, k, p, ref.X[n], ref.Y[n], ref.Z[n])
			}
		}
	}
	if bad > 0 {
		t.Errorf("%d mismatches in %d voxels", bad, len(g.Data))
	}
	checks := []struct{ what, got, want string }{
		{"DoseUnits", info.DoseUnits, ref.Units},
		{"DoseType", info.DoseType, ref.Type},
		{"DoseSummationType", info.DoseSummationType, ref.Sum},
		{"FrameOfReferenceUID", info.FrameOfReferenceUID, ref.FoR},
		{"SOPInstanceUID", info.SOPInstanceUID, ref.SOP},
		{"SeriesInstanceUID", info.SeriesInstanceUID, ref.Series},
		{"StudyInstanceUID", info.StudyInstanceUID, ref.Study},
		{"PatientID", info.PatientID, ref.PID},
		{"PatientName", info.PatientName, ref.PName},
		{"referenced plan", info.ReferencedRTPlanUID, ref.Plan},
	}
	for _, c := range checks {
		if c.got != c.want {
			t.Errorf("%s %q, pydicom %q", c.what, c.got, c.want)
		}
	}
	if info.DoseGridScaling != ref.Scaling || info.BitsAllocated != ref.Bits || info.PixelRepresentation != ref.Rep {
		t.Errorf("scaling %v bits %d rep %d, pydicom %v %d %d", info.DoseGridScaling, info.BitsAllocated, info.PixelRepresentation, ref.Scaling, ref.Bits, ref.Rep)
	}
}

// Source: the pydicom project's rtdose.dcm (32-bit unsigned, 15 frames,
// implicit VR little endian) and rtdose_1frame.dcm (no NumberOfFrames),
// decoded by pydicom + numpy.
func TestPydicomRTDose(t *testing.T) {
	names := []string{"rtdose.dcm", "rtdose_1frame.dcm"}
	var paths []string
	for _, name := range names {
		paths = append(paths, pydicomTestFile(t, name))
	}
	refs := pydicomDoses(t, paths...)
	for f, name := range names {
		path := paths[f]
		t.Run(name, func(t *testing.T) {
			g, info, err := dicomio.ReadDose(path)
			if err != nil {
				t.Fatal(err)
			}
			compareWithPydicom(t, refs[f], g, info)
			if !info.Relative() {
				t.Errorf("DoseUnits %s: want RELATIVE flagged", info.DoseUnits)
			}
			if mx, _ := g.Max(); !(mx > 0) {
				t.Errorf("maximum dose %v: the file holds positive doses", mx)
			}
			hdr, err := dicomio.ReadDoseInfo(path)
			if err != nil {
				t.Fatal(err)
			}
			if hdr.Rows != info.Rows || hdr.NumberOfFrames != info.NumberOfFrames || hdr.FrameOfReferenceUID != info.FrameOfReferenceUID {
				t.Errorf("ReadDoseInfo %+v differs from ReadDose %+v", hdr, info)
			}
		})
	}
}

// compareSetWithPydicom checks every ROI and contour point.
func compareSetWithPydicom(t *testing.T, ref *refSet, set *structure.Set) {
	t.Helper()
	if set.Label != ref.Label || set.FrameOfReferenceUID != ref.FoR || set.PatientID != ref.PID {
		t.Errorf("label %q frame %q patient %q, pydicom %q %q %q", set.Label, set.FrameOfReferenceUID, set.PatientID, ref.Label, ref.FoR, ref.PID)
	}
	if len(set.ROIs) != len(ref.ROIs) {
		t.Fatalf("%d ROIs, pydicom %d", len(set.ROIs), len(ref.ROIs))
	}
	for r, want := range ref.ROIs {
		got := set.ROIs[r]
		if got.Number != want.Number || got.Name != want.Name || got.FrameOfReferenceUID != want.FoR || got.InterpretedType != want.Type {
			t.Errorf("ROI %d: %d %q %q %q, pydicom %d %q %q %q", r, got.Number, got.Name, got.FrameOfReferenceUID, got.InterpretedType,
				want.Number, want.Name, want.FoR, want.Type)
		}
		if got.HasColor != (want.Color != nil) || (want.Color != nil && (int(got.Color[0]) != want.Color[0] || int(got.Color[1]) != want.Color[1] || int(got.Color[2]) != want.Color[2])) {
			t.Errorf("ROI %q colour %v (%v), pydicom %v", got.Name, got.Color, got.HasColor, want.Color)
		}
		if len(got.Contours) != len(want.Contours) {
			t.Errorf("ROI %q: %d contours, pydicom %d", got.Name, len(got.Contours), len(want.Contours))
			continue
		}
		for c, wc := range want.Contours {
			gc := got.Contours[c]
			if string(gc.Type) != wc.Type || 3*len(gc.Points) != len(wc.Points) {
				t.Errorf("ROI %q contour %d: %s with %d points, pydicom %s with %d values", got.Name, c, gc.Type, len(gc.Points), wc.Type, len(wc.Points))
				continue
			}
			for p, v := range wc.Points {
				if gc.Points[p/3][p%3] != v {
					t.Errorf("ROI %q contour %d value %d: %v, pydicom %v", got.Name, c, p, gc.Points[p/3][p%3], v)
				}
			}
		}
	}
}

// Source: the pydicom project's rtstruct.dcm, a data set without file meta
// header (implicit VR little endian), decoded by pydicom.
func TestPydicomRTStruct(t *testing.T) {
	path := pydicomTestFile(t, "rtstruct.dcm")
	set, err := dicomio.ReadStructureSet(path)
	if err != nil {
		t.Fatal(err)
	}
	compareSetWithPydicom(t, pydicomStructureSets(t, path)[0], set)
	// Facts of the file (dcmdump of it): 3 ROIs, the first an EXTERNAL
	// with 3 CLOSED_PLANAR contours, the others single POINTs.
	if len(set.ROIs) != 3 || len(set.ROIs[0].Contours) != 3 || set.ROIs[1].Contours[0].Type != structure.Point {
		t.Errorf("unexpected content %+v", set)
	}
}

// Source: pydicom's big-endian and RLE variants of rtdose.dcm, and its
// ExplVR_BigEndNoMeta.dcm (a big-endian data set without meta header).
func TestPydicomUnsupportedEncodings(t *testing.T) {
	cases := []struct{ file, want string }{
		{"rtdose_expb.dcm", "rtdose_expb.dcm: transfer syntax 1.2.840.10008.1.2.2 (explicit VR big endian) is not supported"},
		{"rtdose_expb_1frame.dcm", "rtdose_expb_1frame.dcm: transfer syntax 1.2.840.10008.1.2.2 (explicit VR big endian) is not supported"},
		{"rtdose_rle.dcm", "rtdose_rle.dcm: transfer syntax 1.2.840.10008.1.2.5 (RLE lossless) is not supported"},
		{"rtdose_rle_1frame.dcm", "rtdose_rle_1frame.dcm: transfer syntax 1.2.840.10008.1.2.5 (RLE lossless) is not supported"},
		{"ExplVR_BigEndNoMeta.dcm", "transfer syntax 1.2.840.10008.1.2.2 (explicit VR big endian) is not supported"},
	}
	for _, c := range cases {
		path := pydicomTestFile(t, c.file)
		_, _, err := dicomio.ReadDose(path)
		if err == nil || !strings.Contains(err.Error(), c.want) || !errors.Is(err, dicomio.ErrUnsupported) {
			t.Errorf("%s: error %v, want one containing %q", c.file, err, c.want)
		}
		if err != nil && !strings.Contains(err.Error(), "TransferSyntaxUID (0002,0010)") && strings.HasPrefix(c.file, "rtdose") {
			t.Errorf("%s: error %v does not name the tag", c.file, err)
		}
	}
}

// Source: pydicom's ExplVR_LitEndNoMeta.dcm, an RT Plan written as an
// explicit VR little-endian data set without meta header: it must be
// decoded (and then refused for its modality, which proves it was).
func TestPydicomExplicitNoMeta(t *testing.T) {
	path := pydicomTestFile(t, "ExplVR_LitEndNoMeta.dcm")
	_, _, err := dicomio.ReadDose(path)
	if err == nil || !strings.Contains(err.Error(), "Modality (0008,0060): is RTPLAN, want RTDOSE") {
		t.Errorf("error %v, want the modality refused", err)
	}
}

// Source: the shared fixtures pydicom wrote (testdata/dicom: the uniform
// case's doses, head-first supine with a relative GridFrameOffsetVector,
// one naming its plan's fraction group; the linear gradient's, one with
// PixelSpacing [2.5, 2] and an absolute GridFrameOffsetVector, one
// feet-first supine; structure sets with sequences of explicit and of
// undefined length), decoded by pydicom and numpy: every dose value, every
// voxel's position, every contour point.
func TestPydicomSharedFixtures(t *testing.T) {
	doses, err := filepath.Glob(filepath.Join(fixture.Dir(), "dicom", "*", "RD_*.dcm"))
	if err != nil || len(doses) < 6 {
		t.Fatalf("shared RT Doses: %v %v", doses, err)
	}
	refs := pydicomDoses(t, doses...)
	for f, path := range doses {
		t.Run(filepath.Base(filepath.Dir(path))+"/"+filepath.Base(path), func(t *testing.T) {
			g, info, err := dicomio.ReadDose(path)
			if err != nil {
				t.Fatal(err)
			}
			compareWithPydicom(t, refs[f], g, info)
		})
	}
	sets := []string{fixture.Path(t, "dicom/uniform/RS.dcm"), fixture.Path(t, "bad-input/contours_twice_and_overlapping.dcm")}
	refSets := pydicomStructureSets(t, sets...)
	for i, path := range sets {
		t.Run(filepath.Base(path), func(t *testing.T) {
			set, err := dicomio.ReadStructureSet(path)
			if err != nil {
				t.Fatal(err)
			}
			compareSetWithPydicom(t, refSets[i], set)
		})
	}
}
