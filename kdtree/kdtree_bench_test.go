package kdtree

import (
	"math"
	"math/rand/v2"
	"testing"
)

// uniformCoords returns n uniformly random points in a 100³ box with dose in
// [0, 100).
func uniformCoords(n int, seed uint64) []float32 {
	r := rand.New(rand.NewPCG(seed, 1))
	c := make([]float32, 4*n)
	for i := range c {
		c[i] = float32(r.Float64() * 100)
	}
	return c
}

func BenchmarkBuild(b *testing.B) {
	for _, bc := range []struct {
		name string
		n    int
	}{{"n=1e6", 1_000_000}, {"n=1e7", 10_000_000}} {
		b.Run(bc.name, func(b *testing.B) {
			if bc.n > 1_000_000 && testing.Short() {
				b.Skip("10 million points skipped in short mode")
			}
			coords := uniformCoords(bc.n, 1)
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				Build(coords, 1)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(bc.n), "ns/point")
		})
	}
}

// Grid benchmark: a 64³ lattice with 2.5 mm spacing, DTA 3 mm (so spatial
// coordinates are i·2.5/3), dose a Gaussian of peak 100 Gy and σ = 40 mm, and
// ΔD = 3% of the peak (w = 1/3): the dose axis spans about 33 renormalised
// units, the spatial axes about 53.
const (
	gridN       = 64
	gridSpacing = 2.5
	gridDTA     = 3.0
	gridDoseW   = 1.0 / 3.0
)

func gridDose(x, y, z float64) float64 {
	c := (gridN - 1) * gridSpacing / 2
	r2 := (x-c)*(x-c) + (y-c)*(y-c) + (z-c)*(z-c)
	return 100 * math.Exp(-r2/(2*40*40))
}

// gridSetup returns the lattice points and queries near lattice positions
// (positions jittered by up to half a spacing, dose perturbed by a few
// percent), like a reference grid evaluated against a slightly different one.
func gridSetup(nq int) ([]float32, [][4]float64) {
	coords := make([]float32, 0, 4*gridN*gridN*gridN)
	for i := range gridN {
		for j := range gridN {
			for k := range gridN {
				x, y, z := float64(i)*gridSpacing, float64(j)*gridSpacing, float64(k)*gridSpacing
				coords = append(coords, float32(x/gridDTA), float32(y/gridDTA), float32(z/gridDTA), float32(gridDose(x, y, z)))
			}
		}
	}
	r := rand.New(rand.NewPCG(2, 3))
	qs := make([][4]float64, nq)
	for n := range qs {
		x := (float64(r.IntN(gridN)) + r.Float64() - 0.5) * gridSpacing
		y := (float64(r.IntN(gridN)) + r.Float64() - 0.5) * gridSpacing
		z := (float64(r.IntN(gridN)) + r.Float64() - 0.5) * gridSpacing
		qs[n] = [4]float64{x / gridDTA, y / gridDTA, z / gridDTA, gridDose(x, y, z) * (1 + 0.03*r.NormFloat64())}
	}
	return coords, qs
}

func BenchmarkNearest(b *testing.B) {
	coords, qs := gridSetup(4096)
	tr := Build(coords, gridDoseW)
	for _, bc := range []struct {
		name     string
		maxDist2 float64
	}{{"grid64/unlimited", math.Inf(1)}, {"grid64/maxDist2=1", 1}} {
		b.Run(bc.name, func(b *testing.B) {
			b.ReportAllocs()
			i := 0
			var sink int
			for b.Loop() {
				j, _, _ := tr.Nearest(qs[i%len(qs)], gridDoseW, bc.maxDist2)
				sink += j
				i++
			}
			_ = sink
		})
	}
}

func BenchmarkAppendWithin(b *testing.B) {
	coords, qs := gridSetup(4096)
	tr := Build(coords, gridDoseW)
	for _, bc := range []struct {
		name string
		r2   float64
	}{{"grid64/r2=1", 1}, {"grid64/r2=4", 4}} {
		b.Run(bc.name, func(b *testing.B) {
			dst := make([]int32, 0, tr.Len())
			b.ReportAllocs()
			i, total := 0, 0
			for b.Loop() {
				dst = tr.AppendWithin(dst[:0], qs[i%len(qs)], gridDoseW, bc.r2)
				total += len(dst)
				i++
			}
			b.ReportMetric(float64(total)/float64(b.N), "results/op")
		})
	}
}
