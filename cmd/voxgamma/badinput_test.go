package main

// Bad input through the real command (docs/bad-input.md): every class of
// input voxgamma cannot evaluate is fed to `voxgamma compare` in-process
// through run, and a handful through the built binary, and each must end
// with exit status 1, exactly one line on stderr starting "voxgamma: " that
// names the file and, where one is to blame, the DICOM tag or the option,
// and no output file. A verification tool that reports on input it misread
// is a hazard; one that refuses it is an annoyance.
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
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
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

// ---------------------------------------------------------------------------
// Criteria and options.

// TestBadInputOptions: criteria and options out of range. Γ needs Δd > 0
// and ΔD > 0 (Low et al., Med Phys 25 (1998) 656: they divide); the
// low-dose threshold is a percentage of the normalisation dose, from 0 to
// below 100 (README, compare --help); a normalisation dose and a search
// distance are positive lengths and doses. Each refusal names the option.
func TestBadInputOptions(t *testing.T) {
	f := newBadFixture(t)
	base := compareArgs(f.ref, f.eval, f.rs)
	// 400 digits: a number the regular expression accepts but float64
	// cannot hold (it parses as +Inf).
	huge := "1" + strings.Repeat("0", 400)
	for _, tc := range []struct {
		name  string
		opts  []string
		cause []string
	}{
		{"criteria_DTA_zero", []string{"--criteria", "3%/0mm"}, []string{"--criteria", "3%/0mm", "DTA must be above 0 mm"}},
		{"criteria_DTA_negative", []string{"--criteria", "3%/-2mm"}, []string{"--criteria", "3%/-2mm"}},
		{"criteria_dose_zero", []string{"--criteria", "0%/2mm"}, []string{"--criteria", "0%/2mm", "dose criterion must be above 0 %"}},
		{"criteria_dose_negative", []string{"--criteria", "-3%/2mm"}, []string{"--criteria", "-3%/2mm"}},
		{"criteria_no_units", []string{"--criteria", "3/2"}, []string{"--criteria", `"3/2"`, "want the form DOSE%/DTAmm"}},
		{"criteria_NaN", []string{"--criteria", "NaN%/2mm"}, []string{"--criteria", "NaN%/2mm"}},
		{"criteria_dose_overflows", []string{"--criteria", huge + "%/2mm"}, []string{"--criteria"}},
		{"criteria_DTA_overflows", []string{"--criteria", "3%/" + huge + "mm"}, []string{"--criteria"}},
		{"threshold_100", []string{"--threshold", "100"}, []string{"--threshold 100", "want a percentage from 0 to below 100"}},
		{"threshold_150", []string{"--threshold", "150"}, []string{"--threshold 150"}},
		{"threshold_negative", []string{"--threshold", "-1"}, []string{"--threshold -1"}},
		{"threshold_NaN", []string{"--threshold", "NaN"}, []string{"--threshold NaN"}},
		{"norm_dose_zero", []string{"--norm-dose", "0"}, []string{"--norm-dose 0", "want a dose above 0 Gy"}},
		{"norm_dose_negative", []string{"--norm-dose", "-2"}, []string{"--norm-dose -2"}},
		{"norm_dose_NaN", []string{"--norm-dose", "NaN"}, []string{"--norm-dose NaN"}},
		{"norm_dose_Inf", []string{"--norm-dose", "Inf"}, []string{"--norm-dose"}},
		{"search_zero", []string{"--search", "0"}, []string{"--search 0", "want a distance above 0 mm"}},
		{"search_negative", []string{"--search", "-6"}, []string{"--search -6"}},
		{"search_NaN", []string{"--search", "NaN"}, []string{"--search NaN"}},
		{"search_Inf", []string{"--search", "Inf"}, []string{"--search"}},
		{"workers_negative", []string{"--workers", "-1"}, []string{"--workers -1"}},
		{"subgrid_step_negative", []string{"--subgrid", "PTV_1", "--subgrid-step", "-0.5"}, []string{"--subgrid-step -0.5"}},
		{"isodose_zero", []string{"--isodose", "0"}, []string{"--isodose", "isodose level 0 %"}},
		{"isodose_above_100", []string{"--isodose", "150"}, []string{"--isodose", "isodose level 150 %"}},
		{"v_dose_negative", []string{"--v-dose", "-1"}, []string{"--v-dose -1"}},
		{"min_cluster_negative", []string{"--min-cluster", "-1"}, []string{"--min-cluster -1"}},
		{"kind_unknown", []string{"--kind", "PTV*=tumour"}, []string{"--kind", "PTV*=tumour"}},
		{"protocol_unknown", []string{"--protocol", "no-such-protocol"}, []string{"--protocol", "no-such-protocol"}},
		{"option_unknown", []string{"--tolerance", "3"}, []string{"--tolerance"}},
		{"interpolation_unknown", []string{"--interpolation", "bicubic"}, []string{"--interpolation", `"bicubic"`, "cubic-bspline, trilinear, linear-simplex"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			refused(t, append(append([]string{}, base...), tc.opts...), tc.cause...)
		})
	}
}

