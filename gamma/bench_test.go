package gamma

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"syscall"
	"testing"

	"voxgamma/internal/benchcase"
	"voxgamma/volume"
)

// benchCase builds a synthetic pair at 1 mm: a reference shaped like a
// treatment plan (a high-dose region with soft penumbra inside a low-dose
// bath, about 40 % of the box above the 10 % threshold) and an evaluated
// grid that is the reference shifted by 0.5 mm, scaled by 1.01 and with
// uncorrelated noise of 1 % at the maximum, growing as 1/√dose relative to
// lower doses, like a Monte Carlo recalculation.
func benchCase(b *testing.B, nx, ny, nz int) (ref, eval *volume.Grid) {
	b.Helper()
	origin := [3]float64{-float64(nx-1) / 2, -float64(ny-1) / 2, -float64(nz-1) / 2}
	ref = mustGrid(b, [3]int{nx, ny, nz}, origin, [3]float64{1, 1, 1}, volume.Identity)
	half := [3]float64{float64(nx) * 0.3, float64(ny) * 0.25, float64(nz) * 0.3}
	plan := func(p [3]float64) float64 {
		v := 60.0 // Gy, the plateau
		for a := 0; a < 3; a++ {
			// Error-function penumbra, 3 mm wide (80–20 %), on each side.
			v *= 0.5 * (math.Erf((half[a]-p[a])/3) + math.Erf((half[a]+p[a])/3))
		}
		r2 := p[0]*p[0] + p[1]*p[1] + p[2]*p[2]
		return v + 8*math.Exp(-r2/(2*float64(nx*nx)/9))
	}
	fill(ref, plan)
	eval = ref.EmptyLike()
	rng := rand.New(rand.NewPCG(1, 2))
	fill(eval, func(p [3]float64) float64 {
		d := 1.01 * plan([3]float64{p[0] - 0.5, p[1], p[2]})
		// Monte Carlo-like noise: the relative statistical uncertainty goes
		// as 1/√dose, 1 % (σ) at the 60 Gy plateau.
		return d + 0.6*math.Sqrt(math.Max(d, 0)/60)*rng.NormFloat64()
	})
	return ref, eval
}

func benchmarkCompare(b *testing.B, dims [3]int, dosePct, dta float64, norm Normalisation, interp Interpolation) {
	ref, eval := benchCase(b, dims[0], dims[1], dims[2])
	c := Criteria{DosePercent: dosePct, DTA: dta, Normalisation: norm, ThresholdPercent: 10}
	var res *Result
	var err error
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		res, err = CompareGrids(context.Background(), ref, eval, c, Options{Interpolation: interp})
		if err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	runtime.ReadMemStats(&after)
	// Everything the comparison allocated, plus the two inputs, over the
	// inputs: an upper bound of its peak memory in units of the inputs
	// (allocated bytes include what was freed along the way).
	inputs := float64(4 * (len(ref.Data) + len(eval.Data)))
	b.ReportMetric((float64(after.TotalAlloc-before.TotalAlloc)/float64(b.N)+inputs)/inputs, "mem/inputs")
	pts := float64(res.Stats.Evaluated)
	nsPerOp := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
	b.ReportMetric(nsPerOp/pts, "ns/point")
	b.ReportMetric(pts/(nsPerOp/1e9), "points/s")
	b.ReportMetric(res.Stats.PassRate, "pass%")
	b.ReportMetric(pts, "points")
}

func benchmarkExhaustive(b *testing.B, dims [3]int, dosePct, dta float64, norm Normalisation, interp Interpolation) {
	ref, eval := benchCase(b, dims[0], dims[1], dims[2])
	c := Criteria{DosePercent: dosePct, DTA: dta, Normalisation: norm, ThresholdPercent: 10}
	// About 300 evenly spread voxels at or above the threshold keep the
	// brute force affordable; the metric is per point, so it compares with
	// the fast method's directly.
	mx, _ := ref.Max()
	var above []int
	for i, v := range ref.Data {
		if float64(v) >= 0.1*float64(mx) {
			above = append(above, i)
		}
	}
	only := volume.NewMask(ref)
	for k := 0; k < len(above); k += max(1, len(above)/300) {
		only.Bits[above[k]] = true
	}
	var res *Result
	var err error
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		res, err = CompareGrids(context.Background(), ref, eval, c, Options{Only: only, Method: Exhaustive, Interpolation: interp})
		if err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	pts := float64(res.Stats.Evaluated)
	nsPerOp := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
	b.ReportMetric(nsPerOp/pts, "ns/point")
	b.ReportMetric(pts/(nsPerOp/1e9), "points/s")
	b.ReportMetric(pts, "points")
	// Accuracy of the fast method on the same points, against this oracle.
	fast, err := CompareGrids(context.Background(), ref, eval, c, Options{Only: only, Interpolation: interp})
	if err != nil {
		b.Fatal(err)
	}
	// fast−oracle > 0 would be a minimum the fast method missed; the
	// oracle samples a lattice, so oracle−fast > 0 is the oracle's own
	// error (it is an upper bound), large where the field is rugged.
	missed, oracleErr := 0.0, 0.0
	for i, st := range res.Status {
		if st == Evaluated || st == Capped {
			d := float64(fast.Gamma[i] - res.Gamma[i])
			missed = math.Max(missed, d)
			oracleErr = math.Max(oracleErr, -d)
		}
	}
	b.ReportMetric(missed, "max(fast−oracle)")
	b.ReportMetric(oracleErr, "max(oracle−fast)")
}

