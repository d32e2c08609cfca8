package dicomio_test

import (
	"bytes"
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/structure"
)

func roiItem(num, name string) []el {
	return []el{str(0x30060022, "IS", num), str(0x30060024, "UI", "2.25.1004"), str(0x30060026, "LO", name)}
}

func contourItem(kind, npts, data string) []el {
	return []el{str(0x30060042, "CS", kind), str(0x30060046, "IS", npts), str(0x30060050, "DS", data)}
}

// A hand-built RT Structure Set: PTV (2 contours, red), a point.
func baseStruct(contourSeq ...[]el) []el {
	if contourSeq == nil {
		contourSeq = [][]el{
			{str(0x3006002A, "IS", `255\0\0`), seq(0x30060040,
				contourItem("CLOSED_PLANAR", "3", `0\0\10\20\0\10\20\20\10`),
				contourItem("CLOSED_PLANAR", "4", `0\0\12\20\0\12\20\20\12\0\20\12`)), str(0x30060084, "IS", "1")},
			{seq(0x30060040, contourItem("POINT", "1", `1.5\-2.25\11`)), str(0x30060084, "IS", "2")},
		}
	}
	return []el{
		str(tSOPClass, "UI", "1.2.840.10008.5.1.4.1.1.481.3"),
		str(tSOPInstance, "UI", "2.25.2001"),
		str(tModality, "CS", "RTSTRUCT"),
		str(tPatientID, "LO", "VG-TEST-001"),
		str(0x30060002, "SH", "HANDBUILT"),
		seq(0x30060010, []el{str(tFoR, "UI", "2.25.1004")}),
		seq(0x30060020, roiItem("1", "PTV"), roiItem("2", "Iso")),
		seq(0x30060039, contourSeq...),
		seq(0x30060080, []el{str(0x30060082, "IS", "1"), str(0x30060084, "IS", "1"), str(0x300600A4, "CS", "PTV")},
			[]el{str(0x30060082, "IS", "2"), str(0x30060084, "IS", "2"), str(0x300600A4, "CS", "ISOCENTER")}),
	}
}

// Source: the hand-built file; expected content as written above.
func TestReadStructureSetHandBuilt(t *testing.T) {
	for name, data := range map[string][]byte{
		"explicit":          encodeFile(baseStruct(), explicitLE, true),
		"implicit":          encodeFile(baseStruct(), implicitLE, false),
		"raw implicit":      encodeFile(baseStruct(), "", false),
		"raw explicit":      encodeFile(baseStruct(), "", true),
		"DICM, no preamble": encodeFile(baseStruct(), explicitLE, true)[128:],
		"meta, no DICM":     encodeFile(baseStruct(), explicitLE, true)[132:],
	} {
		set, err := dicomio.ReadStructureSet(writeTemp(t, "rs.dcm", data))
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if set.Label != "HANDBUILT" || set.FrameOfReferenceUID != "2.25.1004" || len(set.ROIs) != 2 {
			t.Fatalf("%s: %+v", name, set)
		}
		ptv, iso := set.ROIs[0], set.ROIs[1]
		if ptv.Number != 1 || ptv.Name != "PTV" || ptv.InterpretedType != "PTV" || !ptv.HasColor || ptv.Color != [3]uint8{255, 0, 0} ||
			len(ptv.Contours) != 2 || ptv.Contours[1].Points[3] != [3]float64{0, 20, 12} || ptv.Contours[0].Type != structure.ClosedPlanar {
			t.Errorf("%s: PTV %+v", name, ptv)
		}
		if iso.HasColor || iso.InterpretedType != "ISOCENTER" || len(iso.Contours) != 1 || iso.Contours[0].Type != structure.Point ||
			iso.Contours[0].Points[0] != [3]float64{1.5, -2.25, 11} {
			t.Errorf("%s: Iso %+v", name, iso)
		}
	}
}

