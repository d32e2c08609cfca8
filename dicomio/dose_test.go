package dicomio_test

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"runtime"
	"strings"
	"testing"

	"voxgamma/dicomio"
)

// Tags used by the hand-built files.
const (
	tSOPClass    = 0x00080016
	tSOPInstance = 0x00080018
	tModality    = 0x00080060
	tPatientID   = 0x00100020
	tStudyUID    = 0x0020000D
	tSeriesUID   = 0x0020000E
	tIPP         = 0x00200032
	tIOP         = 0x00200037
	tFoR         = 0x00200052
	tSPP         = 0x00280002
	tFrames      = 0x00280008
	tRows        = 0x00280010
	tCols        = 0x00280011
	tPS          = 0x00280030
	tBitsAlloc   = 0x00280100
	tBitsStored  = 0x00280101
	tHighBit     = 0x00280102
	tPixelRep    = 0x00280103
	tDoseUnits   = 0x30040002
	tDoseType    = 0x30040004
	tSumType     = 0x3004000A
	tGFOV        = 0x3004000C
	tScaling     = 0x3004000E
	tPixelData   = 0x7FE00010
)

// A hand-built RT Dose: 3 columns, 2 rows, 4 frames at irregular offsets
// 0, 2, 4, 8 mm; PixelSpacing [Δrow 2, Δcolumn 1.5]; stored values 0..23
// × 0.01 Gy. The geometry below follows PS3.3 C.7.6.2.1.1 by hand.
const (
	bRows, bCols, bFrames = 2, 3, 4
)

var bOffsets = []float64{0, 2, 4, 8}

func pixels16(vals ...int) el {
	b := make([]byte, 2*len(vals))
	for i, v := range vals {
		binary.LittleEndian.PutUint16(b[2*i:], uint16(int16(v)))
	}
	return el{tag: tPixelData, vr: "OW", val: b}
}

func pixels32(vals ...int) el {
	b := make([]byte, 4*len(vals))
	for i, v := range vals {
		binary.LittleEndian.PutUint32(b[4*i:], uint32(int32(v)))
	}
	return el{tag: tPixelData, vr: "OW", val: b}
}

func ramp(n int) []int {
	v := make([]int, n)
	for i := range v {
		v[i] = i
	}
	return v
}

func baseDose() []el {
	return []el{
		str(tSOPClass, "UI", "1.2.840.10008.5.1.4.1.1.481.2"),
		str(tSOPInstance, "UI", "2.25.1001"),
		str(tModality, "CS", "RTDOSE"),
		str(tPatientID, "LO", "VG-TEST-001"),
		str(tStudyUID, "UI", "2.25.1002"),
		str(tSeriesUID, "UI", "2.25.1003"),
		str(tIPP, "DS", `-5\-10\20`),
		str(tIOP, "DS", `1\0\0\0\1\0`),
		str(tFoR, "UI", "2.25.1004"),
		us(tSPP, 1),
		str(tFrames, "IS", "4"),
		us(tRows, bRows),
		us(tCols, bCols),
		str(tPS, "DS", `2\1.5`),
		us(tBitsAlloc, 16),
		us(tBitsStored, 16),
		us(tHighBit, 15),
		us(tPixelRep, 0),
		str(tDoseUnits, "CS", "GY"),
		str(tDoseType, "CS", "PHYSICAL"),
		str(tSumType, "CS", "PLAN"),
		str(tGFOV, "DS", `0\2\4\8`),
		str(tScaling, "DS", "0.01"),
		pixels16(ramp(24)...),
	}
}

const explicitLE, implicitLE = "1.2.840.10008.1.2.1", "1.2.840.10008.1.2"

