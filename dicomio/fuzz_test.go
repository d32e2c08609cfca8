package dicomio_test

// Fuzzing the two readers with Go's native fuzzer:
//
//	go test -run '^$' -fuzz FuzzReadDose -fuzztime 60s ./dicomio/
//	go test -run '^$' -fuzz FuzzReadStructureSet -fuzztime 60s ./dicomio/
//
// Whatever the bytes, a reader returns: never a panic, never a hang (each
// call must return within readDeadline), and an error names the file and
// is of one of the documented kinds (errors.go). A dose it accepts must be
// what its header says (PS3.3 C.7.6.2.1.1, C.8.8.3): finite values within
// the range of the stored integers times DoseGridScaling, non-negative
// unless DoseType is ERROR, Rows × Columns × NumberOfFrames of them, each
// at ImagePositionPatient + column·Δcolumn·row + row·Δrow·column +
// offset·(row × column). A structure set it accepts has unique ROI
// numbers and finite contour points.
//
// Seeds: the hand-built files of dose_test.go and structureset_test.go; the
// pydicom project's RT files as Debian's python3-pydicom installs them
// (added at run time when present); and the small files under
// testdata/fuzz/FuzzReadDose and testdata/fuzz/FuzzReadStructureSet named
// seed-*, written by dicomio's own writers (regenerate them with
// VOXGAMMA_WRITE_FUZZ_CORPUS=1 go test -run TestFuzzCorpus ./dicomio/).
// Inputs the fuzzer finds failing are written by Go next to them and are
// then run by every `go test` as regression tests.

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/dicomio"
	"voxgamma/internal/fixture"
	"voxgamma/structure"
	"voxgamma/volume"
)

// readDeadline bounds one read of a fuzz input of at most a few hundred
// kB; the readers check every length before reading, so a read takes
// milliseconds.
const readDeadline = 10 * time.Second

// pydicomDataDir is where Debian's python3-pydicom installs the pydicom
// project's test files.
const pydicomFuzzDir = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

// addPydicomSeeds adds the pydicom project's RT files as seeds. Missing
// files are skipped with a message, or fail the run when CI is set
// (DEVELOPERS.md).
func addPydicomSeeds(f *testing.F) {
	for _, name := range []string{"rtdose.dcm", "rtdose_1frame.dcm", "rtstruct.dcm", "rtplan.dcm", "rtdose_expb.dcm"} {
		b, err := os.ReadFile(filepath.Join(pydicomFuzzDir, name))
		if err != nil {
			msg := fmt.Sprintf("pydicom test file %s not added as a seed (%v): apt-get install python3-pydicom", name, err)
			if os.Getenv("CI") != "" {
				f.Fatal(msg)
			}
			f.Log(msg)
			continue
		}
		f.Add(b)
	}
}

// addFixtureSeeds adds the shared fixtures matching the patterns (relative
// to the top-level testdata, testdata/README.md) as seeds: files pydicom
// wrote, and the bad-input corpus's damaged ones.
func addFixtureSeeds(f *testing.F, patterns ...string) {
	n := 0
	for _, pat := range patterns {
		paths, err := filepath.Glob(filepath.Join(fixture.Dir(), filepath.FromSlash(pat)))
		if err != nil {
			f.Fatal(err)
		}
		for _, p := range paths {
			b, err := os.ReadFile(p)
			if err != nil {
				f.Fatal(err)
			}
			f.Add(b)
			n++
		}
	}
	if n == 0 {
		f.Fatalf("no shared fixture matches %q", patterns)
	}
}