// unwritableDir returns a folder the running process cannot create files
// in: a folder without write permission, or, for root (whom permission
// bits do not stop: CAP_DAC_OVERRIDE, capabilities(7)), /sys, where no
// file can be created (sysfs). Skipped when neither works.
func unwritableDir(t *testing.T) string {
	t.Helper()
	cands := []string{}
	d := t.TempDir()
	if err := os.Chmod(d, 0o555); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.Chmod(d, 0o755) })
	cands = append(cands, d, "/sys")
	for _, c := range cands {
		probe, err := os.CreateTemp(c, "probe-*")
		if err != nil {
			return c
		}
		probe.Close()
		os.Remove(probe.Name())
	}
	t.Skip("no unwritable folder found (running as root, and /sys is writable)")
	return ""
}

// TestBadInputOutputs: outputs that cannot or must not be written. Every
// output is checked before any computation (job.Outputs.Check), so a
// refusal leaves nothing behind and never touches an input.
func TestBadInputOutputs(t *testing.T) {
	f := newBadFixture(t)
	base := compareArgs(f.ref, f.eval, f.rs)
	t.Run("unwritable_folder", func(t *testing.T) {
		dir := unwritableDir(t)
		p := filepath.Join(dir, "vg-result.json")
		r := vgRun(t, append(append([]string{}, base...), "--json", p)...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "output "+p, "directory "+dir+" is not writable")
		if _, err := os.Stat(p); err == nil {
			t.Errorf("%s was written", p)
		}
	})
	inputs := map[string]string{"reference": f.ref, "evaluated": f.eval, "structures": f.rs}
	sums := map[string][32]byte{}
	for _, p := range inputs {
		sums[p] = sha256File(t, p)
	}
	// An alias of the reference: a symbolic link to it, and the same path
	// spelled through "..".
	link := filepath.Join(t.TempDir(), "alias.json")
	if err := os.Symlink(f.ref, link); err != nil {
		t.Fatal(err)
	}
	dotted := filepath.Join(f.dir, "..", filepath.Base(f.dir), filepath.Base(f.eval))
	for _, tc := range []struct {
		name, flag, path string
	}{
		{"json_is_reference", "--json", f.ref},
		{"gamma_map_is_evaluated", "--gamma-map", f.eval},
		{"csv_is_structures", "--csv", f.rs},
		{"difference_map_is_reference_via_dotdot", "--difference-map", filepath.Join(f.dir, "..", filepath.Base(f.dir), filepath.Base(f.ref))},
		{"report_is_symlink_to_reference", "--report", link},
		{"json_is_evaluated_via_dotdot", "--json", dotted},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for _, force := range []bool{false, true} {
				args := append(append([]string{}, base...), tc.flag, tc.path)
				if force {
					args = append(args, "--force")
				}
				r := vgRun(t, args...)
				if r.code != exitError {
					t.Errorf("force %v: exit %d, want 1\n%s", force, r.code, r)
					continue
				}
				oneErrorLine(t, r, "output "+tc.path, "is an input file")
			}
			for _, p := range inputs {
				if sha256File(t, p) != sums[p] {
					t.Errorf("input %s was changed", p)
				}
			}
		})
	}
	t.Run("output_named_twice", func(t *testing.T) {
		out := t.TempDir()
		p := filepath.Join(out, "r.out")
		r := vgRun(t, append(append([]string{}, base...), "--json", p, "--csv", p)...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, p, "named twice")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left: %v", names)
		}
	})
	t.Run("output_is_a_folder", func(t *testing.T) {
		dir := t.TempDir()
		r := vgRun(t, append(append([]string{}, base...), "--json", dir, "--force")...)
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "output "+dir+" is a directory")
	})
}