// Source: the hand-built file above; expected values by PS3.3 C.7.6.2.1.1
// (position = IPP + i·Δcolumn·row + j·Δrow·column + offset_k·normal) and
// C.8.8.3 (dose = stored × DoseGridScaling).
func TestReadDoseHandBuilt(t *testing.T) {
	variants := map[string][]byte{
		"explicit VR":                    encodeFile(baseDose(), explicitLE, true),
		"implicit VR":                    encodeFile(baseDose(), implicitLE, false),
		"no meta header, implicit VR":    encodeFile(baseDose(), "", false),
		"no meta header, explicit VR":    encodeFile(baseDose(), "", true),
		"32-bit":                         encodeFile(with(baseDose(), us(tBitsAlloc, 32), us(tBitsStored, 32), us(tHighBit, 31), pixels32(ramp(24)...)), explicitLE, true),
		"absolute GridFrameOffsetVector": encodeFile(with(baseDose(), str(tGFOV, "DS", `20\22\24\28`)), explicitLE, true),
	}
	for name, data := range variants {
		t.Run(name, func(t *testing.T) {
			path := writeTemp(t, "dose.dcm", data)
			g, info, err := dicomio.ReadDose(path)
			if err != nil {
				t.Fatal(err)
			}
			if g.Dims() != [3]int{bCols, bRows, bFrames} {
				t.Fatalf("dims %v", g.Dims())
			}
			for n, v := range g.Data {
				if v != float32(float64(n)*0.01) {
					t.Errorf("voxel %d: %v, want %v", n, v, float64(n)*0.01)
				}
			}
			for k := 0; k < bFrames; k++ {
				for j := 0; j < bRows; j++ {
					for i := 0; i < bCols; i++ {
						want := [3]float64{-5 + 1.5*float64(i), -10 + 2*float64(j), 20 + bOffsets[k]}
						if got := g.WorldOf(i, j, k); got != want {
							t.Errorf("voxel (%d,%d,%d) at %v, want %v", i, j, k, got, want)
						}
					}
				}
			}
			if info.DoseUnits != "GY" || info.Relative() || info.FrameOfReferenceUID != "2.25.1004" || info.PatientID != "VG-TEST-001" ||
				info.SOPInstanceUID != "2.25.1001" || info.DoseSummationType != "PLAN" || info.PixelSpacing != [2]float64{2, 1.5} {
				t.Errorf("info %+v", info)
			}
			if strings.HasPrefix(name, "no meta") && !strings.Contains(strings.Join(info.Notes, ";"), "no file meta header") {
				t.Errorf("notes %q do not say the meta header is missing", info.Notes)
			}
		})
	}
}

// Orientations (PS3.3 C.7.6.2.1.1): head-first prone [-1,0,0,0,-1,0] has
// normal +z; feet-first supine [-1,0,0,0,1,0] has normal −z, so offsets go
// along −z; decreasing offsets are the same grid seen from the other end.
func TestReadDoseOrientations(t *testing.T) {
	cases := []struct {
		name, iop, gfov string
		pos             func(i, j, k int) [3]float64
	}{
		{"head-first prone", `-1\0\0\0\-1\0`, `0\2\4\8`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 - 1.5*float64(i), -10 - 2*float64(j), 20 + bOffsets[k]}
		}},
		{"feet-first supine", `-1\0\0\0\1\0`, `0\2\4\8`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 - 1.5*float64(i), -10 + 2*float64(j), 20 - bOffsets[k]}
		}},
		{"feet-first prone", `1\0\0\0\-1\0`, `0\2\4\8`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 + 1.5*float64(i), -10 - 2*float64(j), 20 - bOffsets[k]}
		}},
		{"decreasing offsets", `1\0\0\0\1\0`, `0\-2\-4\-8`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 + 1.5*float64(i), -10 + 2*float64(j), 20 - bOffsets[k]}
		}},
		{"feet-first supine, absolute z", `-1\0\0\0\1\0`, `20\18\16\12`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 - 1.5*float64(i), -10 + 2*float64(j), 20 - bOffsets[k]}
		}},
		{"sagittal, normal −x", `0\1\0\0\0\-1`, `0\2\4\8`, func(i, j, k int) [3]float64 {
			return [3]float64{-5 - bOffsets[k], -10 + 1.5*float64(i), 20 - 2*float64(j)}
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "dose.dcm", encodeFile(with(baseDose(), str(tIOP, "DS", c.iop), str(tGFOV, "DS", c.gfov)), explicitLE, true))
			g, _, err := dicomio.ReadDose(path)
			if err != nil {
				t.Fatal(err)
			}
			// The stored voxel order is (column, row, frame); the grid may
			// have flipped its frame axis, so find each stored voxel by
			// position and check its value.
			for k := 0; k < bFrames; k++ {
				for j := 0; j < bRows; j++ {
					for i := 0; i < bCols; i++ {
						p := c.pos(i, j, k)
						v, ok := g.Sample(p)
						want := float64(float32(float64(i+bCols*(j+bRows*k)) * 0.01))
						if !ok || math.Abs(v-want) > 1e-6 {
							t.Errorf("stored voxel (%d,%d,%d) expected at %v: sample %v (inside %v), want %v", i, j, k, p, v, ok, want)
						}
					}
				}
			}
		})
	}
}

