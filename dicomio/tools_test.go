package dicomio_test

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"

	"voxgamma/internal/reftool"
)

// installHint says how to get every external reference tool the tests use.
const installHint = "apt-get install python3-pydicom python3-numpy dcmtk dicom3tools"

// missingTool fails the test on CI (where the tools must be installed) and
// skips it elsewhere.
func missingTool(t *testing.T, what string, err error) {
	t.Helper()
	reftool.Missing(t, what, err, installHint)
}

// requireTool returns the path of an external program (dcmdump, dcmftest,
// dciodvfy).
func requireTool(t *testing.T, name string) string {
	t.Helper()
	return reftool.Program(t, name, installHint)
}

var (
	dataDirOnce    sync.Once
	pydicomDataDir string
	dataDirErr     error
)

// requirePython returns a python3 that imports pydicom and numpy, and
// finds where Debian's python3-pydicom keeps the pydicom project's test
// files.
func requirePython(t *testing.T) string {
	t.Helper()
	py := reftool.Python(t, installHint, "pydicom", "numpy")
	dataDirOnce.Do(func() {
		out, err := exec.Command(py, "-c", "import os, pydicom; print(os.path.join(os.path.dirname(pydicom.__file__), 'data', 'test_files'))").CombinedOutput()
		if err != nil {
			dataDirErr = fmt.Errorf("%s: %v: %s", py, err, strings.TrimSpace(string(out)))
			return
		}
		pydicomDataDir = strings.TrimSpace(string(out))
	})
	if dataDirErr != nil {
		missingTool(t, "pydicom's test files", dataDirErr)
	}
	return py
}

// pydicomTestFile returns the path of one of the pydicom project's test
// files as Debian's python3-pydicom installs them.
func pydicomTestFile(t *testing.T, name string) string {
	t.Helper()
	requirePython(t)
	p := filepath.Join(pydicomDataDir, name)
	if _, err := os.Stat(p); err != nil {
		missingTool(t, "pydicom test file "+name, err)
	}
	return p
}

// refScript is the reference reader: pydicom decodes the file, numpy
// computes dose = stored value × DoseGridScaling and the patient position of
// every voxel from the tags by the formula of PS3.3 C.7.6.2.1.1 and
// C.8.8.3.2 (position = ImagePositionPatient + i·Δcolumn·row + j·Δrow·column
// + offset_k·(row × column); absolute GridFrameOffsetVector: offset_k =
// (z_k − IPP_z)/normal_z). It writes JSON to stdout and, for doses, float64
// arrays (dose, x, y, z, each in frame-major, row-major order) to a file.
const refScript = `
import json, sys
import numpy as np
import pydicom

def flt(v):
    if v is None:
        return None
    if isinstance(v, (int, float)):
        return [float(v)]
    return [float(x) for x in v]

def job(mode, path, out):
  ds = pydicom.dcmread(path, force=True)
  if mode == "dose":
      arr = ds.pixel_array
      rows, cols = int(ds.Rows), int(ds.Columns)
      frames = int(ds.NumberOfFrames) if "NumberOfFrames" in ds else 1
      arr = arr.reshape(frames, rows, cols)
      dose = arr.astype(np.float64) * float(ds.DoseGridScaling)
      ipp = np.array(flt(ds.ImagePositionPatient))
      iop = flt(ds.ImageOrientationPatient)
      r, c = np.array(iop[:3]), np.array(iop[3:])
      n = np.cross(r, c)
      drow, dcol = flt(ds.PixelSpacing)
      gfov = flt(ds.get("GridFrameOffsetVector"))
      if frames == 1:
          off = np.zeros(1)
      elif gfov[0] == 0:
          off = np.array(gfov)
      else:
          off = (np.array(gfov) - ipp[2]) / n[2]
      k, j, i = np.meshgrid(np.arange(frames), np.arange(rows), np.arange(cols), indexing="ij")
      pos = ipp[None, None, None, :] + (i * dcol)[..., None] * r + (j * drow)[..., None] * c + off[k][..., None] * n
      np.stack([dose.ravel(), pos[..., 0].ravel(), pos[..., 1].ravel(), pos[..., 2].ravel()]).astype("<f8").tofile(out)
      return (json.dumps({
          "rows": rows, "cols": cols, "frames": frames,
          "bits": int(ds.BitsAllocated), "rep": int(ds.PixelRepresentation),
          "scaling": float(ds.DoseGridScaling),
          "ipp": flt(ds.ImagePositionPatient), "iop": iop, "ps": [drow, dcol], "gfov": gfov,
          "units": str(ds.DoseUnits), "type": str(ds.DoseType), "sum": str(ds.DoseSummationType),
          "for": str(ds.FrameOfReferenceUID), "sop": str(ds.SOPInstanceUID),
          "series": str(ds.SeriesInstanceUID), "study": str(ds.StudyInstanceUID),
          "pid": str(ds.PatientID), "pname": str(ds.PatientName),
          "desc": str(ds.get("SeriesDescription", "")),
          "plan": str(ds.ReferencedRTPlanSequence[0].ReferencedSOPInstanceUID) if "ReferencedRTPlanSequence" in ds else "",
      }))
  elif mode == "struct":
      obs = {int(o.ReferencedROINumber): str(o.get("RTROIInterpretedType", "")) for o in ds.get("RTROIObservationsSequence", [])}
      contours = {int(rc.ReferencedROINumber): rc for rc in ds.get("ROIContourSequence", [])}
      rois = []
      for it in ds.StructureSetROISequence:
          num = int(it.ROINumber)
          rc = contours.get(num)
          roi = {"number": num, "name": str(it.ROIName), "for": str(it.ReferencedFrameOfReferenceUID),
                 "type": obs.get(num, ""), "color": None, "contours": []}
          if rc is not None:
              if "ROIDisplayColor" in rc:
                  roi["color"] = [int(x) for x in rc.ROIDisplayColor]
              for ct in rc.get("ContourSequence", []):
                  roi["contours"].append({"type": str(ct.ContourGeometricType), "points": flt(ct.ContourData)})
          rois.append(roi)
      frame = ""
      if "ReferencedFrameOfReferenceSequence" in ds:
          frame = str(ds.ReferencedFrameOfReferenceSequence[0].FrameOfReferenceUID)
      return (json.dumps({"label": str(ds.get("StructureSetLabel", "")), "for": frame, "pid": str(ds.PatientID), "rois": rois}))

args = sys.argv[1:]
for a in range(0, len(args), 3):
    print(job(args[a], args[a+1], args[a+2]))
`