// ---------------------------------------------------------------------------
// Inputs that leave nothing to compare.

// TestBadInputNothingToCompare: valid files whose comparison evaluates no
// point. The low-dose threshold is a percentage of the normalisation dose
// (TG-218, Miften et al., Med Phys 45 (2018) e53); a point outside the
// evaluated grid is not evaluated (gamma/doc.go). A comparison of nothing
// has no pass rate and must not pass (README: "nothing evaluated exits 1").
func TestBadInputNothingToCompare(t *testing.T) {
	f := newBadFixture(t)
	t.Run("no_point_above_threshold", func(t *testing.T) {
		// --norm-dose 100 Gy: the threshold is 10 Gy, above the 2 Gy
		// reference everywhere. 100 Gy is 50 × the reference maximum, so
		// it is refused as implausible unless accepted explicitly (see
		// TestNormDoseBand); accepted, nothing is evaluated.
		refused(t, compareArgs(f.ref, f.eval, f.rs, "--norm-dose", "100", "--accept-norm-dose"), "nothing was evaluated")
	})
	t.Run("evaluated_grid_elsewhere", func(t *testing.T) {
		// The evaluated grid 22×22×18 voxels of 2 mm at x from 179 to 221
		// mm: 168 mm from the reference grid (x from −11 to 11 mm).
		far := corpus(t, "evaluated_grid_elsewhere.dcm")
		refused(t, compareArgs(f.ref, far, ""), "the evaluated grid covers none of the reference high-dose region", filepath.Base(far))
	})
	t.Run("evaluated_grid_partly_outside", func(t *testing.T) {
		// The evaluated grid covers x ≤ 1 mm only (centres −21 to 1):
		// the reference voxels at x = 3 to 11 mm, 5 of 12 columns, lie
		// outside it. Not bad input: evaluated, with a warning and the
		// count of points outside (gamma/doc.go: "counted separately,
		// never passed").
		half := corpus(t, "evaluated_grid_partly_outside.dcm")
		out := filepath.Join(t.TempDir(), "r.json")
		r := vgRun(t, compareArgs(f.ref, half, "", "--no-structures", "--json", out)...)
		// Every evaluated point passes (Γ = 0.667), but 5 of 12 columns
		// were never compared: coverage 58 % < 99.5 %, a rule of every
		// preset: exit 2 (docs/bad-input.md, "Ways a pass could be
		// wrong").
		if r.code != exitRuleFail {
			t.Fatalf("exit %d, want 2 (coverage below 99.5 %%)\n%s", r.code, r)
		}
		res := readResultJSON(t, out)
		if want := 5 * 12 * 8; res.Overall.OutsideEvaluated != want || res.Overall.Evaluated != 7*12*8 {
			t.Errorf("outside %d, evaluated %d; want %d and %d", res.Overall.OutsideEvaluated, res.Overall.Evaluated, want, 7*12*8)
		}
		for _, w := range []string{"lie outside the evaluated grid: not evaluated", "of the reference high-dose region"} {
			found := false
			for _, x := range res.Warnings {
				found = found || strings.Contains(x, w)
			}
			if !found {
				t.Errorf("no warning %q in the result: %q", w, res.Warnings)
			}
			if !strings.Contains(r.stderr, w) {
				t.Errorf("no warning %q on stderr:\n%s", w, r)
			}
		}
		t.Logf("exit %d with %d of %d reference points above the threshold outside the evaluated grid, verdict %q (pass rates count evaluated points only)",
			r.code, res.Overall.OutsideEvaluated, res.Overall.OutsideEvaluated+res.Overall.Evaluated, res.Verdict)
	})
	t.Run("all_zero_reference", func(t *testing.T) {
		zero := corpus(t, "all_zero_reference.dcm")
		refused(t, compareArgs(zero, f.eval, ""), "no positive value", filepath.Base(zero))
	})
}

