package dicomio_test

import (
	"bytes"
	"encoding/binary"
	"errors"
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

// beamSpec is an invented beam dose: a smooth field peaking near centre,
// written as a BEAM dose of the invented plan of ids.
type beamSpec struct {
	name    string
	beam    int
	dims    [3]int
	origin  [3]float64
	spacing [3]float64
	dir     [3][3]float64
	centre  [3]float64
	peak    float64
	opt     func(*dicomio.WriteOptions)
	ids     func(*dicomio.Identifiers)
}

// beamField is the invented dose of one beam: a Gaussian of 15 mm width
// around c on a 0.2 Gy bath, peaking at peak Gy.
func beamField(p, c [3]float64, peak float64) float64 {
	d2 := 0.0
	for a := 0; a < 3; a++ {
		d2 += (p[a] - c[a]) * (p[a] - c[a])
	}
	return 0.2 + peak*math.Exp(-d2/(2*15*15))
}

func writeBeam(t *testing.T, dir string, ids dicomio.Identifiers, b beamSpec) string {
	t.Helper()
	d := b.dir
	if d == ([3][3]float64{}) {
		d = volume.Identity
	}
	var off [3][]float64
	for a := 0; a < 3; a++ {
		off[a] = make([]float64, b.dims[a])
		for i := range off[a] {
			off[a][i] = float64(i) * b.spacing[a]
		}
	}
	g, err := volume.New(b.dims, b.origin, d, off)
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		g.Data[n] = float32(beamField(g.WorldOf(g.IJK(n)), b.centre, b.peak))
	}
	opt := dicomio.DoseOptions("invented beam dose, Gy")
	opt.DoseSummationType, opt.ReferencedFractionGroupNumber, opt.ReferencedBeamNumber = "BEAM", 1, b.beam
	if b.opt != nil {
		b.opt(&opt)
	}
	if b.ids != nil {
		b.ids(&ids)
	}
	path := filepath.Join(dir, b.name)
	if _, err := dicomio.WriteDose(path, g, ids, opt); err != nil {
		t.Fatal(err)
	}
	return path
}

// sumScript is the reference summation: pydicom reads each file, numpy
// computes stored value × DoseGridScaling in float64 and sums the files
// voxel by voxel (identical grids), or scipy interpolates each file
// linearly at the voxel centres of the grid given (0 outside a file's
// grid, as the sum takes it) and numpy sums those. Voxel positions come
// from the tags by the formula of PS3.3 C.7.6.2.1.1 and C.8.8.3.2 (relative
// GridFrameOffsetVector, as dicomio.WriteDose writes it). Output: float64,
// i (patient x) fastest, then j, then k.
const sumScript = `
import sys
import numpy as np
import pydicom
from scipy.interpolate import RegularGridInterpolator

out, mode = sys.argv[1], sys.argv[2]
rest = sys.argv[3:]
if mode == "at":
    origin = [float(v) for v in rest[0:3]]
    spacing = [float(v) for v in rest[3:6]]
    dims = [int(v) for v in rest[6:9]]
    files = rest[9:]
else:
    files = rest

def read(path):
    ds = pydicom.dcmread(path)
    rows, cols = int(ds.Rows), int(ds.Columns)
    frames = int(ds.get("NumberOfFrames", 1))
    dose = ds.pixel_array.reshape(frames, rows, cols).astype(np.float64) * float(ds.DoseGridScaling)
    return ds, dose

if mode == "same":
    total = None
    for f in files:
        ds, dose = read(f)
        total = dose if total is None else total + dose
    total.astype("<f8").tofile(out)
    sys.exit(0)

xs = origin[0] + spacing[0] * np.arange(dims[0])
ys = origin[1] + spacing[1] * np.arange(dims[1])
zs = origin[2] + spacing[2] * np.arange(dims[2])
Z, Y, X = np.meshgrid(zs, ys, xs, indexing="ij")
pts = np.stack([X.ravel(), Y.ravel(), Z.ravel()], axis=1)
total = np.zeros(len(pts))
for f in files:
    ds, dose = read(f)
    ipp = np.array([float(v) for v in ds.ImagePositionPatient])
    iop = [float(v) for v in ds.ImageOrientationPatient]
    r, c = np.array(iop[:3]), np.array(iop[3:])
    n = np.cross(r, c)
    drow, dcol = [float(v) for v in ds.PixelSpacing]
    frames, rows, cols = dose.shape
    off = np.array([float(v) for v in ds.GridFrameOffsetVector]) if frames > 1 else np.zeros(1)
    # positions along each index axis, then along the patient axis each runs on
    axes = []
    for vec, steps in ((r, np.arange(cols) * dcol), (c, np.arange(rows) * drow), (n, off)):
        p = int(np.argmax(np.abs(vec)))
        axes.append((p, ipp[p] + vec[p] * steps))
    # dose is indexed [k][j][i]; put it as [z][y][x] ascending
    order = [None, None, None]
    for a, (p, coords) in enumerate(axes):
        order[p] = (a, coords)
    arr = dose.transpose(2, 1, 0)  # [i][j][k]
    perm = [order[2][0], order[1][0], order[0][0]]
    arr = arr.transpose(perm)
    grid = []
    for ax in range(3):
        a, coords = order[2 - ax]
        if coords[-1] < coords[0]:
            coords = coords[::-1]
            arr = np.flip(arr, axis=ax)
        grid.append(coords)
    f_ = RegularGridInterpolator(tuple(grid), arr, method="linear", bounds_error=False, fill_value=0.0)
    total += f_(pts[:, ::-1])
total.astype("<f8").tofile(out)
`

