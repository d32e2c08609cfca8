package dicomio_test

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/volume"
)

// orientation is a patient position in DICOM terms: the direction cosines
// of a row and a column (PS3.3 C.7.6.2.1.1); frames run along row × column.
type orientation struct {
	name     string
	row, col [3]float64
}

var orientations = []orientation{
	{"head-first supine", [3]float64{1, 0, 0}, [3]float64{0, 1, 0}},
	{"head-first prone", [3]float64{-1, 0, 0}, [3]float64{0, -1, 0}},
	{"feet-first supine", [3]float64{-1, 0, 0}, [3]float64{0, 1, 0}},
	{"feet-first prone", [3]float64{1, 0, 0}, [3]float64{0, -1, 0}},
	{"sagittal", [3]float64{0, 1, 0}, [3]float64{0, 0, -1}},
}

func crossV(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

// frameSets are frame offsets along row × column: uniform, irregular, and
// decreasing (volume.New flips such an axis).
var frameSets = map[string][]float64{
	"uniform":    {0, 2.5, 5, 7.5, 10},
	"irregular":  {0, 1.5, 3, 6, 9, 15},
	"decreasing": {0, -2, -4, -6},
}

// testGrid builds a grid 5×4×len(frames) in the given orientation filled
// with a smooth positive function of the patient position.
func testGrid(t *testing.T, o orientation, frames []float64) *volume.Grid {
	t.Helper()
	dir := [3][3]float64{o.row, o.col, crossV(o.row, o.col)}
	g, err := volume.New([3]int{5, 4, len(frames)}, [3]float64{12.5, -30.25, 101},
		dir, [3][]float64{{0, 2.5, 5, 7.5, 10}, {0, 3, 6, 9}, frames})
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		p := g.WorldOf(g.IJK(n))
		g.Data[n] = float32(2.2 + math.Sin(p[0]/7) + math.Cos(p[1]/5) + (p[2]-90)/40)
	}
	return g
}

// written is a file written by a test, what it should hold and the
// options used.
type written struct {
	name string
	path string
	grid *volume.Grid
	info *dicomio.DoseInfo
	opt  dicomio.WriteOptions
}

// checkRoundTrip reads a written file back and compares it with the grid.
func checkRoundTrip(t *testing.T, w written) {
	t.Helper()
	g2, info2, err := dicomio.ReadDose(w.path)
	if err != nil {
		t.Fatalf("%s: %v", w.name, err)
	}
	if !g2.SameGeometry(w.grid) {
		t.Errorf("%s: geometry changed: origin %v→%v, directions %v→%v", w.name, w.grid.Origin(), g2.Origin(), w.grid.Direction(), g2.Direction())
	}
	for a := 0; a < 3; a++ {
		for i, v := range w.grid.Offsets(a) {
			if g2.Offsets(a)[i] != v {
				t.Errorf("%s: axis %d offset %d %v → %v (not exact)", w.name, a, i, v, g2.Offsets(a)[i])
			}
		}
	}
	if g2.Origin() != w.grid.Origin() || g2.Direction() != w.grid.Direction() {
		t.Errorf("%s: origin or direction not exact: %v %v", w.name, g2.Origin(), g2.Direction())
	}
	scale := info2.DoseGridScaling
	if scale != w.info.DoseGridScaling {
		t.Errorf("%s: DoseGridScaling read %v, written %v", w.name, scale, w.info.DoseGridScaling)
	}
	for n, v := range w.grid.Data {
		want := float64(v)
		if v != v {
			want = float64(w.opt.NaNValue)
		}
		if got := float64(g2.Data[n]); math.Abs(got-want) > scale/2+1e-6*math.Abs(want) {
			t.Errorf("%s: voxel %d: %v read back as %v (step %v)", w.name, n, want, got, scale)
			break
		}
	}
	for _, c := range [][2]string{
		{info2.DoseUnits, w.info.DoseUnits}, {info2.DoseType, w.info.DoseType}, {info2.DoseSummationType, w.info.DoseSummationType},
		{info2.FrameOfReferenceUID, w.info.FrameOfReferenceUID}, {info2.SOPInstanceUID, w.info.SOPInstanceUID},
		{info2.SeriesDescription, w.opt.Description}, {info2.PatientID, w.info.PatientID}, {info2.StudyInstanceUID, w.info.StudyInstanceUID},
		{info2.ReferencedRTPlanUID, w.info.ReferencedRTPlanUID}, {info2.StudyDate, w.info.StudyDate}, {info2.StudyTime, w.info.StudyTime},
		{info2.PatientSex, w.info.PatientSex}, {info2.PatientName, w.info.PatientName}, {info2.Manufacturer, "voxgamma"},
		{info2.SeriesInstanceUID, w.info.SeriesInstanceUID}, {info2.DoseComment, w.opt.Description},
	} {
		if c[0] != c[1] {
			t.Errorf("%s: read %q, written %q", w.name, c[0], c[1])
		}
	}
}

