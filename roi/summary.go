package roi

import (
	"fmt"
	"math"

	"voxgamma/internal/selection"
	"voxgamma/volume"
)

// Summary is what a report keeps of one DVH: its metrics and its curve
// sampled on regular doses.
type Summary struct {
	// Metrics are the DVH's metrics, as [DVH.Metrics] gives them.
	Metrics Metrics
	// Curve is the DVH sampled as [DVH.Curve] samples it; empty when
	// CurveErr is set.
	Curve Curve
	// CurveErr says why the curve could not be made (a bin width that is
	// not finite, or more than MaxCurvePoints points); the metrics stand.
	CurveErr error
}

// radixFrom is the region size (voxels with a partial volume) from which
// RegionSummary selects by radix: below it, sorting the voxels costs less
// time and memory than the selection's histograms (3 MB, a few
// milliseconds).
const radixFrom = 1 << 16

// RegionSummary returns the metrics (with V_d at each dose of vDoses, Gy)
// and the curve (every binWidth Gy, ≤ 0 for the default; see [DVH.Curve])
// of dose's DVH over region r: the values that [RegionDVH] followed by
// [DVH.Metrics] and [DVH.Curve] give, by the same definitions (the package
// documentation), without holding the region's voxels sorted. A body
// outline holds millions of voxels, whose sorted DVH takes 16 bytes each;
// this takes a few megabytes whatever the region's size.
//
// It reads the region twice. The first pass sums the volume, the mean's
// numerator, V_d and, for every value of the top 16 bits of each dose's
// ordering key (the float32 bits, ordered by decreasing dose), the volume
// of the voxels that share them; the buckets' running sums locate the
// bucket that holds each D_x. The second pass sums the volumes of those
// buckets' voxels by the key's low 16 bits, which locates D_x's float32
// dose exactly (a radix selection), and bins the voxels for the curve.
// Sums run in the region's index order instead of by decreasing dose, so
// volumes and the mean may differ from RegionDVH's in the last bits; the
// doses D_x agree exactly unless a cumulative volume lies within that
// rounding of RankTolerance's margin. A region of fewer than 2¹⁶ voxels is
// sorted instead (RegionDVH), which costs it less.
func RegionSummary(dose *volume.Grid, r *Region, vDoses []float64, binWidth float64) (Summary, error) {
	if err := checkRegionDose(dose, r); err != nil {
		return Summary{}, err
	}
	if r.Cover.Len() < radixFrom {
		h, err := RegionDVH(dose, r)
		if err != nil {
			return Summary{}, err
		}
		c, cErr := h.Curve(binWidth)
		return Summary{Metrics: h.Metrics(vDoses), Curve: c, CurveErr: cErr}, nil
	}
	return radixSummary(dose, r, vDoses, binWidth)
}

