package gamma

import (
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
// dose is interpolated with volume.Grid.SampleLocal, a code path separate
// from the fast search's cells. Returns a value ≥ rn² when nothing within
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
		u := [3]float64{(q[0] + o[0]) * s.dta, (q[1] + o[1]) * s.dta, (q[2] + o[2]) * s.dta}
		e, ok := kuhnSample(s.grid, u)
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