// fuzzDir returns a folder for the fuzz input file, one per fuzzing
// process (each runs its inputs one after the other): in memory under
// /dev/shm when there is one (writing there is an order of magnitude
// faster than to disk, and the readers need a real file), else the test's
// temporary folder. The fuzzer ends its worker processes without running
// their clean-ups, so the folder is named after the process and folders
// of processes that no longer exist are removed here; each input file is
// removed after use.
func fuzzDir(f *testing.F) string {
	const prefix = "/dev/shm/voxgamma-fuzz-"
	if old, err := filepath.Glob(prefix + "*"); err == nil {
		for _, d := range old {
			pid, err := strconv.Atoi(strings.TrimPrefix(d, prefix))
			if err == nil && pid != os.Getpid() && syscall.Kill(pid, 0) == syscall.ESRCH {
				os.RemoveAll(d)
			}
		}
	}
	d := prefix + strconv.Itoa(os.Getpid())
	if err := os.Mkdir(d, 0o700); err == nil || os.IsExist(err) {
		f.Cleanup(func() { os.RemoveAll(d) })
		return d
	}
	return f.TempDir()
}

// within runs fn and fails the test when it does not return within
// readDeadline (the fuzzer's own time-out is for the whole run).
func within(t *testing.T, what string, fn func()) {
	t.Helper()
	done := make(chan struct{})
	go func() {
		defer close(done)
		fn()
	}()
	select {
	case <-done:
	case <-time.After(readDeadline):
		t.Fatalf("%s did not return within %v", what, readDeadline)
	}
}

// checkReadError checks the error contract of errors.go: the message starts
// "reading PATH: " and the error is one of the three documented kinds.
func checkReadError(t *testing.T, path string, err error) {
	t.Helper()
	if !strings.HasPrefix(err.Error(), "reading "+path+": ") {
		t.Errorf("error %q does not name the file", err)
	}
	if !errors.Is(err, dicomio.ErrNotDICOM) && !errors.Is(err, dicomio.ErrInvalid) && !errors.Is(err, dicomio.ErrUnsupported) {
		t.Errorf("error %q is none of ErrNotDICOM, ErrInvalid, ErrUnsupported", err)
	}
}

func FuzzReadDose(f *testing.F) {
	addPydicomSeeds(f)
	addFixtureSeeds(f, "dicom/*/RD_*.dcm", "bad-input/*.dcm")
	f.Add(encodeFile(baseDose(), explicitLE, true))
	f.Add(encodeFile(baseDose(), implicitLE, false))
	f.Add(encodeFile(baseDose(), "", false))
	f.Add(encodeFile(with(baseDose(), str(tGFOV, "DS", `20\22\24\28`)), explicitLE, true))
	path := filepath.Join(fuzzDir(f), "fuzz_RD.dcm")
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(path, data, 0o644); err != nil {
			t.Fatal(err)
		}
		var g *volume.Grid
		var info, hdr *dicomio.DoseInfo
		var err, herr error
		defer os.Remove(path)
		within(t, "ReadDose", func() { g, info, err = dicomio.ReadDose(path) })
		within(t, "ReadDoseInfo", func() { hdr, herr = dicomio.ReadDoseInfo(path) })
		if herr != nil {
			checkReadError(t, path, herr)
		}
		if err != nil {
			checkReadError(t, path, err)
			return
		}
		if herr != nil {
			t.Fatalf("ReadDose accepted the file but ReadDoseInfo refused it: %v", herr)
		}
		if hdr.Rows != info.Rows || hdr.Columns != info.Columns || hdr.NumberOfFrames != info.NumberOfFrames ||
			hdr.DoseGridScaling != info.DoseGridScaling || hdr.DoseUnits != info.DoseUnits {
			t.Errorf("ReadDoseInfo %+v disagrees with ReadDose %+v", hdr, info)
		}
		checkDoseAgainstHeader(t, g, info)
	})
}