// writeAll writes every test case: each orientation with each frame set as
// a 16-bit dose, plus 32-bit, signed difference and gamma (with NaN) maps.
func writeAll(t *testing.T) []written {
	t.Helper()
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	var out []written
	add := func(name string, g *volume.Grid, opt dicomio.WriteOptions) {
		path := filepath.Join(dir, strings.NewReplacer(" ", "_", ",", "").Replace(name)+".dcm")
		info, err := dicomio.WriteDose(path, g, ids, opt)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		out = append(out, written{name, path, g, info, opt})
	}
	for _, o := range orientations {
		for fs, frames := range frameSets {
			add(fmt.Sprintf("%s, %s frames", o.name, fs), testGrid(t, o, frames), dicomio.DoseOptions("test dose, Gy"))
		}
	}
	g := testGrid(t, orientations[2], frameSets["irregular"])
	opt32 := dicomio.DoseOptions("test dose 32-bit, Gy")
	opt32.Bits = 32
	add("32-bit", g, opt32)
	diff := g.Clone()
	for n := range diff.Data {
		diff.Data[n] -= 2.5
	}
	add("difference 16-bit", diff, dicomio.DifferenceOptions("dose difference evaluated-reference, Gy"))
	d32 := dicomio.DifferenceOptions("dose difference evaluated-reference, Gy")
	d32.Bits = 32
	add("difference 32-bit", diff, d32)
	gam := g.Clone()
	for n := range gam.Data {
		gam.Data[n] /= 3
		if n%7 == 0 {
			gam.Data[n] = float32(math.NaN())
		}
	}
	add("gamma", gam, dicomio.GammaOptions("gamma index 3%/2mm global, unitless"))
	zero := g.EmptyLike()
	add("all zero", zero, dicomio.DoseOptions("zero dose"))
	single, err := volume.New([3]int{1, 1, 1}, [3]float64{1, 2, 3}, volume.Identity, [3][]float64{{0}, {0}, {0}})
	if err != nil {
		t.Fatal(err)
	}
	single.Data[0] = 1.25
	add("single voxel", single, dicomio.DoseOptions("one voxel"))
	return out
}