// Signed values are legal with DoseType ERROR (PS3.3 C.8.8.3.4).
func TestReadDoseSigned(t *testing.T) {
	vals := ramp(24)
	for i := range vals {
		vals[i] -= 12
	}
	for _, bits := range []int{16, 32} {
		px := pixels16(vals...)
		if bits == 32 {
			px = pixels32(vals...)
		}
		elems := with(baseDose(), us(tPixelRep, 1), str(tDoseType, "CS", "ERROR"), us(tBitsAlloc, uint16(bits)), us(tBitsStored, uint16(bits)), us(tHighBit, uint16(bits-1)), px)
		g, _, err := dicomio.ReadDose(writeTemp(t, "signed.dcm", encodeFile(elems, explicitLE, true)))
		if err != nil {
			t.Fatalf("%d bits: %v", bits, err)
		}
		for n, v := range g.Data {
			if v != float32(float64(n-12)*0.01) {
				t.Errorf("%d bits, voxel %d: %v, want %v", bits, n, v, float64(n-12)*0.01)
			}
		}
	}
}

// BitsStored below BitsAllocated: the bits above HighBit are not part of
// the value (PS3.5 section 8.1.1, PS3.3 C.7.6.3.1): masked for unsigned
// values, sign-extended from HighBit for signed ones.
func TestReadDoseBitsStored(t *testing.T) {
	vals := ramp(24)
	vals[0] = 0xF00A // garbage above bit 11: value 10
	elems := with(baseDose(), us(tBitsStored, 12), us(tHighBit, 11), pixels16(vals...))
	g, _, err := dicomio.ReadDose(writeTemp(t, "b12.dcm", encodeFile(elems, explicitLE, true)))
	if err != nil {
		t.Fatal(err)
	}
	if g.Data[0] != float32(0.1) || g.Data[1] != float32(0.01) {
		t.Errorf("unsigned 12 bits: %v %v, want 0.1 0.01", g.Data[0], g.Data[1])
	}
	vals[0] = 0x0FFF // -1 in 12-bit two's complement
	elems = with(elems, us(tPixelRep, 1), str(tDoseType, "CS", "ERROR"), pixels16(vals...))
	g, _, err = dicomio.ReadDose(writeTemp(t, "b12s.dcm", encodeFile(elems, explicitLE, true)))
	if err != nil {
		t.Fatal(err)
	}
	if g.Data[0] != float32(-0.01) {
		t.Errorf("signed 12 bits: %v, want -0.01", g.Data[0])
	}
}