// refSum runs sumScript and returns its values.
func refSum(t *testing.T, n int, args ...string) []float64 {
	t.Helper()
	py := requirePython(t)
	if out, err := exec.Command(py, "-c", "import scipy.interpolate").CombinedOutput(); err != nil {
		missingTool(t, "python3-scipy", fmt.Errorf("%v: %s", err, strings.TrimSpace(string(out))))
	}
	dir := t.TempDir()
	script := filepath.Join(dir, "sum.py")
	if err := os.WriteFile(script, []byte(sumScript), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "sum.f64")
	var stderr bytes.Buffer
	cmd := exec.Command(py, append([]string{script, out}, args...)...)
	cmd.Stderr = &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("reference sum: %v\n%s", err, stderr.String())
	}
	raw, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if len(raw) != 8*n {
		t.Fatalf("reference sum wrote %d values, want %d", len(raw)/8, n)
	}
	v := make([]float64, n)
	if err := binary.Read(bytes.NewReader(raw), binary.LittleEndian, v); err != nil {
		t.Fatal(err)
	}
	return v
}

// Three beams on one grid, each with its own DoseGridScaling, summed, and
// checked voxel by voxel against numpy's sum of the pydicom-read beams.
// Tolerance (derivation): the reader rounds each beam's stored × scaling
// to float32 (at most 2^-24 relative each), the sum is taken in float64 and
// rounded once to float32 (2^-24 of the sum); numpy sums in float64. So
// |ours − numpy| ≤ 2^-24·(Σ|beam| + |sum|) + float64 rounding.
func TestSumSameGridAgainstNumpy(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("PHANTOM^SUM", "VG-SUM-001")
	dims, origin, sp := [3]int{14, 12, 9}, [3]float64{-13, -11, -8}, [3]float64{2, 2, 2}
	var paths []string
	for b, c := range [][3]float64{{-6, 0, 0}, {5, 4, -2}, {0, -5, 3}} {
		// Given out of beam order: the sum must not depend on it.
		paths = append(paths, writeBeam(t, dir, ids, beamSpec{name: fmt.Sprintf("RD_beam%d.dcm", 3-b), beam: 3 - b,
			dims: dims, origin: origin, spacing: sp, centre: c, peak: 0.6 + 0.3*float64(b)}))
	}
	set, err := dicomio.ReadDoseSet(paths)
	if err != nil {
		t.Fatal(err)
	}
	if !set.SameGrid || set.SummationType != "BEAM" || dicomio.FormatNumbers(set.Beams) != "1, 2, 3" || len(set.Warnings) != 0 {
		t.Errorf("set: same grid %v, type %s, beams %v, warnings %v", set.SameGrid, set.SummationType, set.Beams, set.Warnings)
	}
	for i, p := range set.Parts {
		if p.Info.ReferencedBeamNumber != i+1 {
			t.Errorf("part %d is beam %d: parts must be in beam order", i, p.Info.ReferencedBeamNumber)
		}
	}
	visited := 0
	g, info, err := set.Sum(func(int, *volume.Grid) { visited++ })
	if err != nil {
		t.Fatal(err)
	}
	if visited != 3 || len(info.SummedFrom) != 3 || info.DoseSummationType != "BEAM" || info.ReferencedRTPlanUID != ids.ReferencedRTPlanUID {
		t.Errorf("visited %d, info %+v", visited, info)
	}
	want := refSum(t, g.Len(), append([]string{"same"}, paths...)...)
	var parts [][]float64
	for _, p := range paths {
		pg, _, err := dicomio.ReadDose(p)
		if err != nil {
			t.Fatal(err)
		}
		col := make([]float64, pg.Len())
		for n, v := range pg.Data {
			col[n] = math.Abs(float64(v))
		}
		parts = append(parts, col)
	}
	bad := 0
	for n, v := range g.Data {
		abs := math.Abs(want[n])
		for _, c := range parts {
			abs += c[n]
		}
		if tol := math.Ldexp(abs, -24) + 1e-12; math.Abs(float64(v)-want[n]) > tol {
			if bad++; bad <= 5 {
				t.Errorf("voxel %d: sum %.9g, numpy %.9g (tolerance %.3g)", n, v, want[n], tol)
			}
		}
	}
	if !g.SameGeometry(mustRead(t, paths[0])) {
		t.Errorf("the sum of same-grid beams is not on their grid")
	}
}

