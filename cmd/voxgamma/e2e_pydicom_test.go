package main

// The linear-gradient case on RT Dose files that voxgamma did not write:
// pydicom (Debian's python3-pydicom) and numpy write the reference and the
// evaluated dose, with their own geometry conventions and quantisation,
// and the whole command is checked against the closed form.

import (
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/metaimage"
)

// pydicomWriter writes RT Dose files (explicit VR little endian with file
// meta, Modality RTDOSE, 16-bit unsigned, DoseGridScaling, DoseUnits GY,
// DoseType PHYSICAL, DoseSummationType PLAN, one FrameOfReferenceUID) of
// the field D(x) = a + g·(n·x) − g·shift. Voxel positions follow PS3.3
// C.7.6.2.1.1 and C.8.8.3.2: ImagePositionPatient + i·Δcol·row +
// j·Δrow·column + offset_k·(row × column), PixelSpacing = [Δrow, Δcol];
// GridFrameOffsetVector relative when its first value is 0, else absolute
// z positions. It prints, per file, the DoseGridScaling written, the
// largest |stored × scaling − analytic| in float64, the largest dose and,
// for files asked for, writes the analytic dose of every voxel (float64,
// frame-major, row-major) next to the file.
const pydicomWriter = `
import json, sys
import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileDataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.tag import Tag
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

RTDOSE = "1.2.840.10008.5.1.4.1.1.481.2"
RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5"
spec = json.loads(sys.argv[1])
frame, study, plan = generate_uid(), generate_uid(), generate_uid()
n = np.array(spec["n"], dtype=float)
report = []
def ds_str(v):
    return "%.10g" % v
for f in spec["files"]:
    ipp = np.array(f["ipp"], dtype=float)
    row, col = np.array(f["iop"][:3], dtype=float), np.array(f["iop"][3:], dtype=float)
    normal = np.cross(row, col)
    drow, dcol = f["ps"]
    rows, cols = f["rows"], f["cols"]
    gfov = np.array(f["gfov"], dtype=float)
    off = gfov if gfov[0] == 0 else (gfov - ipp[2]) / normal[2]
    k, j, i = np.meshgrid(np.arange(len(gfov)), np.arange(rows), np.arange(cols), indexing="ij")
    pos = ipp + (i * dcol)[..., None] * row + (j * drow)[..., None] * col + off[k][..., None] * normal
    dose = spec["a"] + spec["g"] * (pos @ n) - spec["g"] * f["shift"]
    assert dose.min() > 0
    scaling_str = "%.6e" % (dose.max() / 65000)
    scaling = float(scaling_str)
    codes = np.rint(dose / scaling)
    assert codes.min() >= 0 and codes.max() <= 65535
    err = float(np.abs(codes * scaling - dose).max())

    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = RTDOSE
    sop = generate_uid()
    meta.MediaStorageSOPInstanceUID = sop
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = FileDataset(f["path"], {}, file_meta=meta, preamble=b"\0" * 128)
    ds.SOPClassUID, ds.SOPInstanceUID = RTDOSE, sop
    ds.PatientName, ds.PatientID = "PHANTOM^TEST", "VG-TEST-PY"
    ds.StudyInstanceUID, ds.SeriesInstanceUID = study, generate_uid()
    ds.StudyID, ds.SeriesNumber, ds.InstanceNumber = "1", 1, 1
    ds.Modality = "RTDOSE"
    ds.Manufacturer = "pydicom test writer"
    ds.FrameOfReferenceUID = frame
    ds.PositionReferenceIndicator = ""
    ds.ImagePositionPatient = [ds_str(v) for v in ipp]
    ds.ImageOrientationPatient = [ds_str(v) for v in f["iop"]]
    ds.PixelSpacing = [ds_str(drow), ds_str(dcol)]
    ds.SliceThickness = ds_str(f["thickness"])
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.NumberOfFrames = len(gfov)
    ds.FrameIncrementPointer = Tag(0x3004, 0x000C)
    ds.Rows, ds.Columns = rows, cols
    ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation = 16, 16, 15, 0
    ds.DoseUnits, ds.DoseType, ds.DoseSummationType = "GY", "PHYSICAL", "PLAN"
    ds.GridFrameOffsetVector = [ds_str(v) for v in gfov]
    ds.DoseGridScaling = scaling_str
    ref = Dataset()
    ref.ReferencedSOPClassUID, ref.ReferencedSOPInstanceUID = RTPLAN, plan
    ds.ReferencedRTPlanSequence = Sequence([ref])
    ds.PixelData = codes.astype("<u2").tobytes()
    ds.is_little_endian, ds.is_implicit_VR = True, False
    try:
        pydicom.dcmwrite(f["path"], ds, enforce_file_format=True)
    except TypeError:
        pydicom.dcmwrite(f["path"], ds, write_like_original=False)
    if f.get("analytic"):
        np.asarray(spec["a"] + spec["g"] * (pos @ n), dtype="<f8").tofile(f["analytic"])
    report.append({"scaling": scaling, "error": err, "max": float(dose.max())})
print(json.dumps(report))
`

