package phantom

import (
	"math"
	"testing"

	"voxgamma/structure"
	"voxgamma/volume"
)

// Exact volumes (geometry): 4/3·π·r³, π·r²·L, product of edges.
func TestVolumes(t *testing.T) {
	if v := (Sphere{Radius: 3}).Volume(); math.Abs(v-36*math.Pi) > 1e-12 {
		t.Errorf("sphere r 3: %g, want 36π", v)
	}
	if v := (Cylinder{Radius: 2, ZMin: -1, ZMax: 4}).Volume(); math.Abs(v-20*math.Pi) > 1e-12 {
		t.Errorf("cylinder r 2, L 5: %g, want 20π", v)
	}
	if v := (Box{Min: [3]float64{-1, 0, 2}, Max: [3]float64{2, 4, 7}}).Volume(); v != 60 {
		t.Errorf("box 3×4×5: %g", v)
	}
}

func TestInside(t *testing.T) {
	s := Sphere{Centre: [3]float64{1, 2, 3}, Radius: 2}
	if !s.Inside([3]float64{1, 2, 5}) || s.Inside([3]float64{1, 2, 5.001}) || !s.Inside([3]float64{2, 3, 3}) {
		t.Error("sphere inside test")
	}
	c := Cylinder{CentreX: 1, CentreY: 1, Radius: 1, ZMin: 0, ZMax: 10}
	if !c.Inside([3]float64{1.5, 1.5, 5}) || c.Inside([3]float64{1, 1, 10.1}) || c.Inside([3]float64{2, 2, 5}) {
		t.Error("cylinder inside test")
	}
	b := Box{Min: [3]float64{0, 0, 0}, Max: [3]float64{1, 2, 3}}
	if !b.Inside([3]float64{1, 2, 3}) || b.Inside([3]float64{1, 2, 3.1}) {
		t.Error("box inside test")
	}
}

// Monte Carlo check of each shape's Volume against its own Inside test.
func TestVolumeMatchesInside(t *testing.T) {
	shapes := []Shape{
		Sphere{Centre: [3]float64{1, -2, 0.5}, Radius: 4},
		Cylinder{CentreX: 0.5, CentreY: 0, Radius: 3, ZMin: -2, ZMax: 5},
		Box{Min: [3]float64{-1, -2, -3}, Max: [3]float64{2, 1, 4}},
	}
	for _, s := range shapes {
		zl, zh := s.ZRange()
		lo := [3]float64{-10, -10, zl}
		hi := [3]float64{10, 10, zh}
		// Regular 3D midpoint grid of 100³ points over the bounding box.
		const n = 100
		in := 0
		for i := 0; i < n; i++ {
			for j := 0; j < n; j++ {
				for k := 0; k < n; k++ {
					p := [3]float64{
						lo[0] + (float64(i)+0.5)*(hi[0]-lo[0])/n,
						lo[1] + (float64(j)+0.5)*(hi[1]-lo[1])/n,
						lo[2] + (float64(k)+0.5)*(hi[2]-lo[2])/n,
					}
					if s.Inside(p) {
						in++
					}
				}
			}
		}
		est := float64(in) / (n * n * n) * (hi[0] - lo[0]) * (hi[1] - lo[1]) * (hi[2] - lo[2])
		if math.Abs(est-s.Volume()) > 0.02*s.Volume() {
			t.Errorf("%T: midpoint estimate %g, Volume %g", s, est, s.Volume())
		}
	}
}