// refDose is what the reference reader found in an RT Dose file.
type refDose struct {
	Rows, Cols, Frames int
	Bits, Rep          int
	Scaling            float64
	IPP, IOP, PS, GFOV []float64
	Units, Type, Sum   string
	FoR                string `json:"for"`
	SOP, Series, Study string
	PID, PName, Desc   string
	Plan               string
	// Dose and X, Y, Z hold one value per voxel, in Grid.Data order.
	Dose, X, Y, Z []float64 `json:"-"`
}

// refROI and refSet are what the reference reader found in an RT
// Structure Set.
type refROI struct {
	Number   int
	Name     string
	FoR      string `json:"for"`
	Type     string
	Color    []int
	Contours []struct {
		Type   string
		Points []float64
	}
}

type refSet struct {
	Label string
	FoR   string `json:"for"`
	PID   string
	ROIs  []refROI
}

// runRef runs the reference reader on several files at once (starting
// python costs about a second) and returns one output line per file.
func runRef(t *testing.T, mode string, paths []string) (lines []string, bins []string) {
	t.Helper()
	py := requirePython(t)
	dir := t.TempDir()
	script := filepath.Join(dir, "ref.py")
	if err := os.WriteFile(script, []byte(refScript), 0o644); err != nil {
		t.Fatal(err)
	}
	args := []string{script}
	for n, p := range paths {
		bin := filepath.Join(dir, fmt.Sprintf("ref%d.f64", n))
		bins = append(bins, bin)
		args = append(args, mode, p, bin)
	}
	var stderr bytes.Buffer
	cmd := exec.Command(py, args...)
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("pydicom reference reader on %v: %v\n%s", paths, err, stderr.String())
	}
	lines = strings.Split(strings.TrimSpace(string(out)), "\n")
	if len(lines) != len(paths) {
		t.Fatalf("reference reader printed %d lines for %d files", len(lines), len(paths))
	}
	return lines, bins
}

// pydicomDoses decodes RT Dose files with pydicom and numpy.
func pydicomDoses(t *testing.T, paths ...string) []*refDose {
	t.Helper()
	lines, bins := runRef(t, "dose", paths)
	var out []*refDose
	for f, line := range lines {
		var r refDose
		if err := json.Unmarshal([]byte(line), &r); err != nil {
			t.Fatalf("reference output %q: %v", line, err)
		}
		raw, err := os.ReadFile(bins[f])
		if err != nil {
			t.Fatal(err)
		}
		n := r.Rows * r.Cols * r.Frames
		if len(raw) != 4*8*n {
			t.Fatalf("reference wrote %d bytes, want %d", len(raw), 4*8*n)
		}
		all := make([]float64, 4*n)
		if err := binary.Read(bytes.NewReader(raw), binary.LittleEndian, all); err != nil {
			t.Fatal(err)
		}
		r.Dose, r.X, r.Y, r.Z = all[:n], all[n:2*n], all[2*n:3*n], all[3*n:]
		out = append(out, &r)
	}
	return out
}