// pyDose is the geometry of one file for pydicomWriter.
type pyDose struct {
	Path      string     `json:"path"`
	IPP       [3]float64 `json:"ipp"`
	IOP       [6]float64 `json:"iop"`
	PS        [2]float64 `json:"ps"` // [Δrow, Δcol]
	Rows      int        `json:"rows"`
	Cols      int        `json:"cols"`
	GFOV      []float64  `json:"gfov"`
	Thickness float64    `json:"thickness"`
	Shift     float64    `json:"shift"`
	Analytic  string     `json:"analytic,omitempty"`
}

func frameOffsets(n int, first, step float64) []float64 {
	o := make([]float64, n)
	for k := range o {
		o[k] = first + float64(k)*step
	}
	return o
}

// TestComparePydicomLinearGradient: the linear-gradient shift of
// TestCompareLinearGradientShift (closed form Γ² = s²/(Δd² + (ΔD/g)²),
// Low et al. 1998, derivation in gamma/gamma_test.go
// TestLinearGradientShift) on files written by pydicom:
//
//   - reference head-first supine, PixelSpacing [Δrow 2.5, Δcol 2] (not
//     square, so a swap of the order shows), absolute GridFrameOffsetVector
//     (3 mm frames);
//   - evaluated feet-first supine (row along −x, frames along −z), 1.5 mm,
//     relative GridFrameOffsetVector, reaching ≥ 9.75 mm beyond the
//     reference on every side (more than the 6 mm search distance).
//
// Tolerance as in TestCompareLinearGradientShift, with the quantisation
// error each file really has (pydicom's report: |stored × DoseGridScaling −
// analytic|, float64) plus voxgamma's float32 rounding of each read value
// (2^-24 relative).
func TestComparePydicomLinearGradient(t *testing.T) {
	py := requirePydicom(t)
	dir := t.TempDir()
	const s = 2.5 // mm; global Γ = 2.5/√13 = 0.693
	refPath, evalPath := filepath.Join(dir, "RD_ref.dcm"), filepath.Join(dir, "RD_eval.dcm")
	analytic := filepath.Join(dir, "ref_analytic.f64")
	ref := pyDose{Path: refPath, IPP: [3]float64{-13, -13.75, -10.5}, IOP: [6]float64{1, 0, 0, 0, 1, 0}, PS: [2]float64{2.5, 2},
		Rows: 12, Cols: 14, GFOV: frameOffsets(8, -10.5, 3), Thickness: 3, Analytic: analytic}
	eval := pyDose{Path: evalPath, IPP: [3]float64{24.5, -25.25, 20.25}, IOP: [6]float64{-1, 0, 0, 0, 1, 0}, PS: [2]float64{1.5, 1.5},
		Rows: 35, Cols: 34, GFOV: frameOffsets(28, 0, 1.5), Thickness: 1.5, Shift: s}
	spec, err := json.Marshal(map[string]any{"a": rampA, "g": rampG, "n": rampN, "files": []pyDose{ref, eval}})
	if err != nil {
		t.Fatal(err)
	}
	script := filepath.Join(dir, "write_rtdose.py")
	if err := os.WriteFile(script, []byte(pydicomWriter), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(py, script, string(spec)).Output()
	if err != nil {
		var stderr string
		if ee, ok := err.(*exec.ExitError); ok {
			stderr = string(ee.Stderr)
		}
		t.Fatalf("pydicom writer: %v\n%s", err, stderr)
	}
	var rep []struct{ Scaling, Error, Max float64 }
	if err := json.Unmarshal(out, &rep); err != nil || len(rep) != 2 {
		t.Fatalf("pydicom writer report %q: %v", out, err)
	}
	for _, r := range rep {
		if r.Error > r.Scaling/2*(1+1e-9) {
			t.Fatalf("pydicom writer: quantisation error %g above half the scaling %g", r.Error, r.Scaling)
		}
	}
	qr := rep[0].Error + math.Ldexp(rep[0].Max, -24)
	qe := rep[1].Error + math.Ldexp(rep[1].Max, -24)
	raw, err := os.ReadFile(analytic)
	if err != nil {
		t.Fatal(err)
	}
	nRef := ref.Rows * ref.Cols * len(ref.GFOV)
	if len(raw) != 8*nRef {
		t.Fatalf("analytic reference: %d bytes, want %d", len(raw), 8*nRef)
	}
	dr := make([]float64, nRef) // frame-major, row-major: i fastest
	for n := range dr {
		dr[n] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*n:]))
	}

	for _, local := range []bool{false, true} {
		name := "global"
		if local {
			name = "local"
		}
		t.Run(name, func(t *testing.T) {
			sub := t.TempDir()
			jsonOut, mapOut := filepath.Join(sub, "r.json"), filepath.Join(sub, "gamma.mha")
			args := []string{"compare", "--reference", refPath, "--evaluated", evalPath, "--no-structures", "--criteria", "3%/2mm",
				"--norm-dose", "10", "--json", jsonOut, "--gamma-map", mapOut, "--quiet"}
			if local {
				args = append(args, "--local")
			}
			want := make([]float64, nRef)
			tols := make([]float64, nRef)
			maxTol := 0.0
			for n, d := range dr {
				dd := cfDelta * cfNorm
				want[n] = shiftGamma(s, cfDTA, dd, rampG)
				tols[n] = (qr+qe)/dd + engineTol
				if local {
					want[n] = shiftGamma(s, cfDTA, cfDelta*d, rampG)
					tols[n] = (qr+qe)/(cfDelta*(d-qr)) + want[n]*qr/(d-qr) + engineTol
				}
				maxTol = math.Max(maxTol, tols[n])
			}
			boundaryClear(t, want, tols)
			// Every Γ is below 1 (global 0.693; local at most s/√(Δd² + (δ·D_min/g)²)
			// with D_min ≈ 7.98 Gy: 0.80): TG-218's limits are met, exit 0.
			r := vgExit(t, exitPass, args...)
			res := readResultJSON(t, jsonOut)
			checkGammaStats(t, "overall", res.Overall, want, maxTol)

			// The grids as voxgamma read them: dims [columns, rows, frames],
			// spacing [Δx, Δy, Δz] = [Δcol, Δrow, frame step].
			for _, in := range res.Inputs {
				if in.Grid == nil {
					t.Errorf("input %s: no grid", in.Role)
					continue
				}
				var wantDims [3]int
				var wantSp [3]float64
				switch in.Role {
				case "reference":
					wantDims, wantSp = [3]int{14, 12, 8}, [3]float64{2, 2.5, 3}
					if in.Grid.OriginMM != ref.IPP {
						t.Errorf("reference origin %v, ImagePositionPatient %v", in.Grid.OriginMM, ref.IPP)
					}
				case "evaluated":
					wantDims, wantSp = [3]int{34, 35, 28}, [3]float64{1.5, 1.5, 1.5}
				default:
					t.Errorf("unexpected input role %q", in.Role)
				}
				if in.Grid.Dims != wantDims || in.Grid.SpacingMM != wantSp {
					t.Errorf("%s grid dims %v spacing %v, written as %v and %v", in.Role, in.Grid.Dims, in.Grid.SpacingMM, wantDims, wantSp)
				}
				if in.PatientName != "PHANTOM^TEST" || in.DoseUnits != "GY" || in.DoseSummationType != "PLAN" {
					t.Errorf("%s: patient %q units %q summation %q", in.Role, in.PatientName, in.DoseUnits, in.DoseSummationType)
				}
			}

			gm, err := metaimage.Read(mapOut)
			if err != nil {
				t.Fatal(err)
			}
			if gm.Len() != nRef {
				t.Fatalf("gamma map has %d voxels, the reference %d", gm.Len(), nRef)
			}
			bad := 0
			for n, v := range gm.Data {
				i, j, k := gm.IJK(n)
				// The map is on the reference grid in the file's order
				// (head-first supine: i along x, j along y, k along z).
				m := i + ref.Cols*(j+ref.Rows*k)
				if math.Abs(float64(v)-want[m]) > tols[m] {
					if bad++; bad <= 5 {
						t.Errorf("voxel (%d,%d,%d): Γ = %.6f, closed form %.6f ± %.2g", i, j, k, v, want[m], tols[m])
					}
				}
			}
			if bad > 0 {
				t.Errorf("%d of %d voxels differ from the closed form\n%s", bad, nRef, r)
			}
			for _, w := range res.Warnings {
				if strings.Contains(w, "frame") || strings.Contains(w, "outside") {
					t.Errorf("unexpected warning: %s", w)
				}
			}
		})
	}
}