// Round trip: grid → RT Dose → ReadDose gives the same geometry exactly and
// the values to within half a scaling step, for every orientation and frame
// layout. Then the files are checked with the reference tools.
func TestWriteDoseRoundTrip(t *testing.T) {
	files := writeAll(t)
	for _, w := range files {
		checkRoundTrip(t, w)
		if w.name == "gamma" {
			if !strings.Contains(strings.Join(w.info.Notes, ";"), "NaN samples (not evaluated) written as 0") {
				t.Errorf("gamma notes %q do not report the NaN convention", w.info.Notes)
			}
		}
	}

	// Source: pydicom reads the files back; numpy computes dose and voxel
	// positions from the tags by the standard's formula.
	t.Run("pydicom", func(t *testing.T) {
		var paths []string
		for _, w := range files {
			paths = append(paths, w.path)
		}
		refs := pydicomDoses(t, paths...)
		for f, w := range files {
			ref := refs[f]
			g2, info2, err := dicomio.ReadDose(w.path)
			if err != nil {
				t.Fatal(err)
			}
			compareWithPydicom(t, ref, g2, info2)
			if ref.Desc != w.opt.Description {
				t.Errorf("%s: SeriesDescription %q, want %q", w.name, ref.Desc, w.opt.Description)
			}
			for n, v := range w.grid.Data {
				want := float64(v)
				if v != v {
					want = float64(w.opt.NaNValue)
				}
				if math.Abs(ref.Dose[n]-want) > ref.Scaling/2+1e-6*math.Abs(want) {
					t.Errorf("%s voxel %d: pydicom %v, written %v", w.name, n, ref.Dose[n], want)
					break
				}
				i, j, k := w.grid.IJK(n)
				if p := w.grid.WorldOf(i, j, k); p != [3]float64{ref.X[n], ref.Y[n], ref.Z[n]} {
					t.Errorf("%s voxel (%d,%d,%d): written at %v, the tags place it at (%v, %v, %v)", w.name, i, j, k, p, ref.X[n], ref.Y[n], ref.Z[n])
					break
				}
			}
		}
	})

	// Source: dcmtk's dcmftest (is it a DICOM file) and dcmdump (does it
	// parse without warnings).
	t.Run("dcmtk", func(t *testing.T) {
		dcmftest, dcmdump := requireTool(t, "dcmftest"), requireTool(t, "dcmdump")
		for _, w := range files {
			dcmtkAccepts(t, dcmftest, dcmdump, w.path)
		}
	})

	// Source: dicom3tools' dciodvfy checks the RT Dose IOD. It aborts on
	// 32-bit pixel data, so only the 16-bit files are given to it. Debian's
	// dciodvfy (2022) knows only PixelRepresentation 0 for RT Dose, while
	// PS3.3 C.8.8.3 allows 1 (two's complement) when DoseType is ERROR, as
	// in the difference map: that one message is tolerated there, any other
	// error fails.
	t.Run("dciodvfy", func(t *testing.T) {
		dciodvfy := requireTool(t, "dciodvfy")
		for _, w := range files {
			if w.opt.Bits == 32 {
				continue
			}
			var allow []string
			if w.opt.Signed {
				allow = append(allow, "Error - Unrecognized enumerated value <0x1> for value 1 of attribute <Pixel Representation>")
			}
			dciodvfyAccepts(t, dciodvfy, w.path, "RTDose", allow...)
		}
	})
}

func dcmtkAccepts(t *testing.T, dcmftest, dcmdump, path string) {
	t.Helper()
	out, err := exec.Command(dcmftest, path).CombinedOutput()
	if err != nil || !strings.HasPrefix(string(out), "yes:") {
		t.Errorf("dcmftest %s: %v: %s", filepath.Base(path), err, out)
	}
	var stderr bytes.Buffer
	cmd := exec.Command(dcmdump, "-dc", path)
	cmd.Stderr = &stderr
	if err := cmd.Run(); err != nil || stderr.Len() > 0 {
		t.Errorf("dcmdump %s: %v: %s", filepath.Base(path), err, stderr.String())
	}
}

// dciodvfyAccepts runs dciodvfy and fails on every "Error" line except the
// allowed ones.
func dciodvfyAccepts(t *testing.T, dciodvfy, path, iod string, allowed ...string) {
	t.Helper()
	out, _ := exec.Command(dciodvfy, path).CombinedOutput()
	text := string(out)
	if !strings.Contains(text, iod) {
		t.Errorf("dciodvfy %s did not recognise a %s: %s", filepath.Base(path), iod, text)
	}
	for _, line := range strings.Split(text, "\n") {
		ok := false
		for _, a := range allowed {
			ok = ok || strings.TrimSpace(line) == a
		}
		if strings.HasPrefix(line, "Error") && !ok {
			t.Errorf("dciodvfy %s: %s", filepath.Base(path), line)
		}
	}
}