// checkDoseAgainstHeader checks an accepted dose against its header, from
// the standard's formulas rather than the reader's code.
func checkDoseAgainstHeader(t *testing.T, g *volume.Grid, info *dicomio.DoseInfo) {
	t.Helper()
	if info.DoseUnits != "GY" && info.DoseUnits != "RELATIVE" {
		t.Errorf("DoseUnits %q accepted (PS3.3 C.8.8.3: GY or RELATIVE)", info.DoseUnits)
	}
	s := info.DoseGridScaling
	if !(s > 0) || math.IsInf(s, 0) {
		t.Fatalf("DoseGridScaling %g accepted", s)
	}
	if info.BitsAllocated != 16 && info.BitsAllocated != 32 || info.BitsStored < 1 || info.BitsStored > info.BitsAllocated {
		t.Fatalf("BitsAllocated %d, BitsStored %d accepted", info.BitsAllocated, info.BitsStored)
	}
	// C.7.6.3, C.7.6.6: Rows × Columns × NumberOfFrames samples.
	want := [3]int{info.Columns, info.Rows, info.NumberOfFrames}
	if g.Dims() != want || len(g.Data) != want[0]*want[1]*want[2] {
		t.Fatalf("grid %v with %d values, header Columns × Rows × NumberOfFrames = %v", g.Dims(), len(g.Data), want)
	}
	// Stored values are BitsStored-bit integers (PS3.5 8.1.1), so
	// |dose| ≤ 2^BitsStored × DoseGridScaling (float32 rounding aside).
	limit := math.Ldexp(s, info.BitsStored) * (1 + 1e-6)
	for n, v := range g.Data {
		x := float64(v)
		switch {
		case math.IsNaN(x) || math.IsInf(x, 0):
			t.Fatalf("voxel %d is %g", n, v)
		case math.Abs(x) > limit:
			t.Fatalf("voxel %d is %g, beyond 2^%d × %g", n, v, info.BitsStored, s)
		case x < 0 && info.DoseType != "ERROR":
			t.Fatalf("voxel %d is %g with DoseType %q (PS3.3 C.8.8.3.4: signed only for ERROR)", n, v, info.DoseType)
		}
	}
	// Positions (C.7.6.2.1.1 and C.8.8.3.2): voxel (c, r, f) at
	// IPP + c·Δcolumn·row + r·Δrow·column + offset_f·(row × column), where
	// PixelSpacing = [Δrow, Δcolumn] and offset_f is GridFrameOffsetVector
	// (relative when its first value is 0, else absolute z: offset_f =
	// (z_f − z_0)/normal_z).
	ipp, iop, ps := info.ImagePositionPatient, info.ImageOrientationPatient, info.PixelSpacing
	row := [3]float64{iop[0], iop[1], iop[2]}
	col := [3]float64{iop[3], iop[4], iop[5]}
	normal := [3]float64{row[1]*col[2] - row[2]*col[1], row[2]*col[0] - row[0]*col[2], row[0]*col[1] - row[1]*col[0]}
	offset := func(k int) float64 {
		v := info.GridFrameOffsetVector
		if info.NumberOfFrames == 1 {
			return 0
		}
		if v[0] == 0 {
			return v[k]
		}
		return (v[k] - v[0]) / normal[2]
	}
	for _, c := range []int{0, info.Columns - 1} {
		for _, r := range []int{0, info.Rows - 1} {
			for _, k := range []int{0, info.NumberOfFrames - 1} {
				d := [3]float64{float64(c) * ps[1], float64(r) * ps[0], offset(k)}
				got := g.WorldOf(c, r, k)
				for a := 0; a < 3; a++ {
					exp := ipp[a] + d[0]*row[a] + d[1]*col[a] + d[2]*normal[a]
					// The reader snaps cosines within 1e-4 of an axis
					// (volume's orientation tolerance).
					tol := 1e-4*(math.Abs(d[0])+math.Abs(d[1])+math.Abs(d[2])) + 1e-9*(1+math.Abs(exp))
					if !(math.Abs(got[a]-exp) <= tol) {
						t.Fatalf("voxel (%d,%d,%d) at %v, header puts it at %g on axis %d (IPP %v, IOP %v, PixelSpacing %v, offset %g)",
							c, r, k, got, exp, a, ipp, iop, ps, d[2])
					}
				}
			}
		}
	}
}

func FuzzReadStructureSet(f *testing.F) {
	addPydicomSeeds(f)
	addFixtureSeeds(f, "dicom/*/RS*.dcm", "bad-input/*.dcm")
	f.Add(encodeFile(baseStruct(), explicitLE, true))
	f.Add(encodeFile(baseStruct(), implicitLE, false))
	f.Add(encodeFile(baseStruct(), "", true))
	path := filepath.Join(fuzzDir(f), "fuzz_RS.dcm")
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(path, data, 0o644); err != nil {
			t.Fatal(err)
		}
		var set *structure.Set
		var err error
		defer os.Remove(path)
		within(t, "ReadStructureSet", func() { set, err = dicomio.ReadStructureSet(path) })
		if err != nil {
			checkReadError(t, path, err)
			return
		}
		checkStructureSet(t, set)
	})
}