// pydicomStructureSets decodes RT Structure Sets with pydicom.
func pydicomStructureSets(t *testing.T, paths ...string) []*refSet {
	t.Helper()
	lines, _ := runRef(t, "struct", paths)
	var out []*refSet
	for _, line := range lines {
		var r refSet
		if err := json.Unmarshal([]byte(line), &r); err != nil {
			t.Fatalf("reference output %q: %v", line, err)
		}
		out = append(out, &r)
	}
	return out
}

// ---- A byte-level DICOM encoder for building test files, good or bad ----

// el is a data element to encode: tag as 0xGGGGEEEE, VR, value bytes; for
// a sequence, items holds the items' elements (undefined lengths).
type el struct {
	tag   uint32
	vr    string
	val   []byte
	items [][]el
	// vl, when not zero, overrides the value length written (for lies).
	vl uint32
}

func str(tag uint32, vr, v string) el {
	b := []byte(v)
	if len(b)%2 == 1 {
		if vr == "UI" {
			b = append(b, 0)
		} else {
			b = append(b, ' ')
		}
	}
	return el{tag: tag, vr: vr, val: b}
}

func us(tag uint32, vs ...uint16) el {
	b := make([]byte, 2*len(vs))
	for i, v := range vs {
		binary.LittleEndian.PutUint16(b[2*i:], v)
	}
	return el{tag: tag, vr: "US", val: b}
}

func seq(tag uint32, items ...[]el) el { return el{tag: tag, vr: "SQ", items: items} }

var longVR = map[string]bool{"OB": true, "OW": true, "OF": true, "SQ": true, "UN": true, "UT": true}

func encodeElems(buf *bytes.Buffer, elems []el, explicit bool) {
	sorted := append([]el(nil), elems...)
	sort.SliceStable(sorted, func(i, j int) bool { return sorted[i].tag < sorted[j].tag })
	w16 := func(v uint16) { binary.Write(buf, binary.LittleEndian, v) }
	w32 := func(v uint32) { binary.Write(buf, binary.LittleEndian, v) }
	for _, e := range sorted {
		w16(uint16(e.tag >> 16))
		w16(uint16(e.tag))
		vl := uint32(len(e.val))
		if e.vr == "SQ" {
			vl = 0xFFFFFFFF
		}
		if e.vl != 0 {
			vl = e.vl
		}
		if explicit {
			buf.WriteString(e.vr)
			if longVR[e.vr] {
				w16(0)
				w32(vl)
			} else {
				w16(uint16(vl))
			}
		} else {
			w32(vl)
		}
		if e.vr == "SQ" {
			for _, it := range e.items {
				w16(0xFFFE)
				w16(0xE000)
				w32(0xFFFFFFFF)
				encodeElems(buf, it, explicit)
				w16(0xFFFE)
				w16(0xE00D)
				w32(0)
			}
			w16(0xFFFE)
			w16(0xE0DD)
			w32(0)
			continue
		}
		buf.Write(e.val)
	}
}

// encodeFile encodes a data set with a file meta header stating ts (no
// meta header when ts is ""; then explicit chooses the encoding).
func encodeFile(elems []el, ts string, explicit bool) []byte {
	var buf bytes.Buffer
	if ts != "" {
		explicit = ts != "1.2.840.10008.1.2"
		var meta bytes.Buffer
		encodeElems(&meta, []el{
			{tag: 0x00020001, vr: "OB", val: []byte{0, 1}},
			str(0x00020002, "UI", "1.2.840.10008.5.1.4.1.1.481.2"),
			str(0x00020003, "UI", "2.25.1"),
			str(0x00020010, "UI", ts),
			str(0x00020012, "UI", "2.25.2"),
		}, true)
		buf.Write(make([]byte, 128))
		buf.WriteString("DICM")
		gl := make([]byte, 4)
		binary.LittleEndian.PutUint32(gl, uint32(meta.Len()))
		encodeElems(&buf, []el{{tag: 0x00020000, vr: "UL", val: gl}}, true)
		buf.Write(meta.Bytes())
	}
	encodeElems(&buf, elems, explicit)
	return buf.Bytes()
}

// with returns elems with e replacing the element of the same tag (or
// added).
func with(elems []el, repl ...el) []el {
	out := append([]el(nil), elems...)
	for _, e := range repl {
		found := false
		for i := range out {
			if out[i].tag == e.tag {
				out[i], found = e, true
			}
		}
		if !found {
			out = append(out, e)
		}
	}
	return out
}

// without returns elems without the given tags.
func without(elems []el, tags ...uint32) []el {
	var out []el
	for _, e := range elems {
		drop := false
		for _, t := range tags {
			drop = drop || e.tag == t
		}
		if !drop {
			out = append(out, e)
		}
	}
	return out
}

func writeTemp(t *testing.T, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func approx(a, b, tol float64) bool { return math.Abs(a-b) <= tol }