func mustRead(t *testing.T, p string) *volume.Grid {
	t.Helper()
	g, _, err := dicomio.ReadDose(p)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// Beams on different grids: one cropped and shifted by whole voxels (the
// same 2 mm lattice), one coarser (3 mm, half a voxel off the lattice) and
// stored feet-first prone (another orientation). The sum is checked
// against scipy's linear interpolation of each pydicom-read beam at the
// common grid's voxel centres (0 outside each beam's grid), summed by
// numpy; and the common grid against its definition: it covers every
// beam's voxel centres, has the finest spacing of each axis, and lies on
// the finest beam's lattice, so that beam is taken exactly at its voxels.
// Tolerance: each beam is interpolated in float64 and rounded to float32
// (2^-24 relative), its stored values are float32 already (2^-24), the sum
// is rounded once (2^-24): 2^-23·Σ|beam| + 2^-24·|sum| + float64 rounding.
func TestSumResampledAgainstScipy(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("PHANTOM^SUM", "VG-SUM-002")
	ffp := [3][3]float64{{1, 0, 0}, {0, -1, 0}, {0, 0, -1}} // feet-first prone: row +x, column −y, frames −z
	specs := []beamSpec{
		{name: "b1.dcm", beam: 1, dims: [3]int{16, 14, 10}, origin: [3]float64{-15, -13, -9}, spacing: [3]float64{2, 2, 2}, centre: [3]float64{-4, 0, 0}, peak: 1},
		{name: "b2.dcm", beam: 2, dims: [3]int{12, 12, 8}, origin: [3]float64{-9, -7, -5}, spacing: [3]float64{2, 2, 2}, centre: [3]float64{5, 3, 1}, peak: 0.8},
		{name: "b3.dcm", beam: 3, dims: [3]int{9, 8, 7}, origin: [3]float64{-11, 9, 10}, spacing: [3]float64{3, 3, 3}, dir: ffp, centre: [3]float64{0, -3, -2}, peak: 0.7},
	}
	var paths []string
	for _, s := range specs {
		paths = append(paths, writeBeam(t, dir, ids, s))
	}
	set, err := dicomio.ReadDoseSet(paths)
	if err != nil {
		t.Fatal(err)
	}
	if set.SameGrid || len(set.Warnings) != 1 || !strings.Contains(set.Warnings[0], "resampled") || !strings.Contains(set.Method, "trilinearly") {
		t.Fatalf("same grid %v, warnings %v, method %q: want a resampling, said", set.SameGrid, set.Warnings, set.Method)
	}
	g, _, err := set.Sum(nil)
	if err != nil {
		t.Fatal(err)
	}
	for a := 0; a < 3; a++ {
		if s, ok := g.Spacing(a); !ok || s != 2 {
			t.Errorf("common grid spacing along %c: %v, want the finest, 2 mm", "xyz"[a], s)
		}
	}
	lo, hi := g.Bounds()
	for _, p := range paths {
		blo, bhi := mustRead(t, p).Bounds()
		for a := 0; a < 3; a++ {
			if blo[a] < lo[a]-1e-9 || bhi[a] > hi[a]+1e-9 {
				t.Errorf("%s spans [%g, %g] along %c, outside the common grid's [%g, %g]", p, blo[a], bhi[a], "xyz"[a], lo[a], hi[a])
			}
		}
	}
	b1 := mustRead(t, paths[0])
	for _, ijk := range [][3]int{{0, 0, 0}, {15, 13, 9}, {7, 3, 5}} {
		p := b1.WorldOf(ijk[0], ijk[1], ijk[2])
		u := g.WorldToLocal(p)
		for a := 0; a < 3; a++ {
			if f := u[a] / 2; math.Abs(f-math.Round(f)) > 1e-9 {
				t.Errorf("beam 1 voxel %v at %v is not a voxel centre of the common grid", ijk, p)
			}
		}
	}
	o, d := g.Origin(), g.Dims()
	args := []string{"at"}
	for _, v := range []float64{o[0], o[1], o[2], 2, 2, 2} {
		args = append(args, fmt.Sprint(v))
	}
	for _, v := range d {
		args = append(args, fmt.Sprint(v))
	}
	want := refSum(t, g.Len(), append(args, paths...)...)
	var beams []*volume.Grid
	for _, p := range paths {
		beams = append(beams, mustRead(t, p))
	}
	bad := 0
	for n, v := range g.Data {
		abs := 0.0
		w := g.WorldOf(g.IJK(n))
		for _, b := range beams {
			if x, ok := b.Sample(w); ok {
				abs += math.Abs(x)
			}
		}
		if tol := math.Ldexp(abs, -23) + math.Ldexp(math.Abs(want[n]), -24) + 1e-12; math.Abs(float64(v)-want[n]) > tol {
			if bad++; bad <= 5 {
				t.Errorf("voxel %v: sum %.9g, scipy %.9g (tolerance %.3g)", w, v, want[n], tol)
			}
		}
	}
	if bad > 0 {
		t.Errorf("%d of %d voxels differ", bad, g.Len())
	}
}

// Sets that must not be summed: each refused with an error naming the
// file at fault (a DoseSetError matching ErrInvalid).
func TestDoseSetRefused(t *testing.T) {
	base := beamSpec{dims: [3]int{6, 6, 4}, origin: [3]float64{-5, -5, -3}, spacing: [3]float64{2, 2, 2}, peak: 1}
	with := func(name string, beam int, f func(*beamSpec)) beamSpec {
		b := base
		b.name, b.beam = name, beam
		b.centre = [3]float64{float64(beam), 0, 0}
		if f != nil {
			f(&b)
		}
		return b
	}
	cases := []struct {
		name  string
		beams []beamSpec
		at    string // the file the error must name
		want  string
		sum   bool // refused only when the values are read
	}{
		{"mixed units", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, func(b *beamSpec) {
			b.opt = func(o *dicomio.WriteOptions) { o.DoseUnits = "RELATIVE" }
		})}, "b2.dcm", "differ in DoseUnits (3004,0002): ", false},
		{"mixed summation types", []beamSpec{with("b1.dcm", 1, nil), with("fg.dcm", 0, func(b *beamSpec) {
			b.opt = func(o *dicomio.WriteOptions) { o.DoseSummationType, o.ReferencedBeamNumber = "FRACTION", 0 }
		})}, "fg.dcm", "differ in DoseSummationType (3004,000A)", false},
		{"mixed dose types", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, func(b *beamSpec) {
			b.opt = func(o *dicomio.WriteOptions) { o.DoseType = "EFFECTIVE" }
		})}, "b2.dcm", "differ in DoseType (3004,0004)", false},
		{"duplicated beam", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, nil), with("b2again.dcm", 2, func(b *beamSpec) { b.peak = 0.5 })},
			"b2again.dcm", "beam 2 twice", false},
		{"another plan", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, func(b *beamSpec) {
			b.ids = func(id *dicomio.Identifiers) { id.ReferencedRTPlanUID = "2.25.1234" }
		})}, "b2.dcm", "the RT Plan they reference", false},
		{"another frame of reference", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, func(b *beamSpec) {
			b.ids = func(id *dicomio.Identifiers) { id.FrameOfReferenceUID = "2.25.999" }
		})}, "b2.dcm", "FrameOfReferenceUID (0020,0052)", false},
		{"another patient", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, func(b *beamSpec) {
			b.ids = func(id *dicomio.Identifiers) { id.PatientID = "VG-OTHER-002" }
		})}, "b2.dcm", "PatientID (0010,0020)", false},
		{"two plan doses", []beamSpec{with("p1.dcm", 0, func(b *beamSpec) {
			b.opt = func(o *dicomio.WriteOptions) {
				o.DoseSummationType, o.ReferencedFractionGroupNumber, o.ReferencedBeamNumber = "PLAN", 0, 0
			}
		}), with("p2.dcm", 0, func(b *beamSpec) {
			b.opt = func(o *dicomio.WriteOptions) {
				o.DoseSummationType, o.ReferencedFractionGroupNumber, o.ReferencedBeamNumber = "PLAN", 0, 0
			}
		})}, "p1.dcm", "count the plan more than once", false},
		{"the same beam exported twice", []beamSpec{with("b1.dcm", 1, nil), with("b2.dcm", 2, nil), with("b3.dcm", 3, func(b *beamSpec) {
			b.centre = [3]float64{2, 0, 0} // beam 2's values, under beam 3
		})}, "b3.dcm", "hold identical dose values", true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			ids := dicomio.PhantomIdentifiers("PHANTOM^SUM", "VG-SUM-003")
			var paths []string
			for _, b := range c.beams {
				paths = append(paths, writeBeam(t, dir, ids, b))
			}
			set, err := dicomio.ReadDoseSet(paths)
			if err == nil && c.sum {
				_, _, err = set.Sum(nil)
			}
			var se *dicomio.DoseSetError
			if err == nil || !errors.As(err, &se) || !errors.Is(err, dicomio.ErrInvalid) {
				t.Fatalf("error %v, want a DoseSetError", err)
			}
			if !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), c.at) || filepath.Base(se.Path) != c.at {
				t.Errorf("error %q (file %q), want it to say %q and name %s", err, se.Path, c.want, c.at)
			}
		})
	}
}

