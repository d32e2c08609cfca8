package phantom

import (
	"errors"
	"fmt"
	"math"

	"voxgamma/structure"
)

// Shape is an analytic solid in patient coordinates (mm).
type Shape interface {
	// Volume returns the exact volume of the solid in mm³.
	Volume() float64
	// Inside reports whether patient position p (mm) lies inside the solid
	// (boundary included).
	Inside(p [3]float64) bool
	// ZRange returns the smallest and largest patient z (mm) of the solid.
	ZRange() (lo, hi float64)
	// Contours returns one CLOSED_PLANAR polygon for each plane of planeZ
	// that cuts the solid (planes that miss it give no contour), in the order
	// of planeZ. pointsPerContour is the number of vertices of the polygons
	// inscribed in circles (at least 3); the box ignores it and writes its
	// four corners.
	Contours(planeZ []float64, pointsPerContour int) ([]structure.Contour, error)
}

// Sphere is a ball of radius Radius (mm) around Centre (patient mm).
type Sphere struct {
	Centre [3]float64
	Radius float64
}

// Volume returns 4/3·π·r³ (mm³).
func (s Sphere) Volume() float64 { return 4.0 / 3.0 * math.Pi * s.Radius * s.Radius * s.Radius }

// Inside reports whether p lies within the ball.
func (s Sphere) Inside(p [3]float64) bool {
	dx, dy, dz := p[0]-s.Centre[0], p[1]-s.Centre[1], p[2]-s.Centre[2]
	return dx*dx+dy*dy+dz*dz <= s.Radius*s.Radius
}

// ZRange returns centre z ± radius.
func (s Sphere) ZRange() (lo, hi float64) { return s.Centre[2] - s.Radius, s.Centre[2] + s.Radius }

// Contours returns, for each plane strictly between the sphere's poles, the
// polygon with pointsPerContour vertices on the circle of radius
// sqrt(r² − (z − z_c)²) cut by the plane (inscribed polygon, first vertex at
// angle 0 from +x, counter-clockwise). Planes at or beyond the poles give no
// contour.
func (s Sphere) Contours(planeZ []float64, pointsPerContour int) ([]structure.Contour, error) {
	if err := checkRadius("sphere", s.Radius); err != nil {
		return nil, err
	}
	if pointsPerContour < 3 {
		return nil, fmt.Errorf("phantom: sphere: %d points per contour, want at least 3", pointsPerContour)
	}
	var out []structure.Contour
	for _, z := range planeZ {
		dz := z - s.Centre[2]
		r2 := s.Radius*s.Radius - dz*dz
		if !(r2 > 0) {
			continue
		}
		out = append(out, circle(s.Centre[0], s.Centre[1], math.Sqrt(r2), z, pointsPerContour))
	}
	return out, nil
}

// Cylinder is a circular cylinder whose axis runs along patient z through
// (CentreX, CentreY), of radius Radius, from ZMin to ZMax (mm).
type Cylinder struct {
	CentreX, CentreY float64
	Radius           float64
	ZMin, ZMax       float64
}

// Volume returns π·r²·(ZMax − ZMin) (mm³).
func (c Cylinder) Volume() float64 { return math.Pi * c.Radius * c.Radius * (c.ZMax - c.ZMin) }

// Inside reports whether p lies within the cylinder.
func (c Cylinder) Inside(p [3]float64) bool {
	dx, dy := p[0]-c.CentreX, p[1]-c.CentreY
	return p[2] >= c.ZMin && p[2] <= c.ZMax && dx*dx+dy*dy <= c.Radius*c.Radius
}

// ZRange returns ZMin and ZMax.
func (c Cylinder) ZRange() (lo, hi float64) { return c.ZMin, c.ZMax }

// Contours returns, for each plane with ZMin ≤ z ≤ ZMax, the polygon with
// pointsPerContour vertices on the cylinder's circle (inscribed polygon,
// first vertex at angle 0 from +x, counter-clockwise).
func (c Cylinder) Contours(planeZ []float64, pointsPerContour int) ([]structure.Contour, error) {
	if err := checkRadius("cylinder", c.Radius); err != nil {
		return nil, err
	}
	if !(c.ZMax > c.ZMin) {
		return nil, fmt.Errorf("phantom: cylinder: z extent [%g, %g] mm is empty", c.ZMin, c.ZMax)
	}
	if pointsPerContour < 3 {
		return nil, fmt.Errorf("phantom: cylinder: %d points per contour, want at least 3", pointsPerContour)
	}
	var out []structure.Contour
	for _, z := range planeZ {
		if z < c.ZMin || z > c.ZMax {
			continue
		}
		out = append(out, circle(c.CentreX, c.CentreY, c.Radius, z, pointsPerContour))
	}
	return out, nil
}

// Box is an axis-aligned box from Min to Max (patient mm).
type Box struct {
	Min, Max [3]float64
}

// Volume returns the product of the box's edge lengths (mm³).
func (b Box) Volume() float64 {
	return (b.Max[0] - b.Min[0]) * (b.Max[1] - b.Min[1]) * (b.Max[2] - b.Min[2])
}

// Inside reports whether p lies within the box.
func (b Box) Inside(p [3]float64) bool {
	for a := 0; a < 3; a++ {
		if p[a] < b.Min[a] || p[a] > b.Max[a] {
			return false
		}
	}
	return true
}

// ZRange returns Min[2] and Max[2].
func (b Box) ZRange() (lo, hi float64) { return b.Min[2], b.Max[2] }

