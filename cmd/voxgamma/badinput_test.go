package main

// Bad input through the real command (docs/bad-input.md): every class of
// input voxgamma cannot evaluate is fed to `voxgamma compare` in-process
// through run, and a handful through the built binary, and each must end
// with exit status 1, exactly one line on stderr starting "voxgamma: " that
// names the file and, where one is to blame, the DICOM tag or the option,
// and no output file. A verification tool that reports on input it misread
// is a hazard; one that refuses it is an annoyance.
//
// This file holds the walk, the fixture, the contract and the files that
// are not DICOM, cut short, of the wrong kind or with impossible lengths;
// badinput_contents_test.go what the files say (geometry, dose values,
// structure sets), badinput_options_test.go options and outputs,
// badinput_nothing_test.go inputs that leave nothing to compare, and
// badinput_binary_test.go the built binary.
//
// The inputs are the bad-input corpus of the shared fixtures
// (testdata/bad-input, written by testdata/generate.py with pydicom): the
// uniform case's files (testdata/dicom/uniform) damaged in one place each,
// and valid encodings of what voxgamma must refuse or flag. Each file is
// named after its test case. The truncation tests cut the uniform case's
// files at every element (the walk below follows DICOM PS3.5 section 7.1:
// explicit VR little endian element headers, 2-byte lengths for short VRs,
// 2 reserved bytes and a 4-byte length for OB, OW, SQ, UN, UT, ...;
// sequences and items of explicit length, or of undefined length closed by
// delimitation items, PS3.5 section 7.5).

import (
	"encoding/binary"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/internal/fixture"
)

// ---------------------------------------------------------------------------
// Walking and editing DICOM files (explicit VR little endian, PS3.5 7.1.2).

// dcmElem is one element header found in a file, with its offsets.
type dcmElem struct {
	tag   uint32 // group<<16 | element
	vr    string // "" for items and delimitation items
	depth int    // 0 top level (and file meta), 1 inside a sequence item, ...
	meta  bool   // in the file meta group
	hdr   int    // offset of the element header
	val   int    // offset of the value (or of an item's content)
	vl    uint32 // the value length as written
	lenAt int    // offset of the value length field
	lenSz int    // its size: 2 or 4 bytes
}

// end is the offset after the element's value; for sequences and items of
// undefined length, the offset where their content starts.
func (e dcmElem) end() int {
	if e.vl == 0xFFFFFFFF {
		return e.val
	}
	return e.val + int(e.vl)
}

func (e dcmElem) String() string {
	return fmt.Sprintf("(%04X,%04X) %s at %d", e.tag>>16, e.tag&0xFFFF, e.vr, e.hdr)
}

// dcmLongVRs have 2 reserved bytes and a 4-byte length (PS3.5 table 7.1-1).
var dcmLongVRs = map[string]bool{"OB": true, "OD": true, "OF": true, "OL": true, "OV": true, "OW": true,
	"SQ": true, "UC": true, "UN": true, "UR": true, "UT": true, "SV": true, "UV": true}

const (
	tagItem      = 0xFFFEE000
	tagItemDelim = 0xFFFEE00D
	tagSeqDelim  = 0xFFFEE0DD
	undefinedVL  = 0xFFFFFFFF
)

type dcmWalker struct {
	t    *testing.T
	data []byte
	out  []dcmElem
}

func (w *dcmWalker) u16(off int) uint16 {
	if off+2 > len(w.data) {
		w.t.Fatalf("test file walk: read past the end at %d", off)
	}
	return binary.LittleEndian.Uint16(w.data[off:])
}

func (w *dcmWalker) u32(off int) uint32 {
	if off+4 > len(w.data) {
		w.t.Fatalf("test file walk: read past the end at %d", off)
	}
	return binary.LittleEndian.Uint32(w.data[off:])
}

