package benchcase

import (
	"math"
	"strings"
	"testing"

	"voxgamma/dicomio"
)

// The penumbra is what the sweep's pass rates hang on: its 80–20 % width
// must be the width asked for. An error-function edge 0.5·erfc(u/(σ√2)) is
// one minus the standard normal distribution function of u/σ, so its 80 %
// and 20 % levels lie at u = ∓Φ⁻¹(0.8)·σ, 2·0.841621·σ apart (Φ⁻¹(0.8) =
// 0.841621, standard normal tables, e.g. Abramowitz and Stegun, Handbook
// of Mathematical Functions (1964), table 26.5). The generator takes σ =
// Pen/(2·0.8416), so the width is Pen·0.841621/0.8416 (8·10⁻⁵ mm above Pen
// for 3 mm).
func TestPenumbraWidth(t *testing.T) {
	s := Size{256, 256, 160}
	f := plan(s)
	// The first target (a sphere of radius 50 mm at (−55, 10, 0), 60 Gy,
	// 3 mm penumbra), along −x away from the others (more than 100 mm
	// off: their tails are below 1e-100 Gy); the bath is removed in
	// closed form.
	edge := func(x float64) float64 {
		p := [3]float64{x, 10, 0}
		r2 := p[0]*p[0] + p[1]*p[1] + p[2]*p[2]
		return (f(p) - 10*math.Exp(-r2/(2*60*60))) / 60
	}
	at := func(level float64) float64 {
		lo, hi := -120.0, -55.0 // edge(lo) ≈ 0, edge(hi) ≈ 1
		for it := 0; it < 100; it++ {
			m := (lo + hi) / 2
			if edge(m) < level {
				lo = m
			} else {
				hi = m
			}
		}
		return (lo + hi) / 2
	}
	x20, x80 := at(0.2), at(0.8)
	want := 3 * 0.841621 / 0.8416
	if got := x80 - x20; math.Abs(got-want) > 1e-4 {
		t.Errorf("80–20 %% width %.5f mm, want %.5f mm", got, want)
	}
	// The 50 % level lies on the sphere's surface (erfc(0) = 1).
	if x50 := at(0.5); math.Abs(x50-(-105)) > 1e-6 {
		t.Errorf("50 %% level at x = %.6f mm, want −105 mm (the surface)", x50)
	}
}

// The noisy variant's noise is Gaussian with σ = NoisePercent % of 60 Gy ·
// √(d/60): over the voxels near the targets' 60 Gy plateau its sample
// standard deviation must be that σ (for n samples the sample standard
// deviation of a normal law has relative standard error about 1/√(2n):
// 0.3 % here, checked to 3 %).
func TestNoiseLevel(t *testing.T) {
	s := Size{64, 64, 40}
	var noisy Variant
	for _, v := range Variants {
		if v.NoisePercent > 0 {
			noisy = v
		}
	}
	clean := noisy
	clean.NoisePercent = 0
	a, err := Evaluated(s, noisy, 7)
	if err != nil {
		t.Fatal(err)
	}
	b, err := Evaluated(s, clean, 7)
	if err != nil {
		t.Fatal(err)
	}
	var sum, sum2, n float64
	var sig2 float64
	for i, v := range b.Data {
		if v < 55 {
			continue
		}
		d := float64(a.Data[i]) - float64(v)
		sum += d
		sum2 += d * d
		n++
		sig := noisy.NoisePercent / 100 * 60 * math.Sqrt(float64(v)/60)
		sig2 += sig * sig
	}
	if n < 5000 {
		t.Fatalf("only %v voxels above 55 Gy", n)
	}
	sd := math.Sqrt(sum2/n - (sum/n)*(sum/n))
	want := math.Sqrt(sig2 / n)
	if math.Abs(sd/want-1) > 0.03 {
		t.Errorf("noise σ %.4f Gy over %v voxels, want %.4f Gy", sd, n, want)
	}
	if math.Abs(sum/n) > 4*want/math.Sqrt(n) {
		t.Errorf("noise mean %.5f Gy, want 0 within %.5f", sum/n, 4*want/math.Sqrt(n))
	}
	// Seeded: the same seed gives the same dose, another seed another.
	c, _ := Evaluated(s, noisy, 7)
	d, _ := Evaluated(s, noisy, 8)
	same, differ := true, false
	for i := range a.Data {
		same = same && a.Data[i] == c.Data[i]
		differ = differ || a.Data[i] != d.Data[i]
	}
	if !same || !differ {
		t.Errorf("seeding: same seed gives the same dose %v (want true), another seed another %v (want true)", same, differ)
	}
}

// The files written read back, through dicomio, as the grids made, to the
// 32-bit storage's step.
func TestWriteReadsBack(t *testing.T) {
	s := Size{12, 10, 8}
	dir := t.TempDir()
	fs, err := Write(dir, s, 2026)
	if err != nil {
		t.Fatal(err)
	}
	check := func(path string, want []float32, dims [3]int) {
		t.Helper()
		g, _, err := dicomio.ReadDose(path)
		if err != nil {
			t.Fatal(err)
		}
		if g.Dims() != dims {
			t.Fatalf("%s: dims %v, want %v", path, g.Dims(), dims)
		}
		for i, v := range g.Data {
			if math.Abs(float64(v-want[i])) > 1e-6*70 {
				t.Fatalf("%s: voxel %d reads %g, want %g", path, i, v, want[i])
			}
		}
	}
	ref, _ := Reference(s)
	check(fs.Reference, ref.Data, ref.Dims())
	for _, v := range Variants {
		e, _ := Evaluated(s, v, 2026)
		check(fs.Evaluated[v.Name], e.Data, [3]int{13, 11, 9})
	}
	set, err := dicomio.ReadStructureSet(fs.Structures)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, r := range set.ROIs {
		names = append(names, r.Name+"/"+r.InterpretedType)
		if len(r.Contours) == 0 {
			t.Errorf("ROI %s has no contours", r.Name)
		}
	}
	if got := strings.Join(names, " "); got != "PTV_1/PTV PTV_2/PTV PTV_3/PTV BODY/EXTERNAL" {
		t.Errorf("ROIs %s", got)
	}
}