// checkStructureSet checks an accepted structure set: ROI numbers unique
// (PS3.3 C.8.8.5: ROINumber uniquely identifies the ROI within the set),
// contours with a type and x, y, z points that are finite numbers
// (C.8.8.6, ContourData in mm).
func checkStructureSet(t *testing.T, set *structure.Set) {
	t.Helper()
	seen := map[int]bool{}
	for _, r := range set.ROIs {
		if seen[r.Number] {
			t.Fatalf("ROI number %d accepted twice", r.Number)
		}
		seen[r.Number] = true
		for c, ct := range r.Contours {
			if ct.Type == "" || len(ct.Points) == 0 {
				t.Fatalf("ROI %d contour %d: type %q with %d points accepted", r.Number, c, ct.Type, len(ct.Points))
			}
			for _, p := range ct.Points {
				for _, v := range p {
					if math.IsNaN(v) || math.IsInf(v, 0) {
						t.Fatalf("ROI %d contour %d: coordinate %g accepted", r.Number, c, v)
					}
				}
			}
		}
	}
}

// corpusSeed is one file of the seed corpus written with dicomio's
// writers: invented phantom data only, a few kB each.
type corpusSeed struct {
	fuzz, name string
	write      func(t *testing.T, path string)
}

func corpusSeeds() []corpusSeed {
	ids := dicomio.PhantomIdentifiers("", "")
	grid := func(t *testing.T, dims [3]int, dir [3][3]float64, frames []float64, fill func(i, j, k int) float32) *volume.Grid {
		t.Helper()
		g, err := volume.New(dims, [3]float64{-2, -3, 5}, dir, [3][]float64{uniform(dims[0], 2), uniform(dims[1], 2.5), frames})
		if err != nil {
			t.Fatal(err)
		}
		for n := range g.Data {
			i, j, k := g.IJK(n)
			g.Data[n] = fill(i, j, k)
		}
		return g
	}
	dose := func(name string, g func(t *testing.T) *volume.Grid, opt dicomio.WriteOptions, strip bool) corpusSeed {
		return corpusSeed{"FuzzReadDose", name, func(t *testing.T, path string) {
			if _, err := dicomio.WriteDose(path, g(t), ids, opt); err != nil {
				t.Fatal(err)
			}
			if strip {
				stripFile(t, path)
			}
		}}
	}
	ramp := func(i, j, k int) float32 { return float32(i+3*j+7*k) * 0.25 }
	frac := dicomio.DoseOptions("fraction dose, beam 2, Gy")
	frac.DoseSummationType, frac.ReferencedFractionGroupNumber, frac.ReferencedBeamNumber = "BEAM", 1, 2
	diff := dicomio.DifferenceOptions("difference, Gy")
	diff.Bits = 32
	rel := dicomio.GammaOptions("gamma 3%/2mm, unitless")
	feetFirstProne := [3][3]float64{{1, 0, 0}, {0, -1, 0}, {0, 0, -1}}
	set := func(name string, rois []structure.ROI, strip bool) corpusSeed {
		return corpusSeed{"FuzzReadStructureSet", name, func(t *testing.T, path string) {
			s := &structure.Set{Label: "FUZZ_SEED", ROIs: rois}
			if _, err := dicomio.WriteStructureSet(path, s, ids); err != nil {
				t.Fatal(err)
			}
			if strip {
				stripFile(t, path)
			}
		}}
	}
	sq := func(h, z float64) structure.Contour {
		return structure.Contour{Type: structure.ClosedPlanar, Points: [][3]float64{{-h, -h, z}, {h, -h, z}, {h, h, z}, {-h, h, z}}}
	}
	return []corpusSeed{
		dose("seed-dose-16bit-irregular-frames", func(t *testing.T) *volume.Grid {
			return grid(t, [3]int{3, 2, 4}, volume.Identity, []float64{0, 2, 4, 8}, ramp)
		}, dicomio.DoseOptions("plan dose, Gy"), false),
		dose("seed-dose-beam-feet-first-prone", func(t *testing.T) *volume.Grid {
			return grid(t, [3]int{2, 3, 3}, feetFirstProne, []float64{0, 3, 6}, ramp)
		}, frac, false),
		dose("seed-dose-32bit-signed-one-frame", func(t *testing.T) *volume.Grid {
			return grid(t, [3]int{4, 3, 1}, volume.Identity, []float64{0}, func(i, j, k int) float32 { return float32(i-j) * 0.5 })
		}, diff, false),
		dose("seed-dose-relative-no-meta", func(t *testing.T) *volume.Grid {
			return grid(t, [3]int{2, 2, 2}, volume.Identity, []float64{0, 2}, ramp)
		}, rel, true),
		set("seed-rs-two-rois", []structure.ROI{
			{Number: 1, Name: "PTV", InterpretedType: "PTV", Color: [3]uint8{255, 0, 0}, HasColor: true, Contours: []structure.Contour{sq(3, 1), sq(4, 3), sq(3, 5)}},
			{Number: 7, Name: "Cord", InterpretedType: "ORGAN", Contours: []structure.Contour{sq(1, 1), sq(1, 3)}},
		}, false),
		set("seed-rs-points-open-empty-no-meta", []structure.ROI{
			{Number: 2, Name: "Iso", InterpretedType: "ISOCENTER", Contours: []structure.Contour{{Type: structure.Point, Points: [][3]float64{{0, 0, 0}}}}},
			{Number: 3, Name: "Wire", Contours: []structure.Contour{{Type: structure.OpenPlanar, Points: [][3]float64{{0, 0, 2}, {5, 1, 2}, {6, 4, 2}}}}},
			{Number: 4, Name: "Empty", InterpretedType: "AVOIDANCE"},
		}, true),
	}
}