// TestBadInputSearchBelowGridSpacing: a search distance R too short to
// find Γ. Checked on the closed form of the shifted linear field
// (NOTES.md; derivation in e2e_helpers_test.go, shiftGamma): reference
// D = a + g·(n·x), evaluated the same field shifted by s = 3 mm along n,
// 3 %/2 mm global with D_norm = 10 Gy (ΔD = 0.3 Gy, ΔD/g = 3 mm). Every
// point has Γ = s/√(Δd² + (ΔD/g)²) = 3/√13 = 0.832 and passes; the minimum
// lies t = s·Δd²/(Δd² + (ΔD/g)²) = 12/13 = 0.923 mm from the point, along
// n.
//
//   - --search 1 mm on a 2 mm evaluated grid: below the grid spacing.
//     voxgamma refuses it (analysis/run.go, since commit 2277b3b).
//   - --search 0.6 mm on a 0.5 mm evaluated grid: not below the spacing,
//     but below the DTA and below t. No Γ below R/Δd = 0.3 lies within
//     0.6 mm, so every point is "capped": failed, and reported as Γ = 0.3
//     (gamma/doc.go). The truth is 100 % pass. A search distance below Δd
//     can miss a passing point (a minimum with Γ ≤ 1 lies within Γ·Δd ≤ Δd
//     of the point, since the spatial term alone is at most Γ), so R ≥ Δd
//     is what guarantees that every pass is found; below it voxgamma must
//     refuse, or at least warn, and must never report a failed point with
//     Γ ≤ 1.
//   - The same at 3 %/3 mm under the epid-invivo-example protocol (mean Γ
//     ≤ 0.5 inside the 50 % isodose): the truth is Γ = 3/√(9 + 9) = 0.707
//     everywhere, so the rule is not met (exit 2); with --search 0.6 every
//     point is capped and reported as Γ = 0.2, and the rule is met: a
//     false pass.
func TestBadInputSearchBelowGridSpacing(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	const s = 3.0
	shifted := func(p [3]float64) float64 { return rampDose(p) - rampG*s }
	ref := filepath.Join(dir, "RD_ref.dcm")
	writeTestDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, rampDose, ids)
	coarse, fine := filepath.Join(dir, "RD_eval_2mm.dcm"), filepath.Join(dir, "RD_eval_0.5mm.dcm")
	writeTestDose(t, coarse, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, shifted, ids)
	// 0.5 mm grid over x, y from −12.25 to 12.25 mm and z from −8.25 to
	// 8.25 mm: it covers the reference grid and a search of 1.25 mm.
	writeTestDose(t, fine, [3]int{50, 50, 34}, [3]float64{-12.25, -12.25, -8.25}, [3]float64{0.5, 0.5, 0.5}, shifted, ids)
	want := shiftGamma(s, cfDTA, cfDelta*cfNorm, rampG)
	if math.Abs(want-3/math.Sqrt(13)) > 1e-12 {
		t.Fatalf("closed form %v, want 3/√13", want)
	}
	// The truth first: with the default search (3 × DTA = 6 mm) every
	// point passes with Γ = 0.832 (quantisation of the files moves Γ by
	// less than 0.002: DoseGridScaling ≤ 12 Gy/65535, over ΔD = 0.3 Gy).
	for _, eval := range []string{coarse, fine} {
		out := filepath.Join(t.TempDir(), "r.json")
		vgExit(t, exitPass, "compare", "--reference", ref, "--evaluated", eval, "--no-structures", "--criteria", "3%/2mm", "--norm-dose", "10", "--json", out, "--quiet")
		res := readResultJSON(t, out)
		checkNear(t, filepath.Base(eval)+" Γ max", res.Overall.GammaMax, want, 0.002)
		checkNear(t, filepath.Base(eval)+" pass rate", res.Overall.PassRate, 100, 0)
	}
	for _, tc := range []struct {
		name, eval, search string
	}{
		{"search_1mm_on_2mm_grid", coarse, "1"},
		{"search_0.6mm_below_DTA_on_0.5mm_grid", fine, "0.6"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "r.json")
			r := vgRun(t, "compare", "--reference", ref, "--evaluated", tc.eval, "--criteria", "3%/2mm", "--norm-dose", "10",
				"--search", tc.search, "--json", out)
			if r.code == exitError {
				// Refused: the line must name the option.
				oneErrorLine(t, r, "--search")
				if _, err := os.Stat(out); err == nil {
					t.Errorf("refused, but %s was written", out)
				}
				return
			}
			res := readResultJSON(t, out)
			t.Logf("--search %s: exit %d, evaluated %d, passed %d, capped %d, Γ mean %v max %v (closed form %.3f, all pass), warnings %q",
				tc.search, r.code, res.Overall.Evaluated, res.Overall.Passed, res.Overall.Capped,
				jsonNum(res.Overall.GammaMean), jsonNum(res.Overall.GammaMax), want, res.Warnings)
			if res.Overall.Capped > 0 && jsonNum(res.Overall.GammaMax) <= 1 {
				t.Errorf("BUG: %d points capped at the search distance are failed but reported with Γ ≤ 1 (Γ max %v): the pass rate %v %% and the Γ statistics contradict each other",
					res.Overall.Capped, jsonNum(res.Overall.GammaMax), jsonNum(res.Overall.PassRate))
			}
			warned := false
			for _, w := range res.Warnings {
				// Not the note that the criteria differ from the protocol's.
				warned = warned || strings.Contains(w, "search") && !strings.HasPrefix(w, "criteria differ from protocol")
			}
			if pr := jsonNum(res.Overall.PassRate); pr != 100 && !warned {
				t.Errorf("BUG: --search %s mm (DTA 2 mm) gives a pass rate of %v %% where every point passes (Γ = %.3f), without a warning (exit %d)",
					tc.search, pr, want, r.code)
			}
		})
	}
}