// The same file given twice is refused; a single file is a set of one.
func TestDoseSetSameFileAndOne(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("PHANTOM^SUM", "VG-SUM-004")
	p := writeBeam(t, dir, ids, beamSpec{name: "b1.dcm", beam: 1, dims: [3]int{4, 4, 3}, origin: [3]float64{0, 0, 0}, spacing: [3]float64{2, 2, 2}, peak: 1})
	if _, err := dicomio.ReadDoseSet([]string{p, p}); err == nil || !strings.Contains(err.Error(), "are the same dose") {
		t.Errorf("the same file twice: %v", err)
	}
	set, err := dicomio.ReadDoseSet([]string{p})
	if err != nil || len(set.Parts) != 1 || !set.SameGrid {
		t.Fatalf("one file: %v %+v", err, set)
	}
	g, _, err := set.Sum(nil)
	if err != nil {
		t.Fatal(err)
	}
	h := mustRead(t, p)
	for n := range g.Data {
		if g.Data[n] != h.Data[n] {
			t.Fatalf("a set of one changed voxel %d: %v, file %v", n, g.Data[n], h.Data[n])
		}
	}
}

// writeInventedPlan writes an invented RT Plan (dicomio.WritePlan) with
// the given beams (name "ARC<n>", SETUP for the numbers in setup) and
// fraction groups (group number → its beams), and reads it back.
func writeInventedPlan(t *testing.T, dir string, ids dicomio.Identifiers, beams []int, setup map[int]bool, groups map[int][]int, fractions int) *dicomio.Plan {
	t.Helper()
	p := &dicomio.Plan{Label: "VG_SUMS", DoseReferences: []dicomio.DoseReference{{Number: 1, Type: "TARGET", Description: "PTV", TargetPrescriptionGy: ptr(60)}}}
	for _, b := range beams {
		bm := dicomio.Beam{Number: b, Name: fmt.Sprintf("ARC%d", b), NominalEnergy: ptr(6), GantryAngleDeg: ptr(float64(40 * b))}
		if setup[b] {
			bm.DeliveryType = "SETUP"
		}
		p.Beams = append(p.Beams, bm)
	}
	for g := 1; g <= len(groups); g++ {
		fg := dicomio.FractionGroup{Number: g, FractionsPlanned: fractions}
		for _, b := range groups[g] {
			fg.Beams = append(fg.Beams, dicomio.ReferencedBeam{BeamNumber: b, Meterset: ptr(100)})
		}
		p.FractionGroups = append(p.FractionGroups, fg)
	}
	path := filepath.Join(dir, "RP_sums.dcm")
	if _, err := dicomio.WritePlan(path, p, ids); err != nil {
		t.Fatal(err)
	}
	back, err := dicomio.ReadPlan(path)
	if err != nil {
		t.Fatal(err)
	}
	return back
}