// elements walks data elements from off up to end, or, with end < 0, up to
// and including an Item Delimitation Item; it returns the offset after.
func (w *dcmWalker) elements(off, end, depth int, meta bool) int {
	for end < 0 || off < end {
		tag := uint32(w.u16(off))<<16 | uint32(w.u16(off+2))
		if meta && tag>>16 != 0x0002 {
			return off
		}
		if tag == tagItemDelim && end < 0 {
			w.out = append(w.out, dcmElem{tag: tag, depth: depth, hdr: off, val: off + 8, vl: w.u32(off + 4), lenAt: off + 4, lenSz: 4})
			return off + 8
		}
		e := dcmElem{tag: tag, vr: string(w.data[off+4 : off+6]), depth: depth, meta: meta, hdr: off}
		if dcmLongVRs[e.vr] {
			e.lenAt, e.lenSz, e.val = off+8, 4, off+12
			e.vl = w.u32(off + 8)
		} else {
			e.lenAt, e.lenSz, e.val = off+6, 2, off+8
			e.vl = uint32(w.u16(off + 6))
		}
		w.out = append(w.out, e)
		if e.vr == "SQ" {
			if e.vl == undefinedVL {
				off = w.items(e.val, -1, depth+1)
			} else {
				w.items(e.val, e.val+int(e.vl), depth+1)
				off = e.val + int(e.vl)
			}
			continue
		}
		if e.vl == undefinedVL {
			w.t.Fatalf("test file walk: undefined length on %v", e)
		}
		off = e.end()
	}
	return off
}

// items walks the items of a sequence.
func (w *dcmWalker) items(off, end, depth int) int {
	for end < 0 || off < end {
		tag := uint32(w.u16(off))<<16 | uint32(w.u16(off+2))
		it := dcmElem{tag: tag, depth: depth, hdr: off, val: off + 8, vl: w.u32(off + 4), lenAt: off + 4, lenSz: 4}
		w.out = append(w.out, it)
		switch {
		case tag == tagSeqDelim:
			return off + 8
		case tag != tagItem:
			w.t.Fatalf("test file walk: %v where an item was expected", it)
		case it.vl == undefinedVL:
			off = w.elements(it.val, -1, depth, false)
		default:
			w.elements(it.val, it.val+int(it.vl), depth, false)
			off = it.val + int(it.vl)
		}
	}
	return off
}

// walkDICOM lists every element header of a file with a 128-byte preamble,
// "DICM" and a file meta group (PS3.10 section 7.1) whose data set is
// explicit VR little endian, as dicomio's writers make them.
func walkDICOM(t *testing.T, data []byte) []dcmElem {
	t.Helper()
	if len(data) < 132 || string(data[128:132]) != "DICM" {
		t.Fatalf("test file walk: no DICM at offset 128")
	}
	w := &dcmWalker{t: t, data: data}
	off := w.elements(132, len(data), 0, true)
	for _, e := range w.out {
		if e.tag == 0x00020010 && strings.TrimRight(string(data[e.val:e.end()]), "\x00 ") != "1.2.840.10008.1.2.1" {
			t.Fatalf("test file walk: transfer syntax %q, want explicit VR little endian", data[e.val:e.end()])
		}
	}
	if end := w.elements(off, len(data), 0, false); end != len(data) {
		t.Fatalf("test file walk ended at %d of %d bytes", end, len(data))
	}
	return w.out
}

// findElem returns the nth (from 0) element with the tag.
func findElem(t *testing.T, data []byte, tag uint32, nth int) dcmElem {
	t.Helper()
	for _, e := range walkDICOM(t, data) {
		if e.tag == tag && !e.meta {
			if nth == 0 {
				return e
			}
			nth--
		}
	}
	t.Fatalf("test file has no element (%04X,%04X)", tag>>16, tag&0xFFFF)
	return dcmElem{}
}

// Tags (PS3.6) of the elements the tests look for.
const (
	tgGFOV          = 0x3004000C
	tgScaling       = 0x3004000E
	tgRTPlanSeq     = 0x300C0002
	tgPixelData     = 0x7FE00010
	tgROIContourSeq = 0x30060039
)

// ---------------------------------------------------------------------------
// The fixture and the contract.

