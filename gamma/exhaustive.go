package gamma

import (
	"fmt"
	"math"
	"sort"

	"voxgamma/volume"
)

// exhaustiveCandidates is how many of the best lattice positions the
// exhaustive search zooms in on.
const exhaustiveCandidates = 64

// exhaustive returns min Γ² for the reference point at q (DTA units) with
// dose dr and weight w by brute force: Γ² at every position of a cubic
// lattice of step latStep centred on q, within the search distance and
// inside the evaluated grid, with no pruning; then, around each of the best
// few lattice positions, lattices of 7³ positions spanning ±1.5 of the
// previous step, each round's step half the last, zoom in until the step is
// below 1e-5 DTA, removing the first lattice's own error. The evaluated
// dose is interpolated by sampleDirect, a code path separate from the fast
// search's cells and patches. Returns a value ≥ rn² when nothing within
// the search distance is below rn.
func (s *searcher) exhaustive(q [3]float64, dr, w float64) float64 {
	rn, h := s.rn, s.latStep
	// No lattice position farther than the grid's diagonal from q (which
	// lies inside the grid) can be inside it: a search distance beyond that
	// (--search 1e300) must not size the lattice.
	m := int(math.Floor(math.Min(rn, s.f.diagonal()) / h))
	type cand struct {
		g float64
		o [3]float64
	}
	var best [exhaustiveCandidates]cand
	for i := range best {
		best[i].g = math.Inf(1)
	}
	worst := 0 // index of the largest value held in best
	gammaAt := func(o [3]float64) float64 {
		if o[0]*o[0]+o[1]*o[1]+o[2]*o[2] > rn*rn {
			return math.Inf(1)
		}
		e, ok := s.sampleDirect([3]float64{q[0] + o[0], q[1] + o[1], q[2] + o[2]})
		if !ok {
			return math.Inf(1)
		}
		d := w * (e - dr)
		return o[0]*o[0] + o[1]*o[1] + o[2]*o[2] + d*d
	}
	for a := -m; a <= m; a++ {
		for b := -m; b <= m; b++ {
			for c := -m; c <= m; c++ {
				o := [3]float64{float64(a) * h, float64(b) * h, float64(c) * h}
				g := gammaAt(o)
				if g < best[worst].g {
					best[worst] = cand{g, o}
					for i := range best {
						if best[i].g > best[worst].g {
							worst = i
						}
					}
				}
			}
		}
	}
	sort.Slice(best[:], func(i, j int) bool { return best[i].g < best[j].g })
	result := math.Inf(1)
	for _, c := range best {
		if math.IsInf(c.g, 1) {
			continue
		}
		// Zoom: a lattice of (2z+1)³ positions spanning ±1.5 of the last
		// step around the best position so far, the step halving each
		// round until it is below 1e-5 DTA.
		o, g := c.o, c.g
		const z = 3
		for step := h * 1.5 / z; step > 1e-5; step /= z / 1.5 {
			centre := o
			for a := -z; a <= z; a++ {
				for b := -z; b <= z; b++ {
					for d := -z; d <= z; d++ {
						on := [3]float64{centre[0] + float64(a)*step, centre[1] + float64(b)*step, centre[2] + float64(d)*step}
						if gn := gammaAt(on); gn < g {
							o, g = on, gn
						}
					}
				}
			}
		}
		result = math.Min(result, g)
	}
	return result
}

// kuhnSample evaluates the Kuhn piecewise-linear interpolant of grid g at
// local position u (mm), or reports false outside the grid: the cell and
// fractions t come from volume.Grid.Cell, and the value is the barycentric
// combination of the four vertices of the tetrahedron holding t. With the
// axes ordered t_a ≥ t_b ≥ t_c, the vertices are 0, e_a, e_a + e_b and
// (1,1,1) with weights 1 − t_a, t_a − t_b, t_b − t_c and t_c.
func kuhnSample(g *volume.Grid, u [3]float64) (float64, bool) {
	var c [3]int
	var t [3]float64
	for a := 0; a < 3; a++ {
		var ok bool
		c[a], t[a], ok = g.Cell(a, u[a])
		if !ok {
			return 0, false
		}
	}
	order := [3]int{0, 1, 2} // insertion sort by decreasing t
	for i := 1; i < 3; i++ {
		for j := i; j > 0 && t[order[j]] > t[order[j-1]]; j-- {
			order[j], order[j-1] = order[j-1], order[j]
		}
	}
	dims := g.Dims()
	at := func(step [3]int) float64 {
		var idx [3]int
		for a := 0; a < 3; a++ {
			idx[a] = c[a] + step[a]
			if idx[a] >= dims[a] {
				idx[a] = dims[a] - 1 // single-sample axis: t is 0 there
			}
		}
		return float64(g.At(idx[0], idx[1], idx[2]))
	}
	var v [3]int
	value := (1 - t[order[0]]) * at(v)
	v[order[0]] = 1
	value += (t[order[0]] - t[order[1]]) * at(v)
	v[order[1]] = 1
	value += (t[order[1]] - t[order[2]]) * at(v)
	v[order[2]] = 1
	value += t[order[2]] * at(v)
	return value, true
}

