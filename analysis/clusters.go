package analysis

import (
	"fmt"
	"math/bits"
	"strings"

	"voxgamma/gamma"
	"voxgamma/result"
	"voxgamma/roi"
)

// clusters finds the connected regions (26-neighbour) of failing reference
// voxels, keeps those of at least s.MinClusterCC, and describes the largest
// s.MaxClusters: volume, centroid, maximum Γ and the ROIs touched.
func (p *Prepared) clusters(s Settings, gres *gamma.Result, regions []*roi.Region) ([]result.Cluster, string) {
	ref := p.Reference
	d := ref.Dims()
	nx, ny, nz := d[0], d[1], d[2]
	failing := func(n int) bool {
		st := gres.Status[n]
		return st == gamma.Capped || (st == gamma.Evaluated && gres.Gamma[n] > 1)
	}
	fl := newFailingLabels(len(gres.Status), failing)
	if len(fl.label) == 0 {
		return []result.Cluster{}, ""
	}
	type acc struct {
		voxels int
		volume float64
		c      [3]float64
		gmax   float64
	}
	var accs []acc
	var stack []int
	for w, word := range fl.bits {
		for ; word != 0; word &= word - 1 {
			n := w<<6 | bits.TrailingZeros64(word)
			sl, _ := fl.slot(n)
			if fl.label[sl] != 0 {
				continue
			}
			id := int32(len(accs) + 1)
			a := acc{}
			fl.label[sl] = id
			stack = append(stack[:0], n)
			for len(stack) > 0 {
				m := stack[len(stack)-1]
				stack = stack[:len(stack)-1]
				v := p.sizes.Volume(m)
				i, j, k := ref.IJK(m)
				wp := ref.WorldOf(i, j, k)
				a.voxels++
				a.volume += v
				for q := 0; q < 3; q++ {
					a.c[q] += v * wp[q]
				}
				a.gmax = max(a.gmax, float64(gres.Gamma[m]))
				for dk := -1; dk <= 1; dk++ {
					kk := k + dk
					if kk < 0 || kk >= nz {
						continue
					}
					for dj := -1; dj <= 1; dj++ {
						jj := j + dj
						if jj < 0 || jj >= ny {
							continue
						}
						for di := -1; di <= 1; di++ {
							ii := i + di
							if ii < 0 || ii >= nx {
								continue
							}
							o := ii + nx*(jj+ny*kk)
							if so, ok := fl.slot(o); ok && fl.label[so] == 0 {
								fl.label[so] = id
								stack = append(stack, o)
							}
						}
					}
				}
			}
			accs = append(accs, a)
		}
	}
	// ROIs touched, per cluster.
	touched := make([][]string, len(accs))
	for _, reg := range regions {
		if p.sources[reg] == nil {
			continue // derived regions repeat what the ROIs say
		}
		seen := map[int32]bool{}
		for n := range reg.Centres.All() {
			sl, ok := fl.slot(int(n))
			if !ok {
				continue
			}
			if id := fl.label[sl]; id != 0 && !seen[id] {
				seen[id] = true
				touched[id-1] = append(touched[id-1], reg.Name)
			}
		}
	}
	minCC := s.MinClusterCC
	var out []result.Cluster
	small := 0
	for i, a := range accs {
		cc := a.volume / 1000
		if cc < minCC {
			small++
			continue
		}
		var c [3]float64
		for q := 0; q < 3; q++ {
			c[q] = roundTo(a.c[q]/a.volume, 0.01)
		}
		rois := touched[i]
		if rois == nil {
			rois = []string{}
		}
		out = append(out, result.Cluster{VolumeCC: roundTo(cc, 1e-6), Voxels: a.voxels, CentroidMM: c, GammaMax: roundTo(a.gmax, 1e-6), ROIs: rois})
	}
	sortClusters(out)
	limit := s.MaxClusters
	if limit == 0 {
		limit = 20
	}
	note := ""
	if len(out) > limit {
		note = fmt.Sprintf("%d failing clusters of at least %g cc; the %d largest are listed.", len(out), minCC, limit)
		out = out[:limit]
	}
	if small > 0 {
		note = strings.TrimSpace(note + fmt.Sprintf(" %d failing clusters smaller than %g cc are not listed.", small, minCC))
	}
	if out == nil {
		out = []result.Cluster{}
	}
	return out, note
}

// failingLabels holds a cluster label for each failing reference point: a
// bitset of the failing points, the number of failing points before each
// word of it, and one label per failing point (0 until labelled). About 1.5
// bits a reference point and 4 bytes a failing one, where a label per
// reference point took 4 bytes each after the engine, at the comparison's
// peak (BENCHMARKS.md, "Fast when it matters").
type failingLabels struct {
	bits   []uint64
	before []int32
	label  []int32
}

// newFailingLabels marks the points n < count for which failing is true.
func newFailingLabels(count int, failing func(int) bool) *failingLabels {
	f := &failingLabels{bits: make([]uint64, (count+63)/64), before: make([]int32, (count+63)/64)}
	total := 0
	for w := range f.bits {
		f.before[w] = int32(total)
		var word uint64
		for b, n := 0, w<<6; b < 64 && n < count; b, n = b+1, n+1 {
			if failing(n) {
				word |= 1 << b
			}
		}
		f.bits[w] = word
		total += bits.OnesCount64(word)
	}
	f.label = make([]int32, total)
	return f
}

// slot returns the place of point n's label, and whether n is failing.
func (f *failingLabels) slot(n int) (int, bool) {
	w, b := n>>6, uint(n&63)
	word := f.bits[w]
	if word&(1<<b) == 0 {
		return 0, false
	}
	return int(f.before[w]) + bits.OnesCount64(word&(1<<b-1)), true
}