// badFixture is the valid case the corpus damages (testdata/dicom/uniform:
// a flat 2 Gy reference, 12×12×8 voxels of 2 mm, inside a 22×22×18
// evaluated grid holding 2.04 Gy, so Γ = 0.667 everywhere and TG-218's
// rules are met; a structure set with PTV_1, a sphere of radius 5 mm at the
// origin), copied into a folder of the test (some tests name outputs
// beside it), and the bytes of each file, to be cut.
type badFixture struct {
	dir, ref, eval, rs           string
	refBytes, evalBytes, rsBytes []byte
	c                            *fixture.Case
}

func newBadFixture(t *testing.T) *badFixture {
	t.Helper()
	f := &badFixture{dir: t.TempDir(), c: fixture.LoadCase(t, "uniform")}
	p := fixture.Copy(t, f.dir, "dicom/uniform/RD_reference.dcm", "dicom/uniform/RD_evaluated.dcm", "dicom/uniform/RS.dcm")
	f.ref, f.eval, f.rs = p[0], p[1], p[2]
	f.refBytes, f.evalBytes, f.rsBytes = mustReadFile(t, f.ref), mustReadFile(t, f.eval), mustReadFile(t, f.rs)
	// The fixture itself must pass, or the refusals below prove nothing.
	vgExit(t, exitPass, "compare", "--reference", f.ref, "--evaluated", f.eval, "--structures", f.rs, "--quiet")
	return f
}

// corpus returns the path of a file of the bad-input corpus
// (testdata/bad-input), read in place: a test never writes there.
func corpus(t *testing.T, name string) string {
	t.Helper()
	return fixture.Path(t, "bad-input/"+name)
}

