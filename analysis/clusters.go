package analysis

import (
	"fmt"
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
	// label[n] = cluster number + 1; 0 unlabelled.
	var label []int32
	type acc struct {
		voxels int
		volume float64
		c      [3]float64
		gmax   float64
	}
	var accs []acc
	var stack []int
	for n := range gres.Status {
		if !failing(n) || (label != nil && label[n] != 0) {
			continue
		}
		if label == nil {
			label = make([]int32, len(gres.Status))
		}
		id := int32(len(accs) + 1)
		a := acc{}
		label[n] = id
		stack = append(stack[:0], n)
		for len(stack) > 0 {
			m := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			v := p.sizes.Volume(m)
			i, j, k := ref.IJK(m)
			w := ref.WorldOf(i, j, k)
			a.voxels++
			a.volume += v
			for q := 0; q < 3; q++ {
				a.c[q] += v * w[q]
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
						if label[o] == 0 && failing(o) {
							label[o] = id
							stack = append(stack, o)
						}
					}
				}
			}
		}
		accs = append(accs, a)
	}
	if len(accs) == 0 {
		return []result.Cluster{}, ""
	}
	// ROIs touched, per cluster.
	touched := make([][]string, len(accs))
	for _, reg := range regions {
		if p.sources[reg] == nil {
			continue // derived regions repeat what the ROIs say
		}
		seen := map[int32]bool{}
		for _, n := range reg.Centres {
			if id := label[n]; id != 0 && !seen[id] {
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
