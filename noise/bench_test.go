package noise

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"voxgamma/gamma"
	"voxgamma/volume"
)

// benchDose is the gamma package's benchmark case (gamma/bench_test.go):
// a 60 Gy box with 3 mm error-function penumbrae on a low bath, 1 mm grid,
// with Monte Carlo-like noise of 1 % at the maximum growing as √D. With a
// spacing h other than 1 mm the same box (of nx·h mm…) is sampled every h
// mm.
func benchDose(b *testing.B, nx, ny, nz int, h float64) *volume.Grid {
	b.Helper()
	origin := [3]float64{-float64(nx-1) * h / 2, -float64(ny-1) * h / 2, -float64(nz-1) * h / 2}
	g, err := volume.NewUniform([3]int{nx, ny, nz}, origin, [3]float64{h, h, h}, volume.Identity)
	if err != nil {
		b.Fatal(err)
	}
	half := [3]float64{float64(nx) * h * 0.3, float64(ny) * h * 0.25, float64(nz) * h * 0.3}
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
				d := v + 8*math.Exp(-r2/(2*float64(nx*nx)*h*h/9))
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
			g := benchDose(b, c.nx, c.ny, c.nz, 1)
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

// BenchmarkDenoise is the filter's cost on benchDose: on the 1 mm grids
// it filters the dose's detail with quadratic fits; the 2 mm case (the
// 256×256×160 case's box sampled every 2 mm) filters the dose itself,
// with quartic fits over the wider windows.
func BenchmarkDenoise(b *testing.B) {
	for _, c := range []struct {
		name       string
		nx, ny, nz int
		h          float64
	}{{"128x128x128", 128, 128, 128, 1}, {"256x256x160", 256, 256, 160, 1}, {"128x128x80_2mm", 128, 128, 80, 2}} {
		b.Run(c.name, func(b *testing.B) {
			g := benchDose(b, c.nx, c.ny, c.nz, c.h)
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

// BenchmarkCorrectedCompare is the correction's whole cost on the gamma
// package's benchmark case (gamma/bench_test.go benchCase: the reference a
// plan-like dose, the evaluated one moved 0.5 mm, scaled 1.01, with 1 %
// noise growing as √D): the estimate, the filter and the comparison
// against the denoised dose, with the engine's default interpolation. The
// comparison against the noisy dose as given is gamma's own benchmark.
func BenchmarkCorrectedCompare(b *testing.B) {
	for _, c := range []struct {
		name       string
		nx, ny, nz int
	}{{"128x128x128", 128, 128, 128}, {"256x256x160", 256, 256, 160}} {
		b.Run(c.name, func(b *testing.B) {
			ref, eval := benchPair(b, c.nx, c.ny, c.nz)
			crit := gamma.Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10}
			var st gamma.Stats
			var tEst, tFilter, tGamma time.Duration
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				t0 := time.Now()
				d, err := NewDose(eval, 0)
				if err != nil {
					b.Fatal(err)
				}
				e, err := d.Estimate()
				if err != nil {
					b.Fatal(err)
				}
				t1 := time.Now()
				den, _, err := d.Denoise(d.ModelSigma(e.SigmaPercent, e.MaxDose), FilterOptions{Floor: 0.05 * e.MaxDose})
				if err != nil {
					b.Fatal(err)
				}
				t2 := time.Now()
				r, err := gamma.CompareGrids(context.Background(), ref, den, crit, gamma.Options{})
				if err != nil {
					b.Fatal(err)
				}
				st = r.Stats
				tEst, tFilter, tGamma = tEst+t1.Sub(t0), tFilter+t2.Sub(t1), tGamma+time.Since(t2)
			}
			n := float64(b.N)
			b.ReportMetric(tEst.Seconds()/n, "estimate-s")
			b.ReportMetric(tFilter.Seconds()/n, "filter-s")
			b.ReportMetric(tGamma.Seconds()/n, "gamma-s")
			b.ReportMetric(st.PassRate, "pass%")
		})
	}
}

// benchPair is gamma/bench_test.go's benchCase.
func benchPair(b *testing.B, nx, ny, nz int) (ref, eval *volume.Grid) {
	b.Helper()
	origin := [3]float64{-float64(nx-1) / 2, -float64(ny-1) / 2, -float64(nz-1) / 2}
	var err error
	if ref, err = volume.NewUniform([3]int{nx, ny, nz}, origin, [3]float64{1, 1, 1}, volume.Identity); err != nil {
		b.Fatal(err)
	}
	half := [3]float64{float64(nx) * 0.3, float64(ny) * 0.25, float64(nz) * 0.3}
	plan := func(p [3]float64) float64 {
		v := 60.0
		for a := 0; a < 3; a++ {
			v *= 0.5 * (math.Erf((half[a]-p[a])/3) + math.Erf((half[a]+p[a])/3))
		}
		r2 := p[0]*p[0] + p[1]*p[1] + p[2]*p[2]
		return v + 8*math.Exp(-r2/(2*float64(nx*nx)/9))
	}
	eval = ref.EmptyLike()
	rng := rand.New(rand.NewPCG(1, 2))
	n := 0
	for k := 0; k < nz; k++ {
		for j := 0; j < ny; j++ {
			for i := 0; i < nx; i++ {
				p := ref.WorldOf(i, j, k)
				ref.Data[n] = float32(plan(p))
				d := 1.01 * plan([3]float64{p[0] - 0.5, p[1], p[2]})
				eval.Data[n] = float32(d + 0.6*math.Sqrt(math.Max(d, 0)/60)*rng.NormFloat64())
				n++
			}
		}
	}
	return ref, eval
}
