// Package demo makes voxgamma's built-in demonstration case: an invented
// stereotactic scenario, written as DICOM files. Everything in it is made up
// for the demonstration; no patient's data is involved.
//
// The scenario: a head-sized phantom (a body outline), three spherical
// targets of different sizes treated to 20 Gy in one fraction with a steep
// dose fall-off, and several organs at risk. The reference is the "planning
// system" dose. The evaluated dose is an "independent recalculation" of the
// same plan: the reference shifted by 0.6 mm, with Monte Carlo-like noise
// (1 % at the prescription, relative noise growing as 1/√dose), on a grid
// misaligned with the reference's, and 10 % too low inside the smallest
// target (the kind of small-field discrepancy a secondary check exists to
// catch). The overall pass rate is high; the small target fails: the point of
// per-ROI results.
package demo

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"voxgamma/dicomio"
	"voxgamma/phantom"
	"voxgamma/structure"
	"voxgamma/volume"
)

// Prescription is the demo plan's prescription dose (Gy, one fraction).
const Prescription = 20.0

// Files are the paths of a written demo case.
type Files struct {
	Dir, Reference, Evaluated, Structures, Plan string
}

type target struct {
	name   string
	sphere phantom.Sphere
	color  [3]uint8
}

var targets = []target{
	{"PTV_Left", phantom.Sphere{Centre: [3]float64{-32, 10, 12}, Radius: 14}, [3]uint8{230, 40, 40}},
	{"PTV_Right", phantom.Sphere{Centre: [3]float64{35, -8, -6}, Radius: 8}, [3]uint8{250, 120, 20}},
	{"PTV_Small", phantom.Sphere{Centre: [3]float64{6, 30, 28}, Radius: 5}, [3]uint8{250, 200, 0}},
}

// smallTarget is the target with the local dose error.
const smallTarget = 2

// errorFactor is the evaluated/reference dose ratio inside the small target.
const errorFactor = 0.90

// Write writes the demo case into dir (created if needed): reference.dcm,
// evaluated.dcm, structures.dcm and plan.dcm (the RT Plan both doses name).
// Existing files of those names are replaced.
func Write(dir string) (*Files, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	f := &Files{Dir: dir,
		Reference:  filepath.Join(dir, "reference.dcm"),
		Evaluated:  filepath.Join(dir, "evaluated.dcm"),
		Structures: filepath.Join(dir, "structures.dcm"),
		Plan:       filepath.Join(dir, "plan.dcm"),
	}
	ids := dicomio.PhantomIdentifiers(dicomio.DemoPatientName, dicomio.DemoPatientID)
	ids.StudyDate, ids.StudyTime = "20260101", "090000"

	set, err := Structures(ids.FrameOfReferenceUID)
	if err != nil {
		return nil, err
	}
	written, err := dicomio.WriteStructureSet(f.Structures, set, ids)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	if _, err := dicomio.WritePlan(f.Plan, Plan(set, written.SOPInstanceUID), ids); err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	ref, eval, err := Doses()
	if err != nil {
		return nil, err
	}
	if _, err := dicomio.WriteDose(f.Reference, ref, ids, dicomio.DoseOptions("demo planning dose, Gy")); err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	opt := dicomio.DoseOptions("demo independent recalculation, Gy")
	opt.SeriesNumber = 2
	if _, err := dicomio.WriteDose(f.Evaluated, eval, ids, opt); err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	return f, nil
}

// Structures returns the demo structure set: body, three targets and four
// organs at risk, contoured on 2 mm axial planes.
func Structures(frame string) (*structure.Set, error) {
	set := &structure.Set{Label: "DEMO_SRS", FrameOfReferenceUID: frame}
	type item struct {
		name, kind string
		shape      phantom.Shape
		color      [3]uint8
	}
	items := []item{{"BODY", "EXTERNAL", phantom.Sphere{Centre: [3]float64{0, 0, 0}, Radius: 82}, [3]uint8{120, 200, 120}}}
	for _, t := range targets {
		items = append(items, item{t.name, "PTV", t.sphere, t.color})
	}
	items = append(items,
		item{"Brainstem", "ORGAN", phantom.Cylinder{CentreX: 0, CentreY: 22, Radius: 10, ZMin: -40, ZMax: 0}, [3]uint8{60, 120, 255}},
		item{"Chiasm", "ORGAN", phantom.Box{Min: [3]float64{-8, -18, 6}, Max: [3]float64{8, -12, 10}}, [3]uint8{200, 60, 220}},
		item{"Eye_L", "ORGAN", phantom.Sphere{Centre: [3]float64{-30, -62, 8}, Radius: 11}, [3]uint8{0, 180, 180}},
		item{"Eye_R", "ORGAN", phantom.Sphere{Centre: [3]float64{30, -62, 8}, Radius: 11}, [3]uint8{0, 150, 210}},
	)
	for i, it := range items {
		r, err := phantom.NewROI(it.shape, phantom.ROISpec{
			Name: it.name, Number: i + 1, InterpretedType: it.kind, Color: it.color,
			FrameOfReferenceUID: frame, PlaneSpacing: 2, PointsPerContour: 64,
		})
		if err != nil {
			return nil, fmt.Errorf("demo: ROI %s: %w", it.name, err)
		}
		set.ROIs = append(set.ROIs, r)
	}
	return set, nil
}