func uniform(n int, s float64) []float64 {
	o := make([]float64, n)
	for i := range o {
		o[i] = float64(i) * s
	}
	return o
}

// stripFile removes the preamble, "DICM" and the file meta group (PS3.10
// section 7.1), leaving a bare explicit VR little endian data set, which
// dicomio reads when its encoding is unambiguous (doc.go).
func stripFile(t *testing.T, path string) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, stripMeta(t, b), 0o644); err != nil {
		t.Fatal(err)
	}
}

// corpusHeader is the first line of Go's fuzz corpus files
// (cmd/go, "go test fuzz v1"), followed by one value per line.
const corpusHeader = "go test fuzz v1\n"

// corpusEncode writes data as a corpus file holding one []byte.
func corpusEncode(data []byte) []byte {
	return []byte(corpusHeader + "[]byte(" + strconv.Quote(string(data)) + ")\n")
}

// corpusDecode reads a corpus file holding one []byte.
func corpusDecode(b []byte) ([]byte, error) {
	s, ok := strings.CutPrefix(string(b), corpusHeader)
	if !ok {
		return nil, errors.New("no \"go test fuzz v1\" header")
	}
	s = strings.TrimSpace(s)
	inner, ok := strings.CutPrefix(s, "[]byte(")
	if !ok || !strings.HasSuffix(inner, ")") {
		return nil, fmt.Errorf("not one []byte value: %.40q", s)
	}
	v, err := strconv.Unquote(strings.TrimSuffix(inner, ")"))
	if err != nil {
		return nil, err
	}
	return []byte(v), nil
}