// canonicalGrid returns the field's samples as a volume.Grid in the
// canonical frame (patient axes, increasing), sharing the samples.
func (f *field) canonicalGrid() *volume.Grid {
	g, err := volume.New(f.n, f.origin, volume.Identity, f.offMM)
	if err != nil {
		panic(fmt.Sprintf("gamma: canonical grid: %v", err))
	}
	g.Data = f.data
	return g
}

// sampleDirect evaluates the interpolant at canonical position p (DTA
// units) point by point, with code separate from the fast search's: the
// simplex interpolant from the tetrahedron holding p, trilinear through
// volume.Grid.SampleLocal, the cubic B-spline from the recursive
// definition of its basis functions. It reports false outside the grid.
func (s *searcher) sampleDirect(p [3]float64) (float64, bool) {
	u := [3]float64{p[0] * s.dta, p[1] * s.dta, p[2] * s.dta}
	switch s.f.interp {
	case LinearSimplex:
		return kuhnSample(s.grid, u)
	case Trilinear:
		return s.grid.SampleLocal(u)
	}
	var c [3]int
	for a := 0; a < 3; a++ {
		var ok bool
		if c[a], _, ok = s.grid.Cell(a, u[a]); !ok {
			return 0, false
		}
	}
	var w [3][4]float64
	for a := 0; a < 3; a++ {
		w[a] = s.sp.ax[a].directBasis(c[a], math.Max(0, math.Min(p[a], s.f.off[a][s.f.n[a]-1])))
	}
	sp := s.sp
	v := 0.0
	for k := 0; k < 4; k++ {
		for j := 0; j < 4; j++ {
			for i := 0; i < 4; i++ {
				idx := (c[0]+i)*sp.cs[0] + (c[1]+j)*sp.cs[1] + (c[2]+k)*sp.cs[2]
				v += w[0][i] * w[1][j] * w[2][k] * float64(sp.coef[idx])
			}
		}
	}
	return v, true
}

// directBasis returns the weights of the padded coefficients c … c+3 at x
// in cell c by the recursive definition of the B-splines (Cox-de Boor):
// N_{m,0} is 1 on the knot span of cell c only, and N_{m,d} =
// (x − τ_m)/(τ_{m+d} − τ_m)·N_{m,d-1} + (τ_{m+d+1} − x)/(τ_{m+d+1} −
// τ_{m+1})·N_{m+1,d-1}.
func (ax *axisSpline) directBasis(c int, x float64) [4]float64 {
	if ax.kind == axisConst {
		return [4]float64{0, 1, 0, 0}
	}
	// Knots τ_{c-3} … τ_{c+4}; the outermost two only ever multiply zero.
	var t [8]float64
	for m := 0; m < 8; m++ {
		i := c - 3 + m
		switch {
		case i < -2:
			t[m] = 2*ax.tau[0] - ax.tau[1]
		case i > ax.n+1:
			t[m] = 2*ax.tau[ax.n+3] - ax.tau[ax.n+2]
		default:
			t[m] = ax.tau[i+2]
		}
	}
	// n[m] holds N_{c-3+m, d}.
	var nb [8]float64
	nb[3] = 1 // the span of cell c is [τ_c, τ_{c+1}] = [t[3], t[4]]
	for d := 1; d <= 3; d++ {
		var next [8]float64
		for m := 0; m+d+1 < 8; m++ {
			v := 0.0
			if den := t[m+d] - t[m]; den > 0 {
				v += (x - t[m]) / den * nb[m]
			}
			if den := t[m+d+1] - t[m+1]; den > 0 {
				v += (t[m+d+1] - x) / den * nb[m+1]
			}
			next[m] = v
		}
		nb = next
	}
	// N_{c-3+m,3} is our N_{c-1+m} (padded c+m), m = 0 … 3.
	return [4]float64{nb[0], nb[1], nb[2], nb[3]}
}