func TestReadStructureSetBadInput(t *testing.T) {
	contours := func(data, npts string, ref string) [][]el {
		return [][]el{{seq(0x30060040, contourItem("CLOSED_PLANAR", npts, `0\0\0\1\0\0\1\1\0`), contourItem("CLOSED_PLANAR", npts, data)), str(0x30060084, "IS", ref)}}
	}
	cases := []struct {
		name  string
		elems []el
		want  string
	}{
		{"not a multiple of 3", baseStruct(contours(`0\0\0\1\0\0\1\1`, "3", "1")...),
			`ROI 1 "PTV", contour 2 (item 2 of ContourSequence (3006,0040)): ContourData (3006,0050): has 8 values, not a multiple of 3`},
		{"NaN", baseStruct(contours(`0\0\0\1\NaN\0\1\1\0`, "3", "1")...),
			`ROI 1 "PTV", contour 2`},
		{"undefined ROI", baseStruct(contours(`0\0\0\1\0\0\1\1\0`, "3", "99")...),
			"ReferencedROINumber (3006,0084): ROIContourSequence (3006,0039) item 1 refers to ROI 99, which StructureSetROISequence (3006,0020) does not define"},
		{"point count", baseStruct(contours(`0\0\0\1\0\0\1\1\0`, "4", "1")...),
			"NumberOfContourPoints (3006,0046): is 4 but ContourData (3006,0050) holds 3 points"},
		{"modality", with(baseStruct(), str(tModality, "CS", "RTDOSE")), "Modality (0008,0060): is RTDOSE, want RTSTRUCT"},
		{"duplicate ROI", with(baseStruct(), seq(0x30060020, roiItem("1", "PTV"), roiItem("1", "Iso"))), "ROINumber (3006,0022): 1 is defined twice"},
		{"no ROI sequence", without(baseStruct(), 0x30060020), "StructureSetROISequence (3006,0020): missing"},
		{"colour", baseStruct([]el{str(0x3006002A, "IS", `255\0`), str(0x30060084, "IS", "1")}), `ROI 1 "PTV": ROIDisplayColor (3006,002A): has 2 values, want 3`},
	}
	for _, c := range cases {
		path := writeTemp(t, "bad_rs.dcm", encodeFile(c.elems, explicitLE, true))
		_, err := dicomio.ReadStructureSet(path)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), "reading "+path) || !errors.Is(err, dicomio.ErrInvalid) {
			t.Errorf("%s: error %v, want one naming the file and containing %q", c.name, err, c.want)
		}
	}
	// The NaN message names the point and the tag too.
	path := writeTemp(t, "nan.dcm", encodeFile(cases[1].elems, explicitLE, true))
	if _, err := dicomio.ReadStructureSet(path); err == nil || !strings.Contains(err.Error(), "ContourData (3006,0050): point 2 has coordinate NaN") {
		t.Errorf("NaN: %v", err)
	}
}

// demoSet is a structure set as another package would hand it over: a
// target with two contours (one with a hole), an organ, an open polyline and
// a point.
func demoSet() *structure.Set {
	sq := func(z, h float64) [][3]float64 {
		return [][3]float64{{-h, -h, z}, {h, -h, z}, {h, h, z}, {-h, h, z}}
	}
	return &structure.Set{Label: "DEMO", ROIs: []structure.ROI{
		{Number: 1, Name: "PTV", InterpretedType: "PTV", Color: [3]uint8{255, 0, 0}, HasColor: true, Contours: []structure.Contour{
			{Type: structure.ClosedPlanar, Points: sq(-2.5, 20)},
			{Type: structure.ClosedPlanar, Points: sq(-2.5, 5.125)},
			{Type: structure.ClosedPlanar, Points: sq(0, 20)},
		}},
		{Number: 4, Name: "Brainstem", InterpretedType: "ORGAN", Color: [3]uint8{0, 128, 255}, HasColor: true, Contours: []structure.Contour{
			{Type: structure.ClosedPlanar, Points: [][3]float64{{30.1, 2.7, 0}, {35.35, 2.7, 0}, {33.3, 9.9, 0}}},
		}},
		{Number: 7, Name: "Wire", Contours: []structure.Contour{{Type: structure.OpenPlanar, Points: [][3]float64{{0, 0, 1}, {10, 0, 1}, {10, 10, 1}}}}},
		{Number: 9, Name: "Iso", InterpretedType: "ISOCENTER", Contours: []structure.Contour{{Type: structure.Point, Points: [][3]float64{{0.5, -1.25, 0}}}}},
		{Number: 10, Name: "Empty"},
	}}
}

func sameSet(t *testing.T, what string, got, want *structure.Set) {
	t.Helper()
	if got.Label != want.Label || got.FrameOfReferenceUID != want.FrameOfReferenceUID || got.SOPInstanceUID != want.SOPInstanceUID ||
		got.PatientID != want.PatientID || got.PatientName != want.PatientName || got.StudyInstanceUID != want.StudyInstanceUID ||
		got.SeriesInstanceUID != want.SeriesInstanceUID || len(got.ROIs) != len(want.ROIs) {
		t.Fatalf("%s: read %+v\nwritten %+v", what, got, want)
	}
	for r := range want.ROIs {
		g, w := got.ROIs[r], want.ROIs[r]
		if g.Number != w.Number || g.Name != w.Name || g.FrameOfReferenceUID != w.FrameOfReferenceUID || g.InterpretedType != w.InterpretedType ||
			g.HasColor != w.HasColor || g.Color != w.Color || len(g.Contours) != len(w.Contours) {
			t.Errorf("%s: ROI %d read %+v, written %+v", what, r, g, w)
			continue
		}
		for c := range w.Contours {
			if g.Contours[c].Type != w.Contours[c].Type || len(g.Contours[c].Points) != len(w.Contours[c].Points) {
				t.Errorf("%s: ROI %q contour %d differs", what, w.Name, c)
				continue
			}
			for p := range w.Contours[c].Points {
				if g.Contours[c].Points[p] != w.Contours[c].Points[p] {
					t.Errorf("%s: ROI %q contour %d point %d: %v, written %v", what, w.Name, c, p, g.Contours[c].Points[p], w.Contours[c].Points[p])
				}
			}
		}
	}
}

