package roi

import (
	"fmt"
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
// curve, the sorted DVH (RegionDVH, Metrics, Curve) and the radix selection,
// over spheres of 5 mm (520 voxels) and 60 mm (0.9 M voxels) radius on a
// 1 mm grid under a Gaussian dose. RegionSummary sorts regions under 2¹⁶
// voxels and selects by radix from there.
func BenchmarkRegionDose(b *testing.B) {
	for _, radius := range []float64{5, 60} {
		sph := phantom.Sphere{Centre: [3]float64{0.3, -0.2, 0.1}, Radius: radius}
		roi := mustROI(b, sph, phantom.ROISpec{Name: "sphere", PlaneSpacing: 2})
		g := boxGrid(b, [3]float64{-radius, -radius, -radius}, [3]float64{radius, radius, radius}, [3]float64{1, 1, 1}, [3]float64{0.25, 0.25, 0.25})
		if err := phantom.Fill(g, phantom.Gaussian([3]float64{radius / 6, 0, 0}, radius/2, 60)); err != nil {
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
		b.Run(fmt.Sprintf("r%g/sorted", radius), func(b *testing.B) {
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
		b.Run(fmt.Sprintf("r%g/radix", radius), func(b *testing.B) {
			for b.Loop() {
				if _, err := radixSummary(g, reg, vDoses, 0.3); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