// Contours returns, for each plane with Min[2] ≤ z ≤ Max[2], the box's
// rectangle as a four-vertex polygon (counter-clockwise from the corner at
// Min). pointsPerContour is ignored.
func (b Box) Contours(planeZ []float64, pointsPerContour int) ([]structure.Contour, error) {
	for a := 0; a < 3; a++ {
		if !(b.Max[a] > b.Min[a]) {
			return nil, fmt.Errorf("phantom: box: extent [%g, %g] mm along axis %c is empty", b.Min[a], b.Max[a], "xyz"[a])
		}
	}
	var out []structure.Contour
	for _, z := range planeZ {
		if z < b.Min[2] || z > b.Max[2] {
			continue
		}
		out = append(out, structure.Contour{Type: structure.ClosedPlanar, Points: [][3]float64{
			{b.Min[0], b.Min[1], z}, {b.Max[0], b.Min[1], z}, {b.Max[0], b.Max[1], z}, {b.Min[0], b.Max[1], z},
		}})
	}
	return out, nil
}

func checkRadius(what string, r float64) error {
	if !(r > 0) || math.IsInf(r, 0) {
		return fmt.Errorf("phantom: %s: radius %g mm, want a positive finite value", what, r)
	}
	return nil
}

// circle returns the n-gon inscribed in the circle of radius r around
// (cx, cy) in plane z.
func circle(cx, cy, r, z float64, n int) structure.Contour {
	pts := make([][3]float64, n)
	for m := range pts {
		t := 2 * math.Pi * float64(m) / float64(n)
		pts[m] = [3]float64{cx + r*math.Cos(t), cy + r*math.Sin(t), z}
	}
	return structure.Contour{Type: structure.ClosedPlanar, Points: pts}
}

// Planes returns the plane positions phase + n·spacing (n an integer) that lie
// in [lo, hi], increasing. Each is computed from its integer n, so there is no
// accumulated rounding. spacing must be positive.
func Planes(lo, hi, spacing, phase float64) ([]float64, error) {
	if !(spacing > 0) || math.IsInf(spacing, 0) {
		return nil, fmt.Errorf("phantom: plane spacing %g mm, want a positive finite value", spacing)
	}
	if math.IsNaN(lo) || math.IsNaN(hi) || math.IsNaN(phase) || math.IsInf(phase, 0) || math.IsInf(lo, 0) || math.IsInf(hi, 0) {
		return nil, errors.New("phantom: plane range and phase must be finite")
	}
	n0 := math.Ceil((lo - phase) / spacing)
	n1 := math.Floor((hi - phase) / spacing)
	if n1-n0 > 1e6 {
		return nil, fmt.Errorf("phantom: %g planes between %g and %g mm: too many", n1-n0+1, lo, hi)
	}
	var out []float64
	for n := n0; n <= n1; n++ {
		z := phase + n*spacing
		if z >= lo && z <= hi {
			out = append(out, z)
		}
	}
	return out, nil
}

// ROISpec describes the structure.ROI that [NewROI] makes from a shape.
type ROISpec struct {
	// Name, Number, InterpretedType (PTV, ORGAN, EXTERNAL, ... or empty) and
	// Color are copied into the ROI (HasColor is set).
	Name            string
	Number          int
	InterpretedType string
	Color           [3]uint8
	// FrameOfReferenceUID is copied into the ROI; invented UIDs only.
	FrameOfReferenceUID string
	// PlaneSpacing (mm, positive) and PlanePhase place the contour planes at
	// PlanePhase + n·PlaneSpacing, as a CT series would.
	PlaneSpacing, PlanePhase float64
	// PointsPerContour is the number of vertices of each polygon inscribed
	// in a circle (sphere, cylinder); 0 means 64.
	PointsPerContour int
}

// NewROI contours shape on the planes of spec (see [Planes] and
// [Shape.Contours]) and returns the resulting ROI.
func NewROI(shape Shape, spec ROISpec) (structure.ROI, error) {
	lo, hi := shape.ZRange()
	planes, err := Planes(lo, hi, spec.PlaneSpacing, spec.PlanePhase)
	if err != nil {
		return structure.ROI{}, fmt.Errorf("phantom: ROI %q: %w", spec.Name, err)
	}
	n := spec.PointsPerContour
	if n == 0 {
		n = 64
	}
	cs, err := shape.Contours(planes, n)
	if err != nil {
		return structure.ROI{}, fmt.Errorf("phantom: ROI %q: %w", spec.Name, err)
	}
	return structure.ROI{
		Number:              spec.Number,
		Name:                spec.Name,
		FrameOfReferenceUID: spec.FrameOfReferenceUID,
		InterpretedType:     spec.InterpretedType,
		Color:               spec.Color,
		HasColor:            true,
		Contours:            cs,
	}, nil
}

// PolygonArea returns the area (mm², always ≥ 0) of a simple polygon given by
// its vertices in an axial plane, by the shoelace formula on x and y.
func PolygonArea(pts [][3]float64) float64 {
	var s float64
	n := len(pts)
	for m := 0; m < n; m++ {
		p, q := pts[m], pts[(m+1)%n]
		s += p[0]*q[1] - q[0]*p[1]
	}
	return math.Abs(s) / 2
}

// SlabVolume returns the volume (mm³) that contours of one simple polygon per
// plane, planes spacing mm apart, enclose when each polygon stands for a slab
// spacing thick: Σ area × spacing. This is the volume a planning system
// reports for such contours, and what a rasteriser should approach; it is
// not the solid's analytic volume.
func SlabVolume(contours []structure.Contour, spacing float64) float64 {
	var v float64
	for _, c := range contours {
		v += PolygonArea(c.Points) * spacing
	}
	return v
}