// Parts checked against the RT Plan's beam list and fraction groups
// (issue 18): every treatment beam there (setup beams need not be), none
// the plan lacks; a complete set stands for the plan's dose (or one
// fraction group's).
func TestDoseSetCheckPlan(t *testing.T) {
	grid := beamSpec{dims: [3]int{4, 4, 3}, origin: [3]float64{0, 0, 0}, spacing: [3]float64{2, 2, 2}, peak: 1}
	beamFiles := func(t *testing.T, dir string, ids dicomio.Identifiers, sum string, group int, beams ...int) *dicomio.DoseSet {
		t.Helper()
		var paths []string
		for _, b := range beams {
			s := grid
			s.name, s.beam, s.centre = fmt.Sprintf("b%d.dcm", b), b, [3]float64{float64(b), 0, 0}
			s.opt = func(o *dicomio.WriteOptions) { o.DoseSummationType, o.ReferencedFractionGroupNumber = sum, group }
			paths = append(paths, writeBeam(t, dir, ids, s))
		}
		set, err := dicomio.ReadDoseSet(paths)
		if err != nil {
			t.Fatal(err)
		}
		return set
	}
	t.Run("complete, setup beam not needed", func(t *testing.T) {
		dir := t.TempDir()
		ids := dicomio.PhantomIdentifiers("PHANTOM^PLAN", "VG-PLAN-001")
		plan := writeInventedPlan(t, dir, ids, []int{1, 2, 3, 4}, map[int]bool{4: true}, map[int][]int{1: {1, 2, 3, 4}}, 30)
		c, err := beamFiles(t, dir, ids, "BEAM", 1, 1, 2, 3).CheckPlan(plan)
		if err != nil || !c.Complete || c.SummationType != "PLAN" || !strings.Contains(c.Text, `every treatment beam of RT Plan "VG_SUMS" (beams 1, 2, 3)`) || len(c.Warnings) != 0 {
			t.Errorf("%+v %v", c, err)
		}
		// One session of every beam of the plan's only group.
		c, err = beamFiles(t, t.TempDir(), ids, "BEAM_SESSION", 1, 1, 2, 3).CheckPlan(plan)
		if err != nil || c.SummationType != "FRACTION_SESSION" || c.FractionGroup != 1 {
			t.Errorf("sessions: %+v %v", c, err)
		}
	})
	t.Run("a beam missing", func(t *testing.T) {
		dir := t.TempDir()
		ids := dicomio.PhantomIdentifiers("PHANTOM^PLAN", "VG-PLAN-002")
		plan := writeInventedPlan(t, dir, ids, []int{1, 2, 3}, nil, map[int][]int{1: {1, 2, 3}}, 30)
		_, err := beamFiles(t, dir, ids, "BEAM", 1, 1, 3).CheckPlan(plan)
		var se *dicomio.DoseSetError
		if !errors.As(err, &se) || dicomio.FormatNumbers(se.MissingBeams) != "2" || !strings.Contains(err.Error(), `beam 2 "ARC2" of RT Plan "VG_SUMS" has no dose among the 2 files summed (beams 1, 3)`) {
			t.Errorf("error %v", err)
		}
	})
	t.Run("a beam the plan lacks", func(t *testing.T) {
		dir := t.TempDir()
		ids := dicomio.PhantomIdentifiers("PHANTOM^PLAN", "VG-PLAN-003")
		plan := writeInventedPlan(t, dir, ids, []int{1, 2}, nil, map[int][]int{1: {1, 2}}, 30)
		_, err := beamFiles(t, dir, ids, "BEAM", 1, 1, 2, 7).CheckPlan(plan)
		var se *dicomio.DoseSetError
		if !errors.As(err, &se) || filepath.Base(se.Path) != "b7.dcm" || !strings.Contains(err.Error(), `holds beam 7, which RT Plan "VG_SUMS" does not define (beams 1, 2)`) {
			t.Errorf("error %v", err)
		}
	})
	t.Run("one fraction group of two", func(t *testing.T) {
		dir := t.TempDir()
		ids := dicomio.PhantomIdentifiers("PHANTOM^PLAN", "VG-PLAN-004")
		plan := writeInventedPlan(t, dir, ids, []int{1, 2, 3, 4}, nil, map[int][]int{1: {1, 2}, 2: {3, 4}}, 5)
		c, err := beamFiles(t, dir, ids, "BEAM", 2, 3, 4).CheckPlan(plan)
		if err != nil || c.SummationType != "FRACTION" || c.FractionGroup != 2 || !strings.Contains(c.Text, "fraction group 2") {
			t.Errorf("%+v %v", c, err)
		}
		_, err = beamFiles(t, t.TempDir(), ids, "BEAM", 2, 3).CheckPlan(plan)
		if err == nil || !strings.Contains(err.Error(), `beam 4 "ARC4"`) || !strings.Contains(err.Error(), "not the dose of fraction group 2") {
			t.Errorf("group 2 lacking beam 4: %v", err)
		}
	})
	t.Run("another plan", func(t *testing.T) {
		dir := t.TempDir()
		ids := dicomio.PhantomIdentifiers("PHANTOM^PLAN", "VG-PLAN-005")
		other := ids
		other.ReferencedRTPlanUID = dicomio.NewUID()
		plan := writeInventedPlan(t, dir, other, []int{1, 2}, nil, map[int][]int{1: {1, 2}}, 30)
		c, err := beamFiles(t, dir, ids, "BEAM", 1, 1, 2).CheckPlan(plan)
		if err != nil || len(c.Warnings) != 1 || !strings.Contains(c.Warnings[0], "checked against it by number") {
			t.Errorf("%+v %v", c, err)
		}
	})
}