// file writes data as a new file of the test and returns its path.
func (f *badFixture) file(t *testing.T, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// args returns compare's arguments with the given reference, evaluated dose
// and structures ("" leaves --structures out).
func compareArgs(ref, eval, rs string, extra ...string) []string {
	a := []string{"compare", "--reference", ref, "--evaluated", eval}
	if rs != "" {
		a = append(a, "--structures", rs)
	}
	return append(a, extra...)
}

// withOutputs appends every output option, into the folder out.
func withOutputs(args []string, out string) []string {
	return append(append([]string{}, args...),
		"--json", filepath.Join(out, "r.json"), "--csv", filepath.Join(out, "r.csv"),
		"--gamma-map", filepath.Join(out, "gamma.dcm"), "--difference-map", filepath.Join(out, "diff.mha"),
		"--report", filepath.Join(out, "report.html"))
}

// refused runs compare with every output requested into a new folder and
// checks the contract of docs/bad-input.md (README "Exit status": 1, could
// not evaluate, one line on stderr): exit 1, exactly one line on stderr
// starting "voxgamma: " and naming each cause, and nothing written.
func refused(t *testing.T, args []string, cause ...string) invocation {
	t.Helper()
	out := t.TempDir()
	r := vgRun(t, withOutputs(args, out)...)
	if r.code != exitError {
		t.Errorf("exit %d, want 1 (could not evaluate)\n%s", r.code, r)
		return r
	}
	oneErrorLine(t, r, cause...)
	t.Logf("STDERR %s", r.stderr)
	if !strings.HasPrefix(r.stderr, "voxgamma: error: ") {
		t.Errorf("stderr %q does not start with \"voxgamma: error: \"", r.stderr)
	}
	if names := testDirNames(t, out); len(names) != 0 {
		t.Errorf("files left in the output folder: %v", names)
	}
	return r
}

// tagName is how the readers name a tag in messages (dicomio/tags.go):
// "(GGGG,EEEE)", preceded by its PS3.6 keyword when it has one there.
func tagName(tag uint32) string { return fmt.Sprintf("(%04X,%04X)", tag>>16, tag&0xFFFF) }

// ---------------------------------------------------------------------------
// Files that are not DICOM, cut short, of the wrong kind, or with lengths
// that cannot be.

// TestBadInputNotDICOM: files that are not DICOM at all (PS3.10 section
// 7.1: a DICOM file has "DICM" at offset 128; dicomio also reads a bare
// data set when its encoding is unambiguous, doc.go), in each role.
func TestBadInputNotDICOM(t *testing.T) {
	f := newBadFixture(t)
	// A line of text; an empty file; 4 KiB of a fixed pseudo-random
	// sequence (a linear congruential generator): binary junk that is no
	// data set.
	text, empty, noise := corpus(t, "text.dcm"), corpus(t, "empty.dcm"), corpus(t, "noise.dcm")
	for _, tc := range []struct {
		name string
		args []string
		file string
	}{
		{"text_as_reference", compareArgs(text, f.eval, ""), text},
		{"empty_as_reference", compareArgs(empty, f.eval, ""), empty},
		{"noise_as_reference", compareArgs(noise, f.eval, ""), noise},
		{"text_as_evaluated", compareArgs(f.ref, text, ""), text},
		{"empty_as_structures", compareArgs(f.ref, f.eval, empty), empty},
		{"noise_as_structures", compareArgs(f.ref, f.eval, noise), noise},
	} {
		t.Run(tc.name, func(t *testing.T) {
			refused(t, tc.args, "reading "+tc.file+": not a DICOM file")
		})
	}
	t.Run("folder_without_dose", func(t *testing.T) {
		dir := corpus(t, "folder_without_dose")
		refused(t, compareArgs(dir, f.eval, ""), dir)
	})
}

// cutPoint is one place to cut a file and what the error must name.
type cutPoint struct {
	at    int
	where string // "meta header", "element header", "value", "pixel data", "boundary"
	elem  dcmElem
}

// cutPoints returns, for every element of the file (file meta, top level,
// inside sequences, items and delimiters), a cut inside its header, a cut
// inside its value (the middle of the pixel data for PixelData) and a cut
// at its start (the file ends at an element boundary); plus cuts inside
// the preamble and inside "DICM".
func cutPoints(t *testing.T, data []byte) []cutPoint {
	t.Helper()
	cuts := []cutPoint{{at: 0, where: "preamble"}, {at: 64, where: "preamble"}, {at: 130, where: "DICM"}}
	for _, e := range walkDICOM(t, data) {
		hdrLen := e.val - e.hdr
		kind := "element header"
		if e.meta {
			kind = "meta header"
		}
		cuts = append(cuts, cutPoint{at: e.hdr, where: "boundary", elem: e}, cutPoint{at: e.hdr + hdrLen/2, where: kind, elem: e})
		if e.vl != undefinedVL && e.vl >= 2 {
			switch {
			case e.tag == tgPixelData:
				cuts = append(cuts, cutPoint{at: e.val + int(e.vl)/2, where: "pixel data", elem: e})
			case e.meta:
				cuts = append(cuts, cutPoint{at: e.val + int(e.vl)/2, where: "meta value", elem: e})
			default:
				cuts = append(cuts, cutPoint{at: e.val + int(e.vl)/2, where: "value", elem: e})
			}
		}
	}
	return cuts
}

// TestBadInputTruncatedDose: the uniform case's RT Dose (pydicom's), cut
// at every structural boundary and inside every header and value. Every cut
// is refused naming the file; a cut inside a top-level value names that
// element's tag (its length claims more bytes than the file holds, PS3.5
// section 7.1), a cut inside the pixel data names PixelData (7FE0,0010).
// No prefix of an RT Dose is a complete RT Dose: PixelData is its last
// element (PS3.5 section 7.1: elements in ascending tag order).
func TestBadInputTruncatedDose(t *testing.T) {
	f := newBadFixture(t)
	cuts := cutPoints(t, f.refBytes)
	seen := map[string]int{}
	for _, c := range cuts {
		seen[c.where]++
		path := f.file(t, "RD_cut.dcm", f.refBytes[:c.at])
		cause := []string{"reading " + path + ": "}
		if c.where == "value" && c.elem.depth == 0 || c.where == "pixel data" {
			cause = append(cause, tagName(c.elem.tag), "claims")
		}
		t.Run(fmt.Sprintf("%s_%d", strings.ReplaceAll(c.where, " ", "_"), c.at), func(t *testing.T) {
			r := refused(t, compareArgs(path, f.eval, ""), cause...)
			// The file has "DICM" at offset 128 (PS3.10 section 7.1): an
			// error saying it has not sends the user the wrong way.
			if c.at >= 132 && strings.Contains(r.stderr, `no "DICM" at offset 128`) {
				t.Errorf("BUG: a file cut at %d bytes, inside its file meta group, is reported as having no \"DICM\" at offset 128: %s", c.at, r.stderr)
			}
		})
	}
	for _, w := range []string{"meta header", "meta value", "element header", "value", "pixel data", "boundary"} {
		if seen[w] == 0 {
			t.Errorf("no cut %s: the walk found no such place", w)
		}
	}
}

// TestBadInputTruncatedStructures: an RT Structure Set cut inside every
// header and every value (including inside sequences and items), given as
// --structures: refused naming the file. Cuts at a top-level element
// boundary are not bad input the reader can see (the file is then a
// complete data set without the later modules) and are documented in
// docs/bad-input.md rather than tested here.
func TestBadInputTruncatedStructures(t *testing.T) {
	f := newBadFixture(t)
	n := 0
	for _, c := range cutPoints(t, f.rsBytes) {
		if c.where == "boundary" && c.elem.depth == 0 {
			continue
		}
		n++
		path := f.file(t, "RS_cut.dcm", f.rsBytes[:c.at])
		t.Run(fmt.Sprintf("%s_%d", strings.ReplaceAll(c.where, " ", "_"), c.at), func(t *testing.T) {
			refused(t, compareArgs(f.ref, f.eval, path), "reading "+path+": ")
		})
	}
	if n < 50 {
		t.Errorf("only %d cuts: the structure set walk found too few elements", n)
	}
	// A structure set ending at a top-level element boundary is a complete
	// data set without the modules after the cut: no reader can tell it
	// from a file written without them. Without the RT ROI Observations
	// module (mandatory in the RT Structure Set IOD, PS3.3 A.19) the ROIs have no interpreted type
	// and take their kind from the protocol's name rules (tg218: PTV* is a
	// target); without the ROI Contour module (mandatory too) every ROI is
	// "not evaluated: no contours", and a target that is not evaluated
	// fails its rule (protocol/evaluate.go): exit 2, never a pass.
	t.Run("boundary_before_RTROIObservationsSequence", func(t *testing.T) {
		e := findElem(t, f.rsBytes, 0x30060080, 0)
		p := f.file(t, "RS_noobs.dcm", f.rsBytes[:e.hdr])
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitPass, compareArgs(f.ref, f.eval, p, "--json", out, "--quiet")...)
		roi := resultROI(t, readResultJSON(t, out), "PTV_1")
		if roi.InterpretedType != "" || roi.Kind != "target" || roi.Status != "evaluated" {
			t.Errorf("PTV_1: type %q kind %q status %q; want none, target (name rule), evaluated", roi.InterpretedType, roi.Kind, roi.Status)
		}
	})
	t.Run("boundary_before_ROIContourSequence", func(t *testing.T) {
		e := findElem(t, f.rsBytes, tgROIContourSeq, 0)
		p := f.file(t, "RS_nocontours.dcm", f.rsBytes[:e.hdr])
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitRuleFail, compareArgs(f.ref, f.eval, p, "--json", out, "--quiet")...)
		if roi := resultROI(t, readResultJSON(t, out), "PTV_1"); roi.Status != "not evaluated: no contours" {
			t.Errorf("PTV_1: status %q, want not evaluated: no contours", roi.Status)
		}
	})
}