var benchSizes = [][3]int{{64, 64, 64}, {128, 128, 128}, {256, 256, 160}}

var benchCriteria = []struct {
	dose, dta float64
	norm      Normalisation
}{{3, 2, Global}, {3, 2, Local}, {2, 1, Global}, {2, 1, Local}}

var benchInterps = []Interpolation{CubicBSpline, Trilinear, LinearSimplex}

// BenchmarkCompare runs the fast method on every interpolation, size and
// criteria set.
func BenchmarkCompare(b *testing.B) {
	for _, in := range benchInterps {
		for _, d := range benchSizes {
			for _, c := range benchCriteria {
				b.Run(fmt.Sprintf("%v/%dx%dx%d/%g%%_%gmm_%v", in, d[0], d[1], d[2], c.dose, c.dta, c.norm), func(b *testing.B) {
					benchmarkCompare(b, d, c.dose, c.dta, c.norm, in)
				})
			}
		}
	}
}

// BenchmarkExhaustive runs the exhaustive method on a subset of the same
// inputs; compare its ns/point with BenchmarkCompare's.
func BenchmarkExhaustive(b *testing.B) {
	for _, in := range benchInterps {
		for _, d := range benchSizes {
			for _, c := range benchCriteria {
				b.Run(fmt.Sprintf("%v/%dx%dx%d/%g%%_%gmm_%v", in, d[0], d[1], d[2], c.dose, c.dta, c.norm), func(b *testing.B) {
					benchmarkExhaustive(b, d, c.dose, c.dta, c.norm, in)
				})
			}
		}
	}
}

// benchCoarse is benchCase with the evaluated dose on a 2.5 mm grid
// (misaligned with the reference's 1 mm grid), as Monte Carlo and planning
// systems often export it.
func benchCoarse(b *testing.B, n int) (ref, eval *volume.Grid) {
	b.Helper()
	ref, _ = benchCase(b, n, n, n)
	m := int(float64(n)/2.5) + 3
	o := -float64(m-1) * 2.5 / 2
	eval = mustGrid(b, [3]int{m, m, m}, [3]float64{o + 0.3, o - 0.4, o + 0.2}, [3]float64{2.5, 2.5, 2.5}, volume.Identity)
	half := [3]float64{float64(n) * 0.3, float64(n) * 0.25, float64(n) * 0.3}
	plan := func(p [3]float64) float64 {
		v := 60.0
		for a := 0; a < 3; a++ {
			v *= 0.5 * (math.Erf((half[a]-p[a])/3) + math.Erf((half[a]+p[a])/3))
		}
		r2 := p[0]*p[0] + p[1]*p[1] + p[2]*p[2]
		return v + 8*math.Exp(-r2/(2*float64(n*n)/9))
	}
	rng := rand.New(rand.NewPCG(3, 4))
	fill(eval, func(p [3]float64) float64 {
		d := 1.01 * plan([3]float64{p[0] - 0.5, p[1], p[2]})
		return d + 0.6*math.Sqrt(math.Max(d, 0)/60)*rng.NormFloat64()
	})
	return ref, eval
}

// BenchmarkCompareCoarse runs the fast method with a 2.5 mm evaluated grid
// against the 1 mm reference of benchCase, 3 %/2 mm global, every
// interpolation.
func BenchmarkCompareCoarse(b *testing.B) {
	for _, in := range benchInterps {
		for _, n := range []int{64, 128} {
			b.Run(fmt.Sprintf("%v/%d", in, n), func(b *testing.B) {
				ref, eval := benchCoarse(b, n)
				c := Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
				var res *Result
				var err error
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					if res, err = CompareGrids(context.Background(), ref, eval, c, Options{Interpolation: in}); err != nil {
						b.Fatal(err)
					}
				}
				b.StopTimer()
				pts := float64(res.Stats.Evaluated)
				b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/pts, "ns/point")
				b.ReportMetric(res.Stats.PassRate, "pass%")
			})
		}
	}
}