// arcs are the demo plan's beams: gantry start angle and meterset (MU).
var arcs = []struct {
	name            string
	gantry, monitor float64
}{{"Arc 1 CW", 181, 1462.4}, {"Arc 2 CCW", 179, 1398.7}, {"Arc 3 couch 45", 181, 1120.5}, {"Arc 4 couch 315", 179, 1087.9}}

// Plan returns the demo's RT Plan: each target prescribed Prescription in
// one fraction, four 6 MV arcs, on the structure set whose SOP instance
// is structuresUID.
func Plan(set *structure.Set, structuresUID string) *dicomio.Plan {
	p := &dicomio.Plan{
		Label: "DEMO_SRS", Name: "Three metastases, 20 Gy x 1", Intent: "CURATIVE",
		Description:               "invented stereotactic plan of the voxgamma demo",
		ReferencedStructureSetUID: structuresUID,
	}
	rx := Prescription
	for i, t := range targets {
		num := 0
		for _, r := range set.ROIs {
			if r.Name == t.name {
				num = r.Number
			}
		}
		p.DoseReferences = append(p.DoseReferences, dicomio.DoseReference{Number: i + 1, Type: "TARGET", Description: t.name,
			ReferencedROINumber: num, TargetPrescriptionGy: &rx})
	}
	g := dicomio.FractionGroup{Number: 1, FractionsPlanned: 1}
	energy := 6.0
	for i, a := range arcs {
		gantry, ms := a.gantry, a.monitor
		p.Beams = append(p.Beams, dicomio.Beam{Number: i + 1, Name: a.name, MachineName: "DEMO_LINAC",
			NominalEnergy: &energy, GantryAngleDeg: &gantry, Isocenter: &[3]float64{0, 10, 10}})
		g.Beams = append(g.Beams, dicomio.ReferencedBeam{BeamNumber: i + 1, Meterset: &ms})
	}
	p.FractionGroups = []dicomio.FractionGroup{g}
	return p
}

// planDose is the reference dose at p: each target at the prescription
// with an error-function fall-off (σ 2.5 mm) from its surface, on a low
// bath that spreads up to 15 % of the prescription over the head.
func planDose(p [3]float64) float64 {
	d := 0.0
	for _, t := range targets {
		r := dist(p, t.sphere.Centre)
		d = math.Max(d, Prescription*0.5*math.Erfc((r-t.sphere.Radius)/(2.5*math.Sqrt2)))
	}
	bath := 0.15 * Prescription * math.Exp(-(p[0]*p[0]+p[1]*p[1]+p[2]*p[2])/(2*45*45))
	return d + bath*(1-d/Prescription)
}

func dist(a, b [3]float64) float64 {
	return math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
}

// Doses returns the reference and evaluated demo doses. The reference grid
// is 1.5 mm (head-first supine); the evaluated grid is 1.5 mm too but
// offset by (0.5, −0.4, 0.7) mm and smaller in extent, as an independent
// calculation's grid would be.
func Doses() (ref, eval *volume.Grid, err error) {
	ref, err = volume.NewUniform([3]int{112, 112, 96}, [3]float64{-83.25, -83.25, -71.25}, [3]float64{1.5, 1.5, 1.5}, volume.Identity)
	if err != nil {
		return nil, nil, err
	}
	if err := phantom.Fill(ref, planDose); err != nil {
		return nil, nil, err
	}
	eval, err = volume.NewUniform([3]int{108, 108, 92}, [3]float64{-79.75, -80.65, -67.55}, [3]float64{1.5, 1.5, 1.5}, volume.Identity)
	if err != nil {
		return nil, nil, err
	}
	shift := [3]float64{0.6, 0, 0}
	rng := rand.New(rand.NewPCG(2026, 12))
	small := targets[smallTarget].sphere
	err = phantom.Fill(eval, func(p [3]float64) float64 {
		q := [3]float64{p[0] - shift[0], p[1] - shift[1], p[2] - shift[2]}
		d := planDose(q)
		// The small-field error: a smooth dip to errorFactor inside the
		// small target, over its outer 1.5 mm.
		r := dist(q, small.Centre)
		w := 0.5 * math.Erfc((r-small.Radius+1.5)/1.0)
		d *= 1 - (1-errorFactor)*w
		sigma := 0.01 * Prescription * math.Sqrt(math.Max(d, 0)/Prescription)
		return math.Max(0, d+sigma*rng.NormFloat64())
	})
	if err != nil {
		return nil, nil, err
	}
	return ref, eval, nil
}