// TestBadInputSearchFalsePass: the third case of
// TestBadInputSearchBelowGridSpacing, under a protocol whose rules are on
// Γ statistics.
func TestBadInputSearchFalsePass(t *testing.T) {
	dir := t.TempDir()
	ids := phantomIDs()
	const s = 3.0
	ref, fine := filepath.Join(dir, "RD_ref.dcm"), filepath.Join(dir, "RD_eval_0.5mm.dcm")
	writeTestDose(t, ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, rampDose, ids)
	writeTestDose(t, fine, [3]int{50, 50, 34}, [3]float64{-12.25, -12.25, -8.25}, [3]float64{0.5, 0.5, 0.5},
		func(p [3]float64) float64 { return rampDose(p) - rampG*s }, ids)
	// 3 %/3 mm, D_norm 10 Gy: ΔD/g = 3 mm, Γ = 3/√18 = 0.707 (shiftGamma).
	want := shiftGamma(s, 3, cfDelta*cfNorm, rampG)
	args := []string{"compare", "--reference", ref, "--evaluated", fine, "--protocol", "epid-invivo-example", "--norm-dose", "10", "--quiet"}
	out := filepath.Join(t.TempDir(), "truth.json")
	vgExit(t, exitRuleFail, append(args, "--json", out)...)
	iso := resultROI(t, readResultJSON(t, out), "isodose 50% of 10 Gy")
	checkNear(t, "50 % isodose Γ mean (default search 9 mm)", iso.GammaMean, want, 0.002)
	r := vgRun(t, append(args, "--search", "0.6", "--json", filepath.Join(t.TempDir(), "r.json"))...)
	switch r.code {
	case exitError:
		oneErrorLine(t, r, "--search")
	case exitPass:
		t.Errorf("BUG: --search 0.6 mm turns a failing comparison (mean Γ %.3f > 0.5) into a pass: every point capped and reported as Γ = 0.2\n%s", want, r)
	}
}