// stripMeta removes the preamble and file meta header, leaving the bare
// data set some systems write.
func stripMeta(t *testing.T, data []byte) []byte {
	t.Helper()
	if string(data[128:132]) != "DICM" || string(data[136:138]) != "UL" {
		t.Fatal("no meta header to strip")
	}
	groupLen := binary.LittleEndian.Uint32(data[140:144])
	return data[144+int(groupLen):]
}

// Round trip of WriteStructureSet: read back by ReadStructureSet, with and
// without file meta header, and by pydicom; dcmtk and dciodvfy accept the
// files.
func TestWriteStructureSet(t *testing.T) {
	ids := dicomio.PhantomIdentifiers("", "")
	dir := t.TempDir()
	small := demoSet()
	big := demoSet()
	// A contour too long for explicit VR's 16-bit length: the file is then
	// implicit VR.
	var ring [][3]float64
	for i := 0; i < 4000; i++ {
		ring = append(ring, [3]float64{float64(i) * 0.125, -float64(i) * 0.0625, 2.5})
	}
	big.ROIs[0].Contours = append(big.ROIs[0].Contours, structure.Contour{Type: structure.ClosedPlanar, Points: ring})
	var paths []string
	var sets []*structure.Set
	for name, set := range map[string]*structure.Set{"small": small, "big": big} {
		path := filepath.Join(dir, "rs_"+name+".dcm")
		out, err := dicomio.WriteStructureSet(path, set, ids)
		if err != nil {
			t.Fatal(err)
		}
		if out.FrameOfReferenceUID != ids.FrameOfReferenceUID || out.ROIs[0].FrameOfReferenceUID != ids.FrameOfReferenceUID || out.PatientID != dicomio.DemoPatientID {
			t.Errorf("returned set %+v", out)
		}
		data, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		wantTS := "1.2.840.10008.1.2.1\x00"
		if name == "big" {
			wantTS = "1.2.840.10008.1.2\x00"
		}
		if !bytes.Contains(data[:400], []byte(wantTS)) {
			t.Errorf("%s: transfer syntax is not %q", name, wantTS)
		}
		raw := filepath.Join(dir, "rs_"+name+"_raw.dcm")
		if err := os.WriteFile(raw, stripMeta(t, data), 0o644); err != nil {
			t.Fatal(err)
		}
		for _, p := range []string{path, raw} {
			got, err := dicomio.ReadStructureSet(p)
			if err != nil {
				t.Fatal(err)
			}
			sameSet(t, filepath.Base(p), got, out)
			paths = append(paths, p)
			sets = append(sets, out)
		}
	}
	if _, err := dicomio.WriteStructureSet(filepath.Join(dir, "x.dcm"), &structure.Set{FrameOfReferenceUID: "2.25.9"}, ids); err == nil {
		t.Error("a set in another frame of reference was written")
	}
	dup := demoSet()
	dup.ROIs[1].Number = 1
	if _, err := dicomio.WriteStructureSet(filepath.Join(dir, "x.dcm"), dup, ids); err == nil || !strings.Contains(err.Error(), "ROI number 1 used twice") {
		t.Errorf("duplicate ROI numbers: %v", err)
	}

	// Source: pydicom decodes the same ROIs and points.
	t.Run("pydicom", func(t *testing.T) {
		refs := pydicomStructureSets(t, paths...)
		for f, p := range paths {
			got, _ := dicomio.ReadStructureSet(p)
			compareSetWithPydicom(t, refs[f], got)
			if refs[f].FoR != sets[f].FrameOfReferenceUID {
				t.Errorf("%s: pydicom frame %q", p, refs[f].FoR)
			}
		}
	})
	t.Run("dcmtk", func(t *testing.T) {
		dcmftest, dcmdump := requireTool(t, "dcmftest"), requireTool(t, "dcmdump")
		for _, p := range paths {
			if !strings.HasSuffix(p, "_raw.dcm") {
				dcmtkAccepts(t, dcmftest, dcmdump, p)
			}
		}
	})
	// Source: dicom3tools' dciodvfy checks the RT Structure Set IOD.
	t.Run("dciodvfy", func(t *testing.T) {
		dciodvfy := requireTool(t, "dciodvfy")
		for _, p := range paths {
			if !strings.HasSuffix(p, "_raw.dcm") {
				dciodvfyAccepts(t, dciodvfy, p, "RTStructureSet")
			}
		}
	})
}