// Contours: one closed planar polygon per plane that cuts the shape,
// vertices on the circle, inscribed-polygon area n/2·r²·sin(2π/n).
func TestContours(t *testing.T) {
	s := Sphere{Centre: [3]float64{1, 2, 0.5}, Radius: 5}
	planes, err := Planes(-4.5, 5.5, 2, 0)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{-4, -2, 0, 2, 4}
	if len(planes) != len(want) {
		t.Fatalf("planes %v, want %v", planes, want)
	}
	for q := range want {
		if planes[q] != want[q] {
			t.Fatalf("planes %v, want %v", planes, want)
		}
	}
	cs, err := s.Contours([]float64{-4.5, -4, 0.5, 5, 5.5, 6}, 32)
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 3 { // −4.5 (pole), 5.5 (pole) and 6 miss
		t.Fatalf("%d contours, want 3", len(cs))
	}
	for _, c := range cs {
		if c.Type != structure.ClosedPlanar || len(c.Points) != 32 {
			t.Fatalf("contour %v with %d points", c.Type, len(c.Points))
		}
		z := c.Points[0][2]
		r := math.Sqrt(25 - (z-0.5)*(z-0.5))
		for _, p := range c.Points {
			if p[2] != z || math.Abs(math.Hypot(p[0]-1, p[1]-2)-r) > 1e-12 {
				t.Fatalf("vertex %v not on the circle of radius %g in plane %g", p, r, z)
			}
		}
		if a, w := PolygonArea(c.Points), 16*r*r*math.Sin(2*math.Pi/32); math.Abs(a-w) > 1e-9 {
			t.Errorf("area %g, inscribed 32-gon %g", a, w)
		}
		// Counter-clockwise seen from +z: positive signed area.
		var sa float64
		for m := range c.Points {
			p, q := c.Points[m], c.Points[(m+1)%len(c.Points)]
			sa += p[0]*q[1] - q[0]*p[1]
		}
		if sa <= 0 {
			t.Error("polygon is clockwise")
		}
	}
	if _, err := s.Contours([]float64{0}, 2); err == nil {
		t.Error("2-point polygon accepted")
	}
	b := Box{Min: [3]float64{0, 0, 0}, Max: [3]float64{2, 3, 4}}
	bc, err := b.Contours([]float64{-1, 0, 4, 5}, 0)
	if err != nil || len(bc) != 2 || PolygonArea(bc[0].Points) != 6 {
		t.Errorf("box contours %v, %v", bc, err)
	}
	if _, err := (Cylinder{Radius: 1, ZMin: 1, ZMax: 1}).Contours([]float64{1}, 8); err == nil {
		t.Error("empty cylinder accepted")
	}
}

// NewROI and SlabVolume: a cylinder of length 60 on planes 3 mm apart has
// 20 planes; its slab volume is 20 × 3 mm × the inscribed polygon's area.
func TestNewROI(t *testing.T) {
	c := Cylinder{CentreX: 0, CentreY: 0, Radius: 10, ZMin: 0.5, ZMax: 60.5}
	r, err := NewROI(c, ROISpec{Name: "Cyl", Number: 4, InterpretedType: "ORGAN", Color: [3]uint8{255, 0, 0}, PlaneSpacing: 3, PlanePhase: 1})
	if err != nil {
		t.Fatal(err)
	}
	if r.Name != "Cyl" || r.Number != 4 || r.InterpretedType != "ORGAN" || !r.HasColor || r.Color != [3]uint8{255, 0, 0} {
		t.Errorf("ROI fields %+v", r)
	}
	if len(r.Contours) != 20 || r.Contours[0].Points[0][2] != 1 || r.Contours[19].Points[0][2] != 58 {
		t.Fatalf("%d contours from z = %g", len(r.Contours), r.Contours[0].Points[0][2])
	}
	want := 20 * 3 * 32 * 100 * math.Sin(2*math.Pi/64)
	if v := SlabVolume(r.Contours, 3); math.Abs(v-want) > 1e-6 {
		t.Errorf("slab volume %g, want %g", v, want)
	}
	if _, err := NewROI(c, ROISpec{Name: "bad"}); err == nil {
		t.Error("zero plane spacing accepted")
	}
}

func TestFill(t *testing.T) {
	g, err := volume.NewUniform([3]int{4, 3, 2}, [3]float64{10, 20, 30}, [3]float64{2, 2, 2}, [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}})
	if err != nil {
		t.Fatal(err)
	}
	f := Ramp([3]float64{10, 0, 0}, [3]float64{2, 0, 0}, 5, 0.5)
	if err := Fill(g, f); err != nil {
		t.Fatal(err)
	}
	for k := 0; k < 2; k++ {
		for j := 0; j < 3; j++ {
			for i := 0; i < 4; i++ {
				p := g.WorldOf(i, j, k)
				if got, want := g.At(i, j, k), float32(5+0.5*(p[0]-10)); got != want {
					t.Errorf("voxel %d,%d,%d at %v: %g, want %g", i, j, k, p, got, want)
				}
			}
		}
	}
	if err := Fill(g, func([3]float64) float64 { return math.NaN() }); err == nil {
		t.Error("NaN dose accepted")
	}
	if d := Gaussian([3]float64{}, 2, 10)([3]float64{2, 0, 0}); math.Abs(d-10*math.Exp(-0.5)) > 1e-12 {
		t.Errorf("Gaussian at one σ: %g", d)
	}
	step := InsideDose(Sphere{Radius: 1}, 2, 0.1)
	if step([3]float64{0, 0, 0.5}) != 2 || step([3]float64{0, 0, 1.5}) != 0.1 || Uniform(3)([3]float64{9, 9, 9}) != 3 {
		t.Error("step or uniform dose")
	}
}