// TestBadInputPartialOutput: an error met while writing the outputs must
// not leave some of them behind (README: exit 1 "an output that could not
// be written"; job.Write writes JSON, CSV, maps, report in turn). The
// reference dose has no StudyInstanceUID (0020,000D) and no
// FrameOfReferenceUID (0020,0052): readable (the missing frame is a
// warning, dicomio/check.go), but an RT Dose map written with its
// identifiers lacks type 1 attributes (PS3.3 C.7.2.1 StudyInstanceUID,
// C.7.4.1 FrameOfReferenceUID), which dicomio.WriteDose refuses.
func TestBadInputPartialOutput(t *testing.T) {
	f := newBadFixture(t)
	ref := corpus(t, "no_StudyInstanceUID_no_FrameOfReferenceUID.dcm")
	out := t.TempDir()
	r := vgRun(t, withOutputs(compareArgs(ref, f.eval, "", "--quiet", "--no-structures"), out)...)
	switch r.code {
	case exitError:
		oneErrorLine(t, r, "gamma.dcm")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("BUG: exit 1, yet the outputs written before the failure are left behind: %v\n%s", names, r)
		}
	case exitPass:
		// Writing the map anyway (with new UIDs, say) is a fix too: then
		// every output must be there.
		if names := testDirNames(t, out); len(names) != 5 {
			t.Errorf("exit 0 with outputs %v, want all five", names)
		}
	default:
		t.Errorf("exit %d\n%s", r.code, r)
	}
}

