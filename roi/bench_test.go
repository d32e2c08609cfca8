package roi

import (
	"testing"

	"voxgamma/phantom"
)

// BenchmarkRasteriseSphere30 rasterises a 30 mm-radius sphere (64-vertex
// polygons every 2 mm) on a 1 mm grid with the default 4×4×4 sub-samples.
func BenchmarkRasteriseSphere30(b *testing.B) {
	sph := phantom.Sphere{Centre: [3]float64{0.3, -0.2, 0.1}, Radius: 30}
	roi := mustROI(b, sph, phantom.ROISpec{Name: "sphere", PlaneSpacing: 2})
	g := boxGrid(b, [3]float64{-30, -30, -30}, [3]float64{30, 30, 30}, [3]float64{1, 1, 1}, [3]float64{0.25, 0.25, 0.25})
	z, err := NewRasteriser(g, Options{})
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for b.Loop() {
		if _, err := z.Rasterise(&roi, Target); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDVH1e6 builds the DVH of 10⁶ voxels and its metrics.
func BenchmarkDVH1e6(b *testing.B) {
	d, w := randomDVHInput(1_000_000, 3)
	b.ResetTimer()
	for b.Loop() {
		h, err := NewDVH("bench", d, w)
		if err != nil {
			b.Fatal(err)
		}
		_ = h.Metrics([]float64{20, 40})
	}
}

// BenchmarkRegionDose compares the two ways to a region's metrics and
// curve: the sorted DVH (RegionDVH, Metrics, Curve) and RegionSummary, over
// a 60 mm-radius sphere on a 1 mm grid (0.9 M voxels) under a Gaussian dose.
func BenchmarkRegionDose(b *testing.B) {
	sph := phantom.Sphere{Centre: [3]float64{0.3, -0.2, 0.1}, Radius: 60}
	roi := mustROI(b, sph, phantom.ROISpec{Name: "body", PlaneSpacing: 2})
	g := boxGrid(b, [3]float64{-60, -60, -60}, [3]float64{60, 60, 60}, [3]float64{1, 1, 1}, [3]float64{0.25, 0.25, 0.25})
	if err := phantom.Fill(g, phantom.Gaussian([3]float64{10, 0, 0}, 30, 60)); err != nil {
		b.Fatal(err)
	}
	z, err := NewRasteriser(g, Options{})
	if err != nil {
		b.Fatal(err)
	}
	reg, err := z.Rasterise(&roi, Body)
	if err != nil {
		b.Fatal(err)
	}
	vDoses := []float64{20, 40}
	b.Run("sorted", func(b *testing.B) {
		for b.Loop() {
			h, err := RegionDVH(g, reg)
			if err != nil {
				b.Fatal(err)
			}
			_ = h.Metrics(vDoses)
			if _, err := h.Curve(0.3); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("summary", func(b *testing.B) {
		for b.Loop() {
			if _, err := RegionSummary(g, reg, vDoses, 0.3); err != nil {
				b.Fatal(err)
			}
		}
	})
}
