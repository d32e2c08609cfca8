package report

import (
	"fmt"
	"math"

	"voxgamma/result"
	"voxgamma/volume"
)

// binsPerUnit is the number of Γ histogram bins per unit of Γ: bins are 0.1
// wide.
const binsPerUnit = 10

// gammaHistogram counts Γ values in bins 0.1 wide from 0 to the search cap.
// Bin b holds the values in (b/10, (b+1)/10]; bin 0 also holds 0. Bins are
// closed on the right so that the bins up to Γ = 1 hold exactly the passing
// points (Γ ≤ 1). The last bin also holds every value above its lower edge:
// the points capped at the search distance, whose Γ is the cap.
type gammaHistogram struct {
	// Counts per bin.
	Counts []int
	// Total is the number of values counted (the evaluated points).
	Total int
	// Failing counts the values above 1.
	Failing int
}

// gammaCap is the largest Γ a comparison can report: the search distance
// over the distance-to-agreement criterion. When the criteria do not give
// it, the largest Γ in the grid (at least 1.5) stands in.
func gammaCap(c result.Criteria, g *volume.Grid) float64 {
	if c.SearchMM > 0 && c.DTAmm > 0 && !math.IsInf(c.SearchMM/c.DTAmm, 0) {
		return c.SearchMM / c.DTAmm
	}
	m, at := g.Max()
	if at < 0 || float64(m) < 1.5 {
		return 1.5
	}
	return float64(m)
}

// newGammaHistogram returns an empty histogram whose bins cover 0 to cap.
func newGammaHistogram(cap float64) *gammaHistogram {
	n := int(math.Ceil(cap*binsPerUnit - 1e-9))
	if n < 1 {
		n = 1
	}
	return &gammaHistogram{Counts: make([]int, n)}
}

// edgeTolerance (in bin widths) lets a value stored in float32 next to a
// bin edge count as on the edge: float32(0.3) is 0.30000001 and belongs to
// (0.2, 0.3]. It is below float32's resolution at 1 (1.2e-7, i.e. 1.2e-6
// bin widths), so the first float32 above 1 still falls in (1, 1.1]: the
// bins up to 1 hold exactly the points with Γ ≤ 1.
const edgeTolerance = 1e-6

// binOf returns the bin of Γ value v among n bins.
func binOf(v float64, n int) int {
	b := int(math.Ceil(v*binsPerUnit-edgeTolerance)) - 1
	if b < 0 {
		b = 0
	}
	if b >= n {
		b = n - 1
	}
	return b
}

// add counts v unless it is NaN (a point not evaluated).
func (h *gammaHistogram) add(v float32) {
	if v != v {
		return
	}
	h.Counts[binOf(float64(v), len(h.Counts))]++
	h.Total++
	if v > 1 {
		h.Failing++
	}
}

// binEdges returns the lower and upper Γ of bin b.
func binEdges(b int) (lo, hi float64) {
	return float64(b) / binsPerUnit, float64(b+1) / binsPerUnit
}

// histogramOf counts the Γ values of g inside mask (every voxel when mask
// is nil).
func histogramOf(g *volume.Grid, mask *volume.Mask, cap float64) (*gammaHistogram, error) {
	h := newGammaHistogram(cap)
	if mask == nil {
		for _, v := range g.Data {
			h.add(v)
		}
		return h, nil
	}
	if mask.Dims() != g.Dims() || len(mask.Bits) != len(g.Data) {
		return nil, fmt.Errorf("mask %v does not match the Γ grid %v", mask.Dims(), g.Dims())
	}
	for n, in := range mask.Bits {
		if in {
			h.add(g.Data[n])
		}
	}
	return h, nil
}