// pydicomFile returns one of the pydicom project's test files as Debian's
// python3-pydicom installs them; skipped when absent, failed when CI is set
// (DEVELOPERS.md).
func pydicomFile(t *testing.T, name string) string {
	t.Helper()
	p := filepath.Join("/usr/lib/python3/dist-packages/pydicom/data/test_files", name)
	if _, err := os.Stat(p); err != nil {
		msg := fmt.Sprintf("pydicom test file %s is not available (%v): apt-get install python3-pydicom", name, err)
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	return p
}

// TestBadInputWrongModality: DICOM files of another kind. Modality
// (0008,0060) must be RTDOSE for a dose and RTSTRUCT for a structure set
// (PS3.3 A.18 and A.19: RT Series module C.8.8.1, Modality enumerated
// values).
func TestBadInputWrongModality(t *testing.T) {
	f := newBadFixture(t)
	// An image: the dose file with Modality CT (PS3.3 C.7.3.1.1.1 defined
	// term for computed tomography).
	ct := corpus(t, "Modality_CT.dcm")
	t.Run("CT_as_reference", func(t *testing.T) {
		refused(t, compareArgs(ct, f.eval, ""), ct, "Modality (0008,0060): is CT, want RTDOSE")
	})
	t.Run("structure_set_as_evaluated", func(t *testing.T) {
		refused(t, compareArgs(f.ref, f.rs, ""), f.rs, "Modality (0008,0060): is RTSTRUCT, want RTDOSE")
	})
	t.Run("dose_as_structures", func(t *testing.T) {
		refused(t, compareArgs(f.ref, f.eval, f.eval), f.eval, "Modality (0008,0060): is RTDOSE, want RTSTRUCT")
	})
	t.Run("no_Modality", func(t *testing.T) {
		p := corpus(t, "Modality_missing.dcm")
		refused(t, compareArgs(p, f.eval, ""), p, "Modality (0008,0060): missing")
	})
	t.Run("pydicom_rtplan_as_reference", func(t *testing.T) {
		p := pydicomFile(t, "rtplan.dcm")
		refused(t, compareArgs(p, f.eval, ""), p, "Modality (0008,0060): is RTPLAN, want RTDOSE")
	})
	t.Run("pydicom_CT_small_as_evaluated", func(t *testing.T) {
		p := pydicomFile(t, "CT_small.dcm")
		refused(t, compareArgs(f.ref, p, ""), p, "Modality (0008,0060): is CT, want RTDOSE")
	})
	t.Run("pydicom_CT_small_as_structures", func(t *testing.T) {
		p := pydicomFile(t, "CT_small.dcm")
		refused(t, compareArgs(f.ref, f.eval, p), p, "Modality (0008,0060): is CT, want RTSTRUCT")
	})
}

// TestBadInputLengths: value lengths that exceed the file or their
// container, or an element count that cannot fit (PS3.5 section 7.1: the
// value length is the number of bytes of the value; 0xFFFFFFFF, undefined
// length, only for SQ, items and OB/OW/UN, PS3.5 section 7.1.2 and 7.5).
func TestBadInputLengths(t *testing.T) {
	f := newBadFixture(t)
	refuseReferences(t, f, []corpusFile{
		// A 4-byte length (OW) beyond the end of the file.
		{"PixelData_length_beyond_file", []string{"PixelData (7FE0,0010): claims 4294967280 bytes"}},
		// A 2-byte length (DS) running past the element after it, into
		// the pixel data: the following "element" is garbage.
		{"DS_length_overruns", []string{"offset"}},
		// The item of ReferencedRTPlanSequence claims more than the file.
		{"item_length_beyond_file", []string{"ReferencedRTPlanSequence (300C,0002)", "claims 2147483632 bytes"}},
		// A file meta element claims more than the file.
		{"meta_length_beyond_file", []string{"(0002,0003)", "claims 65520 bytes"}},
		// Rows × Columns × NumberOfFrames = 65535 × 65535 × 99999 voxels
		// of 2 bytes in a file of a few kB: refused before allocating.
		{"voxel_count_beyond_file", []string{"Rows (0028,0010) × Columns (0028,0011) × NumberOfFrames (0028,0008) = 65535 × 65535 × 99999 voxels", "cannot fit in the"}},
		// NumberOfFrames beyond a 32-bit integer.
		{"NumberOfFrames_overflow", []string{"NumberOfFrames (0028,0008)"}},
		{"NumberOfFrames_negative", []string{"NumberOfFrames (0028,0008): is -8"}},
	})
}
