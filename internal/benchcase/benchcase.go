// Package benchcase makes the end-to-end benchmark cases of BENCHMARKS.md: an
// invented plan-like dose (three targets with penumbrae of 3 to 5 mm in a
// low-dose bath) on a 1 mm reference grid, and evaluated doses that are the
// same plan shifted, scaled and, for one, given Monte Carlo-like noise, on a
// grid offset from the reference's by half a voxel. Everything is made up
// and seeded: the same arguments give the same files. No patient's data is
// involved (dicomio.PhantomIdentifiers).
package benchcase

import (
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"

	"voxgamma/dicomio"
	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

// Variant is one evaluated dose: the plan shifted by ShiftMM along a fixed
// oblique direction, multiplied by Scale, with uncorrelated noise of
// NoisePercent of the maximum (σ), relative noise growing as 1/√dose as
// in a Monte Carlo recalculation.
type Variant struct {
	Name         string
	ShiftMM      float64
	Scale        float64
	NoisePercent float64
}

// Variants are the three evaluated doses of the pass-rate sweep (issue 15):
// nearly all passing, about 90 % and about 65 % at 3 %/2 mm.
var Variants = []Variant{
	{"pass", 0.5, 1.01, 1},
	{"mid", 1.5, 1.033, 0},
	{"fail", 3, 1.034, 0},
}

// Size is a reference grid's number of voxels along x, y and z (1 mm); the
// evaluated grid has one more along each axis.
type Size [3]int

// String returns the size as "256x256x160".
func (s Size) String() string { return fmt.Sprintf("%dx%dx%d", s[0], s[1], s[2]) }

// target is one invented target: an ellipsoid with semi-axes R (mm), its
// dose inside and an error-function penumbra of 80–20 % width Pen (mm).
type target struct {
	C, R      [3]float64
	Dose, Pen float64
}

// targets returns the plan's three targets for a reference grid of size s,
// scaled with the grid.
func targets(s Size) []target {
	f := [3]float64{float64(s[0]) / 256, float64(s[1]) / 256, float64(s[2]) / 160}
	sc := func(v [3]float64) [3]float64 { return [3]float64{v[0] * f[0], v[1] * f[1], v[2] * f[2]} }
	return []target{
		{C: sc([3]float64{-55, 10, 0}), R: sc([3]float64{50, 50, 50}), Dose: 60, Pen: 3},
		{C: sc([3]float64{55, -15, 10}), R: sc([3]float64{40, 35, 45}), Dose: 54, Pen: 4},
		{C: sc([3]float64{0, 75, -30}), R: sc([3]float64{25, 25, 25}), Dose: 48, Pen: 5},
	}
}

// plan returns the invented plan dose for a reference grid of size s: three
// targets and a Gaussian bath, scaled with the grid so that about a sixth
// of the voxels are at or above 10 % of the maximum.
func plan(s Size) func(p [3]float64) float64 {
	f := [3]float64{float64(s[0]) / 256, float64(s[1]) / 256, float64(s[2]) / 160}
	ts := targets(s)
	bathSigma := 60 * math.Cbrt(f[0]*f[1]*f[2])
	return func(p [3]float64) float64 {
		d := 10 * math.Exp(-(p[0]*p[0]+p[1]*p[1]+p[2]*p[2])/(2*bathSigma*bathSigma))
		for _, t := range ts {
			// Distance outside the ellipsoid's surface, along its radius.
			var r2 float64
			for a := 0; a < 3; a++ {
				x := (p[a] - t.C[a]) / t.R[a]
				r2 += x * x
			}
			r := math.Sqrt(r2)
			mean := (t.R[0] + t.R[1] + t.R[2]) / 3
			u := (r - 1) * mean
			sigma := t.Pen / (2 * 0.8416) // the 80–20 % width of a Gaussian edge is 2·0.8416σ
			d += t.Dose * 0.5 * math.Erfc(u/(sigma*math.Sqrt2))
		}
		return d
	}
}

// Reference returns the reference dose of size s: 1 mm voxels centred on the
// patient origin, head-first supine.
func Reference(s Size) (*volume.Grid, error) {
	origin := [3]float64{-float64(s[0]-1) / 2, -float64(s[1]-1) / 2, -float64(s[2]-1) / 2}
	g, err := volume.NewUniform(s, origin, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		return nil, err
	}
	if err := phantom.Fill(g, plan(s)); err != nil {
		return nil, err
	}
	return g, nil
}

// Evaluated returns variant v's evaluated dose for a reference of size s:
// one more voxel along each axis, offset by half a voxel, noise seeded by
// seed.
func Evaluated(s Size, v Variant, seed uint64) (*volume.Grid, error) {
	dims := [3]int{s[0] + 1, s[1] + 1, s[2] + 1}
	origin := [3]float64{-float64(s[0]) / 2, -float64(s[1]) / 2, -float64(s[2]) / 2}
	g, err := volume.NewUniform(dims, origin, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		return nil, err
	}
	n := [3]float64{0.8, 0.48, 0.36} // unit, oblique
	f := plan(s)
	shifted := func(p [3]float64) float64 {
		return v.Scale * f([3]float64{p[0] - v.ShiftMM*n[0], p[1] - v.ShiftMM*n[1], p[2] - v.ShiftMM*n[2]})
	}
	if v.NoisePercent > 0 {
		// Noise of σ = σ₆₀·√(d/60 Gy) (60 Gy, the plan's maximum), never
		// below 0, drawn voxel by voxel in the grid's storage order.
		rng := rand.New(rand.NewPCG(seed, 15))
		sigma := v.NoisePercent / 100 * 60
		clean := shifted
		shifted = func(p [3]float64) float64 {
			d := clean(p)
			return math.Max(0, d+sigma*math.Sqrt(math.Max(d, 0)/60)*rng.NormFloat64())
		}
	}
	if err := phantom.Fill(g, shifted); err != nil {
		return nil, err
	}
	return g, nil
}

// Files are the paths of one case's files.
type Files struct {
	Reference  string
	Evaluated  map[string]string // by variant name
	Structures string
}

// Structures returns the case's structure set: each target as a PTV (a
// sphere of the target's mean semi-axis) and a body outline (EXTERNAL, a
// cylinder along z filling nine tenths of the grid's width and its whole
// length), contours every 2 mm.
func Structures(s Size, frame string) (*structure.Set, error) {
	set := &structure.Set{Label: "BENCH", FrameOfReferenceUID: frame}
	type roi struct {
		name, kind string
		shape      phantom.Shape
	}
	var rois []roi
	for i, t := range targets(s) {
		rois = append(rois, roi{fmt.Sprintf("PTV_%d", i+1), "PTV", phantom.Sphere{Centre: t.C, Radius: (t.R[0] + t.R[1] + t.R[2]) / 3}})
	}
	half := float64(min(s[0], s[1])) / 2
	rois = append(rois, roi{"BODY", "EXTERNAL", phantom.Cylinder{Radius: 0.9 * half, ZMin: -float64(s[2]-1) / 2, ZMax: float64(s[2]-1) / 2}})
	for i, r := range rois {
		x, err := phantom.NewROI(r.shape, phantom.ROISpec{Name: r.name, Number: i + 1, InterpretedType: r.kind,
			Color: [3]uint8{uint8(60 * i), 200, 80}, FrameOfReferenceUID: frame, PlaneSpacing: 2, PlanePhase: 0.5, PointsPerContour: 64})
		if err != nil {
			return nil, fmt.Errorf("benchcase: %s: %w", r.name, err)
		}
		set.ROIs = append(set.ROIs, x)
	}
	return set, nil
}

// Write writes the reference and every variant of size s into dir as RT
// Dose files (reference.dcm, evaluated-<variant>.dcm), seeded by seed, and
// the structure set (structures.dcm).
func Write(dir string, s Size, seed uint64) (Files, error) {
	ids := dicomio.PhantomIdentifiers("PHANTOM^BENCH", "VG-BENCH-001")
	fs := Files{Reference: filepath.Join(dir, "reference.dcm"), Evaluated: map[string]string{}, Structures: filepath.Join(dir, "structures.dcm")}
	set, err := Structures(s, ids.FrameOfReferenceUID)
	if err != nil {
		return fs, err
	}
	if _, err := dicomio.WriteStructureSet(fs.Structures, set, ids); err != nil {
		return fs, err
	}
	ref, err := Reference(s)
	if err != nil {
		return fs, err
	}
	opt := dicomio.DoseOptions("invented benchmark plan dose, Gy")
	opt.Bits = 32 // noise and small shifts would drown in 16-bit steps of a 60 Gy range
	if _, err := dicomio.WriteDose(fs.Reference, ref, ids, opt); err != nil {
		return fs, err
	}
	for _, v := range Variants {
		g, err := Evaluated(s, v, seed)
		if err != nil {
			return fs, err
		}
		p := filepath.Join(dir, "evaluated-"+v.Name+".dcm")
		o := dicomio.DoseOptions("invented benchmark evaluated dose (" + v.Name + "), Gy")
		o.Bits = 32
		if _, err := dicomio.WriteDose(p, g, ids, o); err != nil {
			return fs, err
		}
		fs.Evaluated[v.Name] = p
	}
	return fs, nil
}