// TestBadInputReferencePoints: a detector array's measured points
// (--reference-points, CSV with the header x_mm,y_mm,z_mm,dose_gy,
// analysis/load.go) that cannot be read. The CSV syntax is RFC 4180's as
// encoding/csv reads it (a quote may only open a quoted field).
func TestBadInputReferencePoints(t *testing.T) {
	f := newBadFixture(t)
	dir := t.TempDir()
	csvFile := func(name, content string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	for _, tc := range []struct {
		name, content string
		cause         []string
	}{
		// Found by FuzzParsePoints (analysis/testdata/fuzz/FuzzParsePoints):
		// a CSV syntax error in a data row.
		{"bare_quote_in_row", "x_mm,y_mm,z_mm,dose_gy\n0\"0000000\n", []string{"bare_quote.csv", "line 2"}},
		{"NaN_dose", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,NaN\n", []string{"NaN_dose.csv line 2: dose_gy \"NaN\" is not a finite number"}},
		{"negative_dose", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,-1\n", []string{"negative_dose.csv line 2: negative dose -1 Gy"}},
		{"three_fields", "x_mm,y_mm,z_mm,dose_gy\n0,0,0\n", []string{"three_fields.csv line 2: 3 fields, want 4"}},
		{"wrong_header", "x,y,z,dose\n0,0,0,1\n", []string{"wrong_header.csv: header \"x,y,z,dose\", want x_mm,y_mm,z_mm,dose_gy"}},
		{"no_points", "x_mm,y_mm,z_mm,dose_gy\n", []string{"no_points.csv: no points after the header"}},
		// Points 500 mm away from the evaluated grid: nothing evaluated.
		{"all_outside_evaluated_grid", "x_mm,y_mm,z_mm,dose_gy\n500,0,0,2\n501,0,0,2\n", []string{"nothing was evaluated"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			file := strings.TrimSuffix(tc.name, "_in_row") + ".csv"
			p := csvFile(file, tc.content)
			out := t.TempDir()
			r := vgRun(t, "compare", "--reference-points", p, "--evaluated", f.eval, "--json", filepath.Join(out, "r.json"), "--csv", filepath.Join(out, "r.csv"))
			if r.code != exitError {
				t.Fatalf("exit %d, want 1\n%s", r.code, r)
			}
			oneErrorLine(t, r, tc.cause...)
			if strings.Contains(r.stderr, "internal error") {
				t.Errorf("BUG: %s: the command panicked (recovered as an internal error): %s", file, r.stderr)
			}
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}
	t.Run("points_with_structures", func(t *testing.T) {
		p := csvFile("points.csv", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,2\n")
		out := t.TempDir()
		r := vgRun(t, "compare", "--reference-points", p, "--evaluated", f.eval, "--structures", f.rs, "--json", filepath.Join(out, "r.json"))
		if r.code != exitError {
			t.Fatalf("exit %d, want 1\n%s", r.code, r)
		}
		oneErrorLine(t, r, "structures cannot be used with reference points")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder: %v", names)
		}
	})
	t.Run("points_with_gamma_map", func(t *testing.T) {
		p := csvFile("points2.csv", "x_mm,y_mm,z_mm,dose_gy\n0,0,0,2\n")
		refused(t, []string{"compare", "--reference-points", p, "--evaluated", f.eval}, "--gamma-map, --difference-map, --report and --report-pdf need a reference grid")
	})
}

// ---------------------------------------------------------------------------
// The exit status of the process itself.

// TestBadInputBinary: a handful of the classes above through the built
// binary, so that exit status 1 and the one line on stderr are the
// process's own (README "Exit status").
func TestBadInputBinary(t *testing.T) {
	bin := buildBinary(t)
	f := newBadFixture(t)
	cut := corpus(t, "truncated_in_PixelData.dcm")
	nanScale := corpus(t, "DoseGridScaling_NaN.dcm")
	far := corpus(t, "evaluated_grid_elsewhere.dcm")
	rsNaN := corpus(t, "NaN_coordinate.dcm")
	for _, tc := range []struct {
		name  string
		args  []string
		cause []string
	}{
		{"truncated_in_pixel_data", compareArgs(cut, f.eval, ""), []string{cut, "PixelData (7FE0,0010): claims"}},
		{"DoseGridScaling_NaN", compareArgs(nanScale, f.eval, ""), []string{nanScale, "DoseGridScaling (3004,000E): is NaN"}},
		{"structures_NaN_coordinate", compareArgs(f.ref, f.eval, rsNaN), []string{rsNaN, "ContourData (3006,0050)", "NaN"}},
		{"no_point_above_threshold", compareArgs(f.ref, f.eval, f.rs, "--norm-dose", "100", "--accept-norm-dose"), []string{"nothing was evaluated"}},
		{"grids_do_not_overlap", compareArgs(f.ref, far, ""), []string{"covers none of the reference high-dose region"}},
		{"threshold_150", compareArgs(f.ref, f.eval, "", "--threshold", "150"), []string{"--threshold 150"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := t.TempDir()
			r := execBinary(t, bin, withOutputs(tc.args, out)...)
			if r.code != exitError {
				t.Fatalf("exit %d, want 1\n%s", r.code, r)
			}
			oneErrorLine(t, r, tc.cause...)
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}
	t.Run("unwritable_folder", func(t *testing.T) {
		// A folder without write permission. Root ignores permission bits
		// (capabilities(7), CAP_DAC_OVERRIDE), so as root the binary runs
		// as nobody (65534), with the inputs and the binary readable by
		// all.
		base := t.TempDir()
		for _, d := range []string{filepath.Dir(base), base} {
			if err := os.Chmod(d, 0o755); err != nil {
				t.Fatal(err)
			}
		}
		in := filepath.Join(base, "in")
		out := filepath.Join(base, "out")
		for _, d := range []string{in, out} {
			if err := os.Mkdir(d, 0o755); err != nil {
				t.Fatal(err)
			}
		}
		for name, b := range map[string][]byte{"ref.dcm": f.refBytes, "eval.dcm": f.evalBytes} {
			if err := os.WriteFile(filepath.Join(in, name), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		binCopy := filepath.Join(base, "voxgamma")
		if err := os.WriteFile(binCopy, mustReadFile(t, bin), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.Chmod(out, 0o555); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { os.Chmod(out, 0o755) })
		p := filepath.Join(out, "r.json")
		cmd := exec.Command(binCopy, "compare", "--reference", filepath.Join(in, "ref.dcm"), "--evaluated", filepath.Join(in, "eval.dcm"), "--json", p)
		if os.Geteuid() == 0 {
			cmd.SysProcAttr = &syscall.SysProcAttr{Credential: &syscall.Credential{Uid: 65534, Gid: 65534}}
		}
		var o, e bytes.Buffer
		cmd.Stdout, cmd.Stderr = &o, &e
		err := cmd.Run()
		if cmd.ProcessState == nil {
			t.Fatalf("running %s: %v", binCopy, err)
		}
		r := invocation{args: cmd.Args[1:], code: cmd.ProcessState.ExitCode(), stdout: o.String(), stderr: e.String()}
		if r.code != exitError {
			t.Fatalf("exit %d (%v), want 1\n%s", r.code, err, r)
		}
		oneErrorLine(t, r, "output "+p, "directory "+out+" is not writable")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder: %v", names)
		}
	})
}