// The RT Dose written is explicit VR little endian with a file meta header.
func TestWriteDoseEncoding(t *testing.T) {
	g := testGrid(t, orientations[0], frameSets["uniform"])
	path := filepath.Join(t.TempDir(), "d.dcm")
	if _, err := dicomio.WriteDose(path, g, dicomio.PhantomIdentifiers("", ""), dicomio.DoseOptions("dose")); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if string(data[128:132]) != "DICM" || !bytes.Contains(data[:400], []byte("1.2.840.10008.1.2.1\x00")) {
		t.Errorf("no file meta header with explicit VR little endian")
	}
	// Explicit VR: the Modality element is (0008,0060) "CS".
	if !bytes.Contains(data, []byte{0x08, 0x00, 0x60, 0x00, 'C', 'S'}) {
		t.Errorf("Modality is not written with explicit VR")
	}

	// A name outside ASCII is written as UTF-8 and declared so
	// (SpecificCharacterSet ISO_IR 192).
	ids := dicomio.PhantomIdentifiers("PHANTOM^TÊTE", "")
	if _, err := dicomio.WriteDose(path, g, ids, dicomio.DoseOptions("dose")); err != nil {
		t.Fatal(err)
	}
	data, _ = os.ReadFile(path)
	if !bytes.Contains(data, []byte("ISO_IR 192")) {
		t.Error("no SpecificCharacterSet ISO_IR 192")
	}
	_, info, err := dicomio.ReadDose(path)
	if err != nil || info.PatientName != "PHANTOM^TÊTE" {
		t.Errorf("name read back %q, %v", info.PatientName, err)
	}
	if ref := pydicomDoses(t, path)[0]; ref.PName != "PHANTOM^TÊTE" {
		t.Errorf("pydicom reads the name as %q", ref.PName)
	}
}

func TestWriteDoseErrors(t *testing.T) {
	ids := dicomio.PhantomIdentifiers("", "")
	good := testGrid(t, orientations[0], frameSets["uniform"])
	nonUniform, err := volume.New([3]int{3, 2, 2}, [3]float64{}, volume.Identity, [3][]float64{{0, 1, 3}, {0, 1}, {0, 1}})
	if err != nil {
		t.Fatal(err)
	}
	negative := good.Clone()
	negative.Data[3] = -1
	inf := good.Clone()
	inf.Data[2] = float32(math.Inf(1))
	signedPhysical := dicomio.DoseOptions("x")
	signedPhysical.Signed = true
	noFrame := ids
	noFrame.FrameOfReferenceUID = ""
	bits8 := dicomio.DoseOptions("x")
	bits8.Bits = 8
	cases := []struct {
		name string
		g    *volume.Grid
		ids  dicomio.Identifiers
		opt  dicomio.WriteOptions
		want string
	}{
		{"non-uniform columns", nonUniform, ids, dicomio.DoseOptions("x"), "index axis i has non-uniform spacing"},
		{"negative unsigned", negative, ids, dicomio.DoseOptions("x"), "voxel (3,0,0) is -1: negative values need signed storage"},
		{"infinite", inf, ids, dicomio.DoseOptions("x"), "voxel (2,0,0) is +Inf"},
		{"signed physical", good, ids, signedPhysical, "signed values need DoseType ERROR"},
		{"no frame of reference", good, noFrame, dicomio.DoseOptions("x"), "FrameOfReferenceUID is empty"},
		{"no description", good, ids, dicomio.DoseOptions(""), "Description is empty"},
		{"long description", good, ids, dicomio.DoseOptions(strings.Repeat("d", 65)), "longer than the 64 characters"},
		{"8 bits", good, ids, bits8, "Bits 8: want 16 or 32"},
	}
	for _, c := range cases {
		path := filepath.Join(t.TempDir(), "bad.dcm")
		_, err := dicomio.WriteDose(path, c.g, c.ids, c.opt)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), path) {
			t.Errorf("%s: error %v, want one naming the file and containing %q", c.name, err, c.want)
		}
		if _, serr := os.Stat(path); serr == nil {
			t.Errorf("%s: a file was left behind", c.name)
		}
	}
}
