package noise

import (
	"math"
	"math/rand/v2"
	"testing"

	"voxgamma/volume"
)

// benchDose is the gamma package's benchmark case (gamma/bench_test.go):
// a 60 Gy box with 3 mm error-function penumbrae on a low bath, 1 mm grid,
// with Monte Carlo-like noise of 1 % at the maximum growing as √D.
func benchDose(b *testing.B, nx, ny, nz int) *volume.Grid {
	b.Helper()
	origin := [3]float64{-float64(nx-1) / 2, -float64(ny-1) / 2, -float64(nz-1) / 2}
	g, err := volume.NewUniform([3]int{nx, ny, nz}, origin, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		b.Fatal(err)
	}
	half := [3]float64{float64(nx) * 0.3, float64(ny) * 0.25, float64(nz) * 0.3}
	rng := rand.New(rand.NewPCG(1, 2))
	n := 0
	for k := 0; k < nz; k++ {
		for j := 0; j < ny; j++ {
			for i := 0; i < nx; i++ {
				p := g.WorldOf(i, j, k)
				v := 60.0
				for a := 0; a < 3; a++ {
					v *= 0.5 * (math.Erf((half[a]-p[a])/3) + math.Erf((half[a]+p[a])/3))
				}
				r2 := p[0]*p[0] + p[1]*p[1] + p[2]*p[2]
				d := v + 8*math.Exp(-r2/(2*float64(nx*nx)/9))
				g.Data[n] = float32(d + 0.6*math.Sqrt(math.Max(d, 0)/60)*rng.NormFloat64())
				n++
			}
		}
	}
	return g
}

func BenchmarkEstimate(b *testing.B) {
	for _, c := range []struct {
		name       string
		nx, ny, nz int
	}{{"128x128x128", 128, 128, 128}, {"256x256x160", 256, 256, 160}} {
		b.Run(c.name, func(b *testing.B) {
			g := benchDose(b, c.nx, c.ny, c.nz)
			b.ReportAllocs()
			b.ResetTimer()
			var e Estimate
			for i := 0; i < b.N; i++ {
				// The smoothing is part of the estimate's cost.
				d, err := NewDose(g, 0)
				if err != nil {
					b.Fatal(err)
				}
				if e, err = d.Estimate(); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(e.SigmaPercent, "sigma%")
		})
	}
}

func BenchmarkDenoise(b *testing.B) {
	for _, c := range []struct {
		name       string
		nx, ny, nz int
	}{{"128x128x128", 128, 128, 128}, {"256x256x160", 256, 256, 160}} {
		b.Run(c.name, func(b *testing.B) {
			g := benchDose(b, c.nx, c.ny, c.nz)
			d, err := NewDose(g, 0)
			if err != nil {
				b.Fatal(err)
			}
			sigma := d.ModelSigma(1, 60)
			// As the comparison runs it: voxels below half the 10 %
			// threshold are left as they are.
			opt := FilterOptions{Floor: 0.05 * 60}
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if _, _, err := d.Denoise(sigma, opt); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