// radixSummary is RegionSummary by radix selection, for any region; dose
// and r are checked.
func radixSummary(dose *volume.Grid, r *Region, vDoses []float64, binWidth float64) (Summary, error) {
	h := &DVH{Name: r.Name}
	sel := selection.NewRadix()
	defer sel.Release()
	vcc := make([]float64, len(vDoses))
	var total, sumDW float64
	lo, hi := math.Inf(1), math.Inf(-1)
	kept := 0
	for n, f := range r.Cover.All() {
		d, w := dose.Data[n], r.voxelCC(n, f)
		if keep, err := h.admit(int(n), float64(d), w); err != nil {
			return Summary{}, err
		} else if !keep {
			continue
		}
		kept++
		x := float64(d)
		total += w
		sumDW += w * x
		lo, hi = min(lo, x), max(hi, x)
		sel.Add(descendingKey(d), w)
		for i, v := range vDoses {
			if !(x < v) { // as DVH.V: the volume with dose ≥ v
				vcc[i] += w
			}
		}
	}
	if kept == 0 {
		return Summary{}, fmt.Errorf("roi: DVH of %q: %w", r.Name, ErrEmpty)
	}
	h.TotalCC, h.Mean, h.Min, h.Max = total, sumDW/total, lo, hi

	// The D_x to find: D98, D95, D50, D2 and D0.03cc, each as the
	// smallest dose rank whose cumulative volume reaches its threshold
	// (DVH.rank), located first by bucket.
	pcts := [4]float64{98, 95, 50, 2}
	var at [5]int
	for i, p := range pcts {
		at[i] = sel.Want(p/100*total - RankTolerance*total)
	}
	below003 := 0.03 > total
	if !below003 {
		at[4] = sel.Want(0.03 - RankTolerance*total)
	}

	s := Summary{}
	var curve curveBins // without bins when the curve cannot be made
	s.CurveErr = curve.init(h, binWidth)
	for n, f := range r.Cover.All() {
		d, w := dose.Data[n], r.voxelCC(n, f)
		if !(w > 0) || d != d { // left out in the first pass
			continue
		}
		sel.AddLow(descendingKey(d), w)
		curve.add(float64(d), w)
	}

	m := Metrics{Name: h.Name, VolumeCC: total, ExcludedCC: h.ExcludedCC, Mean: h.Mean, Min: lo, Max: hi}
	dx := func(i int) float64 {
		if at[i] < 0 {
			return lo // beyond the total: the last voxel (DVH.rank clamps)
		}
		return float64(doseOfKey(sel.Key(at[i])))
	}
	m.D98, m.D95, m.D50, m.D2 = dx(0), dx(1), dx(2), dx(3)
	if below003 {
		m.D003cc, m.Below003cc = lo, true
	} else {
		m.D003cc = dx(4)
	}
	for i, v := range vDoses {
		pct := 0.0
		if vcc[i] > 0 {
			pct = 100 * vcc[i] / total
		}
		m.V = append(m.V, VolumeAt{Dose: v, CC: vcc[i], Percent: pct})
	}
	s.Metrics = m
	if s.CurveErr == nil {
		s.Curve = curve.finish(total)
	}
	return s, nil
}

// curveBins sums the volume of a DVH's voxels between the doses at which
// its curve is sampled (DVH.Curve's doses).
type curveBins struct {
	k0, width float64
	cc        []float64 // cc[j]: volume with dose in [dose(j), dose(j+1))
}

// init sets the bins for a DVH with h's minimum and maximum dose, by the
// rules of DVH.Curve.
func (c *curveBins) init(h *DVH, binWidth float64) error {
	k0, n, width, err := h.curveSpan(binWidth)
	if err != nil {
		return err
	}
	c.k0, c.width, c.cc = k0, width, make([]float64, n)
	return nil
}

// dose returns the curve's j-th dose, computed as DVH.Curve computes it.
func (c *curveBins) dose(j int) float64 { return (c.k0 + float64(j)) * c.width }

// add takes a voxel of dose d and volume w into the last bin whose dose is
// at most d (none when d is below the first).
func (c *curveBins) add(d, w float64) {
	n := len(c.cc)
	if n == 0 {
		return
	}
	j := int(max(-1, min(float64(n-1), math.Floor(d/c.width)-c.k0)))
	// Floor's rounding can miss by one: settle j against the doses as
	// they are compared in DVH.V.
	for j+1 < n && !(d < c.dose(j+1)) {
		j++
	}
	for j >= 0 && d < c.dose(j) {
		j--
	}
	if j >= 0 {
		c.cc[j] += w
	}
}

// finish returns the curve: at each dose, the volume at or above it.
func (c *curveBins) finish(total float64) Curve {
	n := len(c.cc)
	out := Curve{Dose: make([]float64, n), CC: make([]float64, n), Percent: make([]float64, n)}
	cum := 0.0
	for j := n - 1; j >= 0; j-- {
		cum += c.cc[j]
		out.Dose[j], out.CC[j] = c.dose(j), cum
		if cum > 0 {
			out.Percent[j] = 100 * cum / total
		}
	}
	return out
}