// TestFuzzCorpus checks the seed files of the fuzz corpus: each decodes
// and is read by its reader without error (a seed is a valid file for the
// fuzzer to damage), and is small. With VOXGAMMA_WRITE_FUZZ_CORPUS=1 it
// writes them anew first.
func TestFuzzCorpus(t *testing.T) {
	seeds := corpusSeeds()
	if os.Getenv("VOXGAMMA_WRITE_FUZZ_CORPUS") != "" {
		for _, s := range seeds {
			p := filepath.Join(t.TempDir(), s.name+".dcm")
			s.write(t, p)
			b, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			dir := filepath.Join("testdata", "fuzz", s.fuzz)
			if err := os.MkdirAll(dir, 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(filepath.Join(dir, s.name), corpusEncode(b), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	for _, s := range seeds {
		t.Run(s.name, func(t *testing.T) {
			raw, err := os.ReadFile(filepath.Join("testdata", "fuzz", s.fuzz, s.name))
			if err != nil {
				t.Fatalf("%v (write the corpus with VOXGAMMA_WRITE_FUZZ_CORPUS=1 go test -run TestFuzzCorpus ./dicomio/)", err)
			}
			if len(raw) > 8<<10 {
				t.Errorf("corpus file of %d bytes: keep seeds to a few kB", len(raw))
			}
			data, err := corpusDecode(raw)
			if err != nil {
				t.Fatal(err)
			}
			p := filepath.Join(t.TempDir(), "seed.dcm")
			if err := os.WriteFile(p, data, 0o644); err != nil {
				t.Fatal(err)
			}
			switch s.fuzz {
			case "FuzzReadDose":
				g, info, err := dicomio.ReadDose(p)
				if err != nil {
					t.Fatal(err)
				}
				checkDoseAgainstHeader(t, g, info)
			default:
				set, err := dicomio.ReadStructureSet(p)
				if err != nil {
					t.Fatal(err)
				}
				checkStructureSet(t, set)
				if len(set.ROIs) == 0 {
					t.Errorf("no ROI read")
				}
			}
			// The decoding is the one Go's fuzzer uses: the same bytes
			// encode to the same file.
			if !bytes.Equal(corpusEncode(data), raw) {
				t.Errorf("corpus file does not round-trip through the encoding")
			}
		})
	}
}

// FuzzReadPlan feeds mutated RT Plans to ReadPlan: it must return a plan or
// an error naming the file, never panic, and what it accepts must hold
// together (PS3.3 C.8.8.13, C.8.8.14: beam numbers unique, every
// fraction group's referenced beams defined, counts and doses not
// negative and finite).
func FuzzReadPlan(f *testing.F) {
	addFixtureSeeds(f, "dicom/*/RP*.dcm")
	f.Add(encodeFile(baseRTPlan(), explicitLE, true))
	f.Add(encodeFile(baseRTPlan(), implicitLE, false))
	f.Add(encodeFile(baseRTPlan(), "", true))
	path := filepath.Join(fuzzDir(f), "fuzz_RP.dcm")
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(path, data, 0o644); err != nil {
			t.Fatal(err)
		}
		defer os.Remove(path)
		var p *dicomio.Plan
		var err error
		within(t, "ReadPlan", func() { p, err = dicomio.ReadPlan(path) })
		if err != nil {
			checkReadError(t, path, err)
			return
		}
		seen := map[int]bool{}
		for _, b := range p.Beams {
			if seen[b.Number] {
				t.Fatalf("beam number %d accepted twice", b.Number)
			}
			seen[b.Number] = true
		}
		for _, g := range p.FractionGroups {
			if g.FractionsPlanned < 0 {
				t.Fatalf("fraction group %d: %d fractions accepted", g.Number, g.FractionsPlanned)
			}
			for _, rb := range g.Beams {
				if !seen[rb.BeamNumber] {
					t.Fatalf("fraction group %d references undefined beam %d", g.Number, rb.BeamNumber)
				}
				if rb.Meterset != nil && !(*rb.Meterset >= 0 && !math.IsInf(*rb.Meterset, 0)) {
					t.Fatalf("meterset %v accepted", *rb.Meterset)
				}
			}
		}
		for _, d := range p.DoseReferences {
			if d.TargetPrescriptionGy != nil && !(*d.TargetPrescriptionGy >= 0 && !math.IsInf(*d.TargetPrescriptionGy, 0)) {
				t.Fatalf("prescription %v accepted", *d.TargetPrescriptionGy)
			}
		}
	})
}