// Each malformed file must be refused with an error naming the file and
// what is wrong.
func TestReadDoseBadInput(t *testing.T) {
	base := baseDose()
	neg := ramp(24)
	neg[5] = -3
	cases := []struct {
		name string
		data []byte
		want []string
		kind error
	}{
		{"big endian", encodeFile(base, "1.2.840.10008.1.2.2", true), []string{"transfer syntax 1.2.840.10008.1.2.2 (explicit VR big endian) is not supported"}, dicomio.ErrUnsupported},
		{"RLE", encodeFile(base, "1.2.840.10008.1.2.5", true), []string{"transfer syntax 1.2.840.10008.1.2.5 (RLE lossless) is not supported"}, dicomio.ErrUnsupported},
		{"JPEG", encodeFile(base, "1.2.840.10008.1.2.4.50", true), []string{"transfer syntax 1.2.840.10008.1.2.4.50 (JPEG baseline) is not supported"}, dicomio.ErrUnsupported},
		{"JPEG 2000", encodeFile(base, "1.2.840.10008.1.2.4.90", true), []string{"(JPEG 2000 lossless) is not supported"}, dicomio.ErrUnsupported},
		{"deflate", encodeFile(base, "1.2.840.10008.1.2.1.99", true), []string{"(deflated explicit VR little endian) is not supported"}, dicomio.ErrUnsupported},
		{"encapsulated pixel data", encodeFile(with(base, el{tag: tPixelData, vr: "OB", vl: 0xFFFFFFFF,
			val: []byte{0xFE, 0xFF, 0x00, 0xE0, 0, 0, 0, 0, 0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0}}), explicitLE, true),
			[]string{"PixelData (7FE0,0010) is encapsulated"}, dicomio.ErrUnsupported},
		{"modality CT", encodeFile(with(base, str(tModality, "CS", "CT")), explicitLE, true), []string{"Modality (0008,0060): is CT, want RTDOSE"}, dicomio.ErrInvalid},
		{"no modality", encodeFile(without(base, tModality), explicitLE, true), []string{"Modality (0008,0060): missing"}, dicomio.ErrInvalid},
		{"missing PixelSpacing", encodeFile(without(base, tPS), explicitLE, true), []string{"PixelSpacing (0028,0030): missing"}, dicomio.ErrInvalid},
		{"one PixelSpacing value", encodeFile(with(base, str(tPS, "DS", "2")), explicitLE, true), []string{"PixelSpacing (0028,0030): has 1 values, want 2"}, dicomio.ErrInvalid},
		{"zero spacing", encodeFile(with(base, str(tPS, "DS", `0\1.5`)), explicitLE, true), []string{"PixelSpacing (0028,0030): value 1 is 0 mm"}, dicomio.ErrInvalid},
		{"negative spacing", encodeFile(with(base, str(tPS, "DS", `2\-1.5`)), explicitLE, true), []string{"PixelSpacing (0028,0030): value 2 is -1.5 mm"}, dicomio.ErrInvalid},
		{"NaN spacing", encodeFile(with(base, str(tPS, "DS", `NaN\1.5`)), explicitLE, true), []string{"PixelSpacing (0028,0030): value 1 is NaN mm"}, dicomio.ErrInvalid},
		{"spacing not a number", encodeFile(with(base, str(tPS, "DS", `2\x`)), explicitLE, true), []string{"PixelSpacing (0028,0030): value 2 (\"x\") is not a decimal number"}, dicomio.ErrInvalid},
		{"missing IPP", encodeFile(without(base, tIPP), explicitLE, true), []string{"ImagePositionPatient (0020,0032): missing"}, dicomio.ErrInvalid},
		{"NaN IPP", encodeFile(with(base, str(tIPP, "DS", `0\NaN\0`)), explicitLE, true), []string{"ImagePositionPatient (0020,0032): value 2 is NaN"}, dicomio.ErrInvalid},
		{"missing IOP", encodeFile(without(base, tIOP), explicitLE, true), []string{"ImageOrientationPatient (0020,0037): missing"}, dicomio.ErrInvalid},
		{"oblique", encodeFile(with(base, str(tIOP, "DS", `0.8660254\0.5\0\-0.5\0.8660254\0`)), explicitLE, true), []string{"ImageOrientationPatient (0020,0037): [0.8660254 0.5 0 -0.5 0.8660254 0] is oblique"}, dicomio.ErrUnsupported},
		{"parallel row and column", encodeFile(with(base, str(tIOP, "DS", `1\0\0\1\0\0`)), explicitLE, true), []string{"ImageOrientationPatient (0020,0037)", "parallel"}, dicomio.ErrInvalid},
		{"GridFrameOffsetVector too short", encodeFile(with(base, str(tGFOV, "DS", `0\2\4`)), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): has 3 values but NumberOfFrames (0028,0008) is 4"}, dicomio.ErrInvalid},
		{"GridFrameOffsetVector missing", encodeFile(without(base, tGFOV), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): missing (required for 4 frames)"}, dicomio.ErrInvalid},
		{"non-monotonic offsets", encodeFile(with(base, str(tGFOV, "DS", `0\2\1\8`)), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): not strictly monotonic at frame 2 (2 then 1)"}, dicomio.ErrInvalid},
		{"repeated offset", encodeFile(with(base, str(tGFOV, "DS", `0\2\2\8`)), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): not strictly monotonic at frame 2"}, dicomio.ErrInvalid},
		{"absolute offsets off the IPP", encodeFile(with(base, str(tGFOV, "DS", `21\23\25\29`)), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): starts at z = 21 mm", "ImagePositionPatient (0020,0032) gives z = 20 mm"}, dicomio.ErrInvalid},
		{"absolute offsets, normal along x", encodeFile(with(base, str(tIOP, "DS", `0\1\0\0\0\-1`), str(tGFOV, "DS", `20\22\24\28`)), explicitLE, true), []string{"GridFrameOffsetVector (3004,000C): starts at 20, so it holds absolute z positions, but the frame normal"}, dicomio.ErrInvalid},
		{"pixel data too short", encodeFile(with(base, pixels16(ramp(23)...)), explicitLE, true), []string{"Rows (0028,0010) × Columns (0028,0011) × NumberOfFrames (0028,0008) = 2 × 3 × 4 voxels of 16 bits need 48 bytes but PixelData (7FE0,0010) holds 46"}, dicomio.ErrInvalid},
		{"more frames claimed", encodeFile(with(base, str(tFrames, "IS", "5"), str(tGFOV, "DS", `0\2\4\8\9`)), explicitLE, true), []string{"need 60 bytes but PixelData (7FE0,0010) holds 48"}, dicomio.ErrInvalid},
		{"no pixel data", encodeFile(without(base, tPixelData), explicitLE, true), []string{"PixelData (7FE0,0010): missing"}, dicomio.ErrInvalid},
		{"8 bits", encodeFile(with(base, us(tBitsAlloc, 8), us(tBitsStored, 8), us(tHighBit, 7)), explicitLE, true), []string{"BitsAllocated (0028,0100): is 8"}, dicomio.ErrUnsupported},
		{"high bit", encodeFile(with(base, us(tHighBit, 11)), explicitLE, true), []string{"HighBit (0028,0102): is 11"}, dicomio.ErrInvalid},
		{"missing Rows", encodeFile(without(base, tRows), explicitLE, true), []string{"Rows (0028,0010): missing"}, dicomio.ErrInvalid},
		{"zero Columns", encodeFile(with(base, us(tCols, 0)), explicitLE, true), []string{"Columns (0028,0011): is 0"}, dicomio.ErrInvalid},
		{"missing DoseGridScaling", encodeFile(without(base, tScaling), explicitLE, true), []string{"DoseGridScaling (3004,000E): missing"}, dicomio.ErrInvalid},
		{"zero DoseGridScaling", encodeFile(with(base, str(tScaling, "DS", "0")), explicitLE, true), []string{"DoseGridScaling (3004,000E): is 0, want a positive finite number"}, dicomio.ErrInvalid},
		{"negative DoseGridScaling", encodeFile(with(base, str(tScaling, "DS", "-0.01")), explicitLE, true), []string{"DoseGridScaling (3004,000E): is -0.01"}, dicomio.ErrInvalid},
		{"NaN DoseGridScaling", encodeFile(with(base, str(tScaling, "DS", "NaN")), explicitLE, true), []string{"DoseGridScaling (3004,000E): is NaN"}, dicomio.ErrInvalid},
		{"infinite dose", encodeFile(with(base, str(tScaling, "DS", "1e38")), explicitLE, true), []string{"voxel (1,1,0): stored value 4 × DoseGridScaling (3004,000E) 1e+38 = +Inf is not a finite dose"}, dicomio.ErrInvalid},
		{"negative physical dose", encodeFile(with(base, us(tPixelRep, 1), pixels16(neg...)), explicitLE, true), []string{"voxel (2,1,0) has dose -0.03 but DoseType (3004,0004) is \"PHYSICAL\": negative doses are allowed only for DoseType ERROR"}, dicomio.ErrInvalid},
		{"missing DoseUnits", encodeFile(without(base, tDoseUnits), explicitLE, true), []string{"DoseUnits (3004,0002): missing"}, dicomio.ErrInvalid},
		{"DoseUnits CGY", encodeFile(with(base, str(tDoseUnits, "CS", "CGY")), explicitLE, true), []string{"DoseUnits (3004,0002): is CGY, want GY or RELATIVE"}, dicomio.ErrInvalid},
		{"missing PixelRepresentation", encodeFile(without(base, tPixelRep), explicitLE, true), []string{"PixelRepresentation (0028,0103): missing"}, dicomio.ErrInvalid},
		{"not DICOM", []byte("Dose report\nThis is a text file, not a dose grid.\n"), []string{"not a DICOM file"}, dicomio.ErrNotDICOM},
		{"empty file", nil, []string{"not a DICOM file"}, dicomio.ErrNotDICOM},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "bad_dose.dcm", c.data)
			_, _, err := dicomio.ReadDose(path)
			if err == nil {
				t.Fatal("no error")
			}
			msg := err.Error()
			if !strings.HasPrefix(msg, "reading "+path+": ") {
				t.Errorf("error %q does not name the file", msg)
			}
			for _, w := range c.want {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q does not contain %q", msg, w)
				}
			}
			if !errors.Is(err, c.kind) {
				t.Errorf("error %q is not %v", msg, c.kind)
			}
			if c.kind == dicomio.ErrInvalid || c.kind == dicomio.ErrUnsupported {
				// The header-only reader must agree unless the fault lies in
				// the values themselves.
				if _, herr := dicomio.ReadDoseInfo(path); herr == nil && !strings.HasPrefix(c.name, "infinite") && !strings.HasPrefix(c.name, "negative physical") {
					t.Errorf("ReadDoseInfo accepted it")
				}
			}
		})
	}
}

// Truncated files: cut inside the pixel data and inside the header.
func TestReadDoseTruncated(t *testing.T) {
	full := encodeFile(baseDose(), explicitLE, true)
	for _, cut := range []int{len(full) - 10, 400, 300, 150, 131} {
		path := writeTemp(t, "truncated.dcm", full[:cut])
		_, _, err := dicomio.ReadDose(path)
		if err == nil {
			t.Errorf("cut at %d of %d bytes: no error", cut, len(full))
			continue
		}
		if !strings.Contains(err.Error(), path) {
			t.Errorf("cut at %d: error %q does not name the file", cut, err)
		}
		t.Logf("cut at %d: %v", cut, err)
	}
	_, _, err := dicomio.ReadDose(writeTemp(t, "t.dcm", full[:len(full)-10]))
	if err == nil || !strings.Contains(err.Error(), "PixelData (7FE0,0010): claims 48 bytes") {
		t.Errorf("cut in the pixel data: %v", err)
	}
}

// A tiny file that claims 65535³ voxels is refused at once, without
// allocating anything near that size.
func TestReadDoseHugeClaim(t *testing.T) {
	elems := with(baseDose(), us(tRows, 65535), us(tCols, 65535), str(tFrames, "IS", "65535"), str(tGFOV, "DS", "0"))
	path := writeTemp(t, "huge.dcm", encodeFile(elems, explicitLE, true))
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	_, _, err := dicomio.ReadDose(path)
	runtime.ReadMemStats(&after)
	if err == nil || !strings.Contains(err.Error(), "65535 × 65535 × 65535 voxels") || !strings.Contains(err.Error(), "cannot fit in the") {
		t.Fatalf("error %v", err)
	}
	if d := after.TotalAlloc - before.TotalAlloc; d > 16<<20 {
		t.Errorf("allocated %d bytes refusing the file", d)
	}
}

// Mutated files must give an error or a grid, never a panic, and every
// error must be of a documented kind: every byte of a valid file's data set
// is changed in turn to a value that breaks lengths, tags or values.
func TestReadDoseMutationsDoNotPanic(t *testing.T) {
	full := encodeFile(baseDose(), implicitLE, false)
	dir := t.TempDir()
	path := dir + "/m.dcm"
	for pos := 128; pos < len(full)-48; pos++ {
		// 0xFF makes lengths huge and tags unknown, 0x00 makes them short;
		// alternating keeps the test fast.
		for _, b := range []byte{byte(0xFF * (pos % 2))} {
			m := append([]byte(nil), full...)
			m[pos] = b
			if err := os.WriteFile(path, m, 0o644); err != nil {
				t.Fatal(err)
			}
			func() {
				defer func() {
					if r := recover(); r != nil {
						t.Fatalf("byte %d set to %#x: panic %v", pos, b, r)
					}
				}()
				_, _, err := dicomio.ReadDose(path)
				_, err2 := dicomio.ReadStructureSet(path)
				for _, e := range []error{err, err2} {
					if e != nil && !errors.Is(e, dicomio.ErrInvalid) && !errors.Is(e, dicomio.ErrNotDICOM) && !errors.Is(e, dicomio.ErrUnsupported) {
						t.Errorf("byte %d set to %#x: unclassified error %v", pos, b, e)
					}
				}
			}()
		}
	}
}

// TestReadDoseOtherScalings: a second scaling beside DoseGridScaling
// (issue 11, item 11). The RT Dose IOD (PS3.3 A.18.3) has no Modality LUT
// module; DoseGridScaling (C.8.8.3) alone turns stored values into dose. A
// RescaleSlope/RescaleIntercept, a ModalityLUTSequence or a Real World
// Value Mapping that says something else is refused, never ignored (before:
// a RescaleSlope of 2 was ignored without a word); an identity, or the same
// scaling written twice, is read as stored × DoseGridScaling with a note.
// pydicom is the outside reference for both conventions: its generic
// Modality LUT (apply_modality_lut, PS3.3 C.11.1) gives stored × slope +
// intercept, the RT convention stored × DoseGridScaling, and for a refused
// file the two disagree.
func TestReadDoseOtherScalings(t *testing.T) {
	const (
		tRescaleIntercept = 0x00281052
		tRescaleSlope     = 0x00281053
		tModalityLUT      = 0x00283000
		tLUTDescriptor    = 0x00283002
		tRWVM             = 0x00409096
		tRWVIntercept     = 0x00409224
		tRWVSlope         = 0x00409225
	)
	dir := t.TempDir()
	// pydicom needs PhotometricInterpretation to decode the pixels.
	base := func() []el { return with(baseDose(), str(0x00280004, "CS", "MONOCHROME2")) }
	type tc struct {
		name  string
		elems []el
		ok    bool
		want  string // in the note or the error
	}
	cases := []tc{
		{"identity", with(base(), str(tRescaleSlope, "DS", "1"), str(tRescaleIntercept, "DS", "0")), true, "an identity, no effect"},
		{"slope_equals_scaling", with(base(), str(tRescaleSlope, "DS", "0.01"), str(tRescaleIntercept, "DS", "0")), true, "the same scaling written twice, applied once"},
		{"rwvm_equals_scaling", with(base(), seq(tRWVM, []el{str(tRWVSlope, "FD", ""), str(tRWVIntercept, "FD", "")})), true, ""},
		{"slope_2", with(base(), str(tRescaleSlope, "DS", "2"), str(tRescaleIntercept, "DS", "0")), false, "RescaleSlope (0028,1053) 2 and RescaleIntercept (0028,1052) 0"},
		{"slope_only", with(base(), str(tRescaleSlope, "DS", "2")), false, "RescaleSlope (0028,1053) 2"},
		{"intercept_only", with(base(), str(tRescaleIntercept, "DS", "-1")), false, "RescaleIntercept (0028,1052) -1"},
		{"modality_lut", with(base(), seq(tModalityLUT, []el{us(tLUTDescriptor, 2, 0, 16)})), false, "ModalityLUTSequence (0028,3000) present"},
	}
	// Real World Value Mapping slopes are FD (binary doubles, PS3.5 6.2).
	fd := func(tag uint32, v float64) el {
		b := make([]byte, 8)
		binary.LittleEndian.PutUint64(b, math.Float64bits(v))
		return el{tag: tag, vr: "FD", val: b}
	}
	cases[2].elems = with(base(), seq(tRWVM, []el{fd(tRWVIntercept, 0), fd(tRWVSlope, 0.01)}))
	cases = append(cases, tc{"rwvm_slope_3", with(base(), seq(tRWVM, []el{fd(tRWVIntercept, 0), fd(tRWVSlope, 3)})), false, "RealWorldValueSlope (0040,9225) 3"})
	var accepted []string
	for _, c := range cases {
		p := dir + "/" + c.name + ".dcm"
		if err := os.WriteFile(p, encodeFile(c.elems, explicitLE, true), 0o644); err != nil {
			t.Fatal(err)
		}
		g, info, err := dicomio.ReadDose(p)
		if !c.ok {
			if err == nil || !errors.Is(err, dicomio.ErrUnsupported) || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), p) {
				t.Errorf("%s: error %v, want it refused naming %q and the file", c.name, err, c.want)
			}
			continue
		}
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if c.want != "" && !strings.Contains(strings.Join(info.Notes, "\n"), c.want) {
			t.Errorf("%s: notes %q lack %q", c.name, info.Notes, c.want)
		}
		for n, v := range g.Data {
			if want := float32(float64(n) * 0.01); v != want {
				t.Fatalf("%s: voxel %d = %g, want stored %d × 0.01", c.name, n, v, n)
			}
		}
		accepted = append(accepted, p)
	}
	t.Run("pydicom", func(t *testing.T) {
		py := requirePython(t)
		out, err := exec.Command(py, append([]string{"-c", `import sys, json, pydicom
for p in sys.argv[1:]:
    ds = pydicom.dcmread(p)
    print(json.dumps((ds.pixel_array.astype(float) * float(ds.DoseGridScaling)).ravel().tolist()))`}, accepted...)...).CombinedOutput()
		if err != nil {
			t.Fatalf("pydicom: %v\n%s", err, out)
		}
		for i, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
			var ref []float64
			if err := json.Unmarshal([]byte(line), &ref); err != nil {
				t.Fatal(err)
			}
			g, _, _ := dicomio.ReadDose(accepted[i])
			for n, v := range ref {
				if math.Abs(v-float64(g.Data[n])) > 1e-6 {
					t.Fatalf("%s voxel %d: pydicom stored × DoseGridScaling %g, voxgamma %g", accepted[i], n, v, g.Data[n])
				}
			}
		}
		// The refused RescaleSlope 2: pydicom's generic Modality LUT and the
		// RT convention give different doses for the same file.
		out, err = exec.Command(py, "-c", `import sys, pydicom
from pydicom.pixel_data_handlers.util import apply_modality_lut
ds = pydicom.dcmread(sys.argv[1])
a = ds.pixel_array.astype(float)
print(float(apply_modality_lut(a, ds).max()), float((a * float(ds.DoseGridScaling)).max()))`, dir+"/slope_2.dcm").CombinedOutput()
		if err != nil {
			t.Fatalf("pydicom: %v\n%s", err, out)
		}
		var modality, rt float64
		if _, err := fmt.Sscan(string(out), &modality, &rt); err != nil || modality != 23*2 || rt != 23*0.01 {
			t.Errorf("pydicom on RescaleSlope 2: modality LUT max %g, RT max %g (%s); want 46 and 0.23: two readings of one file", modality, rt, out)
		}
	})
}