// BenchmarkSweep runs the fast method on the pass-rate sweep of
// BENCHMARKS.md (internal/benchcase, seeded) at a size small enough for
// benchstat's repeated runs: every variant, the default and the
// linear-simplex interpolant, 3 %/2 mm global, 10 % threshold, with the
// engine's default worker count (GOMAXPROCS).
func BenchmarkSweep(b *testing.B) {
	for _, size := range []benchcase.Size{{64, 64, 40}, {96, 96, 60}} {
		benchmarkSweep(b, size)
	}
}

func benchmarkSweep(b *testing.B, size benchcase.Size) {
	ref, err := benchcase.Reference(size)
	if err != nil {
		b.Fatal(err)
	}
	for _, in := range []Interpolation{CubicBSpline, LinearSimplex} {
		for _, v := range benchcase.Variants {
			b.Run(fmt.Sprintf("%v/%s/%s", in, size, v.Name), func(b *testing.B) {
				eval, err := benchcase.Evaluated(size, v, 2026)
				if err != nil {
					b.Fatal(err)
				}
				c := Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
				var res *Result
				cpu0 := cpuSeconds()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					if res, err = CompareGrids(context.Background(), ref, eval, c, Options{Interpolation: in}); err != nil {
						b.Fatal(err)
					}
				}
				b.StopTimer()
				// CPU time varies less than wall time on a shared machine.
				b.ReportMetric((cpuSeconds()-cpu0)/float64(b.N), "cpu-s/op")
				pts := float64(res.Stats.Evaluated)
				b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/pts, "ns/point")
				b.ReportMetric(res.Stats.PassRate, "pass%")
			})
		}
	}
}

// cpuSeconds returns the user and system CPU time this process has used.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return math.NaN()
	}
	return float64(ru.Utime.Sec+ru.Stime.Sec) + float64(ru.Utime.Usec+ru.Stime.Usec)/1e6
}

// BenchmarkStatsAll measures the summary of a whole grid's Γ, made on the
// workers after the search: 256 × 256 × 160 reference points of which
// 1.40 M (13 %) are evaluated, as in the sweep of BENCHMARKS.md, with Γ drawn
// from a seeded generator (a third of the points above 1).
func BenchmarkStatsAll(b *testing.B) {
	const n = 256 * 256 * 160
	rng := rand.New(rand.NewPCG(2026, 15))
	r := &Result{Gamma: make([]float32, n), Status: make([]Status, n)}
	for i := range r.Status {
		r.Status[i], r.Gamma[i] = BelowThreshold, float32(math.NaN())
		if rng.Float64() < 1_396_631.0/n {
			r.Status[i], r.Gamma[i] = Evaluated, float32(1.5*rng.Float64())
		}
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if s := r.StatsAll(); s.Evaluated == 0 {
			b.Fatal("nothing evaluated")
		}
	}
}

// BenchmarkStatsOver measures the summary over a body outline's voxels: a
// cylinder filling nine tenths of the width of the grid of BenchmarkStatsAll
// (6.6 M of its 10.5 M points), as runs of positions.
func BenchmarkStatsOver(b *testing.B) {
	r, set := statsBenchCase()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if s := r.StatsOver(&set); s.Evaluated == 0 {
			b.Fatal("nothing evaluated")
		}
	}
}

// statsBenchCase returns BenchmarkStatsAll's Γ and the body-like set of
// BenchmarkStatsOver.
func statsBenchCase() (*Result, volume.Runs) {
	const nx, ny, nz = 256, 256, 160
	rng := rand.New(rand.NewPCG(2026, 15))
	r := &Result{Gamma: make([]float32, nx*ny*nz), Status: make([]Status, nx*ny*nz)}
	for i := range r.Status {
		r.Status[i], r.Gamma[i] = BelowThreshold, float32(math.NaN())
		if rng.Float64() < 1_396_631.0/(nx*ny*nz) {
			r.Status[i], r.Gamma[i] = Evaluated, float32(1.5*rng.Float64())
		}
	}
	var set volume.Runs
	const radius = 0.45 * nx
	for k := 0; k < nz; k++ {
		for j := 0; j < ny; j++ {
			y := float64(j) - ny/2 + 0.5
			if y*y > radius*radius {
				continue
			}
			half := math.Sqrt(radius*radius - y*y)
			i0, i1 := int(math.Ceil(nx/2-0.5-half)), int(math.Floor(nx/2-0.5+half))
			row := int32(nx * (j + ny*k))
			set.AddRun(row+int32(i0), row+int32(i1)+1)
		}
	}
	return r, set
}
