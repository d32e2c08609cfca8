package gamma

import (
	"math"
	"sort"
)

// exhaustiveCandidates is how many of the best lattice positions the
// exhaustive search polishes with a pattern search.
const exhaustiveCandidates = 8

// exhaustive returns min Γ² for the reference point at q (DTA units) with
// dose dr and weight w by brute force: Γ² at every position of a cubic
// lattice of step latStep centred on q, within the search distance and
// inside the evaluated grid, with no pruning; then a pattern search (the 26
// lattice directions, step halved until below 1e-6 DTA) from each of the
// best few lattice positions removes the lattice's own error. The evaluated
// dose is interpolated with volume.Grid.SampleLocal, a code path separate
// from the fast search's cells. Returns a value ≥ rn² when nothing within
// the search distance is below rn.
func (s *searcher) exhaustive(q [3]float64, dr, w float64) float64 {
	rn, h := s.rn, s.latStep
	m := int(math.Floor(rn / h))
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
		e, ok := s.grid.SampleLocal(u)
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
		o, g := c.o, c.g
		for step := h / 2; step > 1e-6; {
			improved := false
			for da := -1; da <= 1; da++ {
				for db := -1; db <= 1; db++ {
					for dc := -1; dc <= 1; dc++ {
						if da == 0 && db == 0 && dc == 0 {
							continue
						}
						on := [3]float64{o[0] + float64(da)*step, o[1] + float64(db)*step, o[2] + float64(dc)*step}
						if gn := gammaAt(on); gn < g {
							o, g, improved = on, gn, true
						}
					}
				}
			}
			if !improved {
				step /= 2
			}
		}
		result = math.Min(result, g)
	}
	return result
}
