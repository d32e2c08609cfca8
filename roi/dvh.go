package roi

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/stat"

	"voxgamma/internal/selection"
	"voxgamma/volume"
)

// ErrEmpty is returned (wrapped, naming the ROI) when a dose-volume histogram
// is asked of a region with no volume.
var ErrEmpty = errors.New("roi: the region has no volume")

// DVH is the cumulative dose-volume histogram of one dose distribution over
// one region, kept exactly as the voxel doses sorted in decreasing order
// with their cumulative volumes. See the package documentation for the
// definitions of D_x and V_d.
type DVH struct {
	// Name is the region's name.
	Name string
	// Dose holds the dose (Gy) of every voxel with volume, decreasing.
	Dose []float64
	// Cum[m] is the volume (cm³) of voxels 0..m of Dose: the hottest m+1.
	Cum []float64
	// TotalCC is the region's volume (cm³) with a dose, Cum[len−1].
	TotalCC float64
	// Mean, Min and Max dose (Gy), volume-weighted for the mean.
	Mean, Min, Max float64
	// ExcludedCC is the volume (cm³) whose dose is NaN (not known, e.g.
	// outside the dose distribution after resampling), left out.
	ExcludedCC float64
}

// NewDVH builds the DVH of voxels with doses dose (Gy) and volumes weight
// (cm³, ≥ 0; zero weights are dropped). A NaN dose is left out and its
// volume counted in ExcludedCC; an infinite dose or a negative or non-finite
// weight is an error. The voxels are sorted once, O(n log n).
func NewDVH(name string, dose, weight []float64) (*DVH, error) {
	if len(dose) != len(weight) {
		return nil, fmt.Errorf("roi: DVH of %q: %d doses and %d weights", name, len(dose), len(weight))
	}
	b := dvhBuilder{h: &DVH{Name: name}, ps: make([]doseWeight, 0, len(dose))}
	for q, d := range dose {
		if err := b.add(q, d, weight[q]); err != nil {
			return nil, err
		}
	}
	return b.finish()
}

// RegionDVH builds the DVH of dose over region r: each voxel of r.Cover
// weighs its fraction times its volume. dose must have the geometry of the
// grid r was made on (resample it first otherwise).
//
// The voxels are sorted as one 8-byte key each (the dose's float32 bits,
// ordered, and the voxel's rank in the region), and each voxel's weight is
// kept by rank, so that the build takes 32 bytes a voxel at its peak (the
// keys, the weights, Dose and Cum). The doses are the grid's float32
// values, so nothing is rounded; voxels of equal dose come in the order of
// their positions. RegionSummary summarises a large region without sorting
// it, in a few megabytes.
func RegionDVH(dose *volume.Grid, r *Region) (*DVH, error) {
	if err := checkRegionDose(dose, r); err != nil {
		return nil, err
	}
	h := &DVH{Name: r.Name}
	keys := make([]uint64, 0, r.Cover.Len())
	byRank := make([]float64, 0, r.Cover.Len())
	for n, f := range r.Cover.All() {
		d, w := dose.Data[n], r.voxelCC(n, f)
		if keep, err := h.admit(int(n), float64(d), w); err != nil {
			return nil, err
		} else if keep {
			keys = append(keys, uint64(descendingKey(d))<<32|uint64(len(byRank)))
			byRank = append(byRank, w)
		}
	}
	if len(keys) == 0 {
		return nil, fmt.Errorf("roi: DVH of %q: %w", r.Name, ErrEmpty)
	}
	slices.Sort(keys)
	h.Dose = make([]float64, len(keys))
	w := make([]float64, len(keys))
	for m, k := range keys {
		h.Dose[m] = float64(doseOfKey(uint32(k >> 32)))
		w[m] = byRank[uint32(k)]
	}
	keys, byRank = nil, nil
	h.summarise(w)
	return h, nil
}

// checkRegionDose checks that dose can be read over region r: both given,
// r made by this package, on the same geometry.
func checkRegionDose(dose *volume.Grid, r *Region) error {
	if dose == nil || r == nil || r.grid == nil || r.sizes == nil {
		return errors.New("roi: a region's DVH needs a dose grid and a region made by this package")
	}
	if !dose.SameGeometry(r.grid) {
		return fmt.Errorf("roi: DVH of %q: the dose grid's geometry differs from the grid the ROI was rasterised on; resample the dose onto it first", r.Name)
	}
	return nil
}

// descendingKey maps a float32 that is not NaN to a uint32 whose ascending
// order is the floats' descending order (−0 after +0).
func descendingKey(d float32) uint32 { return ^selection.AscendingKey(d) }

// doseOfKey inverts descendingKey.
func doseOfKey(k uint32) float32 { return selection.FloatOfKey(^k) }

// doseWeight is one voxel of a DVH being built: its dose and volume.
type doseWeight struct{ d, w float64 }

// dvhBuilder collects the voxels of a DVH (see [NewDVH] for the rules).
type dvhBuilder struct {
	h  *DVH
	ps []doseWeight
}

// add takes voxel q with dose d (Gy) and volume w (cm³).
func (b *dvhBuilder) add(q int, d, w float64) error {
	keep, err := b.h.admit(q, d, w)
	if keep {
		b.ps = append(b.ps, doseWeight{d, w})
	}
	return err
}

// admit applies the rules of [NewDVH] to voxel q with dose d (Gy) and
// volume w (cm³): it reports whether the voxel is kept, counts a NaN
// dose's volume in ExcludedCC, and refuses a bad volume or an infinite
// dose.
func (h *DVH) admit(q int, d, w float64) (bool, error) {
	switch {
	case !(w >= 0) || math.IsInf(w, 0):
		return false, fmt.Errorf("roi: DVH of %q: voxel %d has volume %g, want a finite value ≥ 0", h.Name, q, w)
	case w == 0:
		return false, nil
	case math.IsNaN(d):
		h.ExcludedCC += w
		return false, nil
	case math.IsInf(d, 0):
		return false, fmt.Errorf("roi: DVH of %q: voxel %d has dose %g", h.Name, q, d)
	}
	return true, nil
}

// finish sorts the voxels by decreasing dose and fills the DVH.
func (b *dvhBuilder) finish() (*DVH, error) {
	h, ps := b.h, b.ps
	if len(ps) == 0 {
		return nil, fmt.Errorf("roi: DVH of %q: %w", h.Name, ErrEmpty)
	}
	// No NaN is left, so plain comparisons order the doses totally.
	slices.SortFunc(ps, func(a, b doseWeight) int {
		switch {
		case a.d > b.d:
			return -1
		case a.d < b.d:
			return 1
		}
		return 0
	})
	h.Dose = make([]float64, len(ps))
	w := make([]float64, len(ps))
	for q, p := range ps {
		h.Dose[q], w[q] = p.d, p.w
	}
	b.ps = nil
	h.summarise(w)
	return h, nil
}

// summarise fills in the DVH from its doses, sorted in decreasing order,
// and their volumes w (cm³), which become the cumulative volumes Cum: the
// mean, the total volume, the maximum and the minimum.
func (h *DVH) summarise(w []float64) {
	h.Mean = stat.Mean(h.Dose, w)
	// The cumulative volumes take the weights' place (gonum's CumSum reads
	// each s[i] before it writes dst[i], in Go and in assembly); the
	// in-place sum is checked against a separate one in the tests.
	h.Cum = floats.CumSum(w, w)
	h.TotalCC = h.Cum[len(h.Cum)-1]
	h.Max, h.Min = h.Dose[0], h.Dose[len(h.Dose)-1]
}

// RankTolerance is the share of a DVH's total volume by which a cumulative
// volume may fall short of a requested volume and still count as reaching it
// (see [DVH.DPercent]): it absorbs rounding when the request is exactly a
// cumulative volume (e.g. 5 % of a region whose hottest voxel is 5 % of it).
const RankTolerance = 1e-9

// rank returns the smallest m with Cum[m] ≥ v − RankTolerance·TotalCC
// (clamped to the last voxel).
func (h *DVH) rank(v float64) int {
	m := sort.SearchFloat64s(h.Cum, v-RankTolerance*h.TotalCC)
	if m >= len(h.Cum) {
		m = len(h.Cum) - 1
	}
	return m
}

// DPercent returns D_x for x = p % of the region's volume (0 ≤ p ≤ 100): the
// minimum dose of the hottest voxels whose cumulative volume first reaches
// x, Dose[m] for the smallest m with Cum[m] ≥ p/100·TotalCC (to within
// RankTolerance·TotalCC; no interpolation between voxels; see the package
// documentation). D0% is the maximum and D100% the minimum.
func (h *DVH) DPercent(p float64) float64 {
	return h.Dose[h.rank(p/100*h.TotalCC)]
}

// DCC returns D_v for an absolute volume v (cm³), by the same rule as
// DPercent. When v exceeds the region's volume, the hottest v cannot be
// formed: DCC returns the minimum dose and ok = false.
func (h *DVH) DCC(v float64) (d float64, ok bool) {
	if v > h.TotalCC {
		return h.Min, false
	}
	return h.Dose[h.rank(v)], true
}

// V returns V_d, the volume receiving at least d Gy, in cm³ and as a
// percentage of TotalCC.
func (h *DVH) V(d float64) (cc, percent float64) {
	m := sort.Search(len(h.Dose), func(i int) bool { return h.Dose[i] < d })
	if m == 0 {
		return 0, 0
	}
	cc = h.Cum[m-1]
	return cc, 100 * cc / h.TotalCC
}

// Curve is a cumulative DVH sampled at regular doses: CC[q] (and Percent[q]
// of the region's volume) receive at least Dose[q].
type Curve struct {
	Dose, CC, Percent []float64
}

// MaxCurvePoints bounds the number of points of a Curve.
const MaxCurvePoints = 1_000_000

// Curve samples the cumulative DVH every binWidth Gy, from 0 (or below, down
// to the minimum dose, when doses are negative) to the first multiple of
// binWidth above the maximum dose, where the volume is 0. binWidth ≤ 0 means
// 0.1 % of the maximum dose (1 Gy when the maximum is not positive).
func (h *DVH) Curve(binWidth float64) (Curve, error) {
	k0, n, binWidth, err := h.curveSpan(binWidth)
	if err != nil {
		return Curve{}, err
	}
	c := Curve{Dose: make([]float64, n), CC: make([]float64, n), Percent: make([]float64, n)}
	for q := 0; q < n; q++ {
		d := (k0 + float64(q)) * binWidth
		c.Dose[q] = d
		c.CC[q], c.Percent[q] = h.V(d)
	}
	return c, nil
}

// curveSpan returns the curve's first dose as a multiple k0 of the bin
// width, its number of points and the bin width itself (the default when
// binWidth ≤ 0), by the rules of Curve.
func (h *DVH) curveSpan(binWidth float64) (k0 float64, n int, width float64, err error) {
	if math.IsNaN(binWidth) || math.IsInf(binWidth, 0) {
		return 0, 0, 0, fmt.Errorf("roi: DVH curve of %q: bin width %g Gy", h.Name, binWidth)
	}
	if binWidth <= 0 {
		binWidth = 0.001 * h.Max
		if !(binWidth > 0) {
			binWidth = 1
		}
	}
	k0 = math.Min(0, math.Floor(h.Min/binWidth))
	k1 := math.Floor(h.Max/binWidth) + 1
	if k1-k0+1 > MaxCurvePoints {
		return 0, 0, 0, fmt.Errorf("roi: DVH curve of %q: %g points at %g Gy per bin, more than %d", h.Name, k1-k0+1, binWidth, MaxCurvePoints)
	}
	return k0, int(k1-k0) + 1, binWidth, nil
}

// VolumeAt is V_d at one dose level.
type VolumeAt struct {
	// Dose is d (Gy).
	Dose float64
	// CC is the volume (cm³) receiving at least d, Percent the same as a
	// percentage of the region's volume.
	CC, Percent float64
}

// Metrics are the dose-volume metrics of one DVH (doses in Gy, volumes in
// cm³), following ICRU Report 83 (2010) for D_x and V_d.
type Metrics struct {
	// Name is the region's name.
	Name string
	// VolumeCC is the region's volume with a dose; ExcludedCC the volume
	// with an unknown (NaN) dose, left out of everything else.
	VolumeCC, ExcludedCC float64
	// Mean, Min and Max dose.
	Mean, Min, Max float64
	// D003cc is D0.03cc, the minimum dose of the hottest 0.03 cm³ (a
	// near-maximum in common practice). When the region is smaller than
	// 0.03 cm³ it is the minimum dose and Below003cc is set.
	D003cc     float64
	Below003cc bool
	// D98, D95, D50 and D2 are D98%, D95%, D50% and D2%.
	D98, D95, D50, D2 float64
	// V holds V_d at the requested dose levels, in request order.
	V []VolumeAt
}

// Metrics computes the metrics of h, with V_d at each dose of vDoses (Gy).
func (h *DVH) Metrics(vDoses []float64) Metrics {
	m := Metrics{
		Name: h.Name, VolumeCC: h.TotalCC, ExcludedCC: h.ExcludedCC,
		Mean: h.Mean, Min: h.Min, Max: h.Max,
		D98: h.DPercent(98), D95: h.DPercent(95), D50: h.DPercent(50), D2: h.DPercent(2),
	}
	var ok bool
	m.D003cc, ok = h.DCC(0.03)
	m.Below003cc = !ok
	for _, d := range vDoses {
		cc, pct := h.V(d)
		m.V = append(m.V, VolumeAt{Dose: d, CC: cc, Percent: pct})
	}
	return m
}

// Difference compares one metric of an evaluated dose with the reference.
type Difference struct {
	// Metric names the metric ("Dmean", "D98%", "D0.03cc", "V20Gy", ...).
	Metric string
	// Unit is "Gy" for doses and "cm3" for volumes.
	Unit string
	// Reference and Evaluated are the two values; Delta = Evaluated −
	// Reference, in Unit.
	Reference, Evaluated, Delta float64
	// Percent is 100·Delta/basis, where the basis is named by Basis: for
	// doses the normalisation dose when one is given (> 0), else the
	// reference value; for volumes the reference region volume (so Percent
	// is in percentage points of the region). Percent is 0 when the basis
	// is 0.
	Percent float64
	Basis   string
}

// CompareMetrics returns evaluated − reference for each metric of ref and
// eval (which must have the same V_d dose levels). norm (Gy) is the
// normalisation dose the dose percentages refer to (prescription or
// reference maximum, as the report states); norm ≤ 0 makes each dose
// percentage relative to the reference value of that metric instead.
func CompareMetrics(ref, eval Metrics, norm float64) ([]Difference, error) {
	if len(ref.V) != len(eval.V) {
		return nil, fmt.Errorf("roi: compare metrics of %q: %d and %d V_d levels", ref.Name, len(ref.V), len(eval.V))
	}
	for q := range ref.V {
		if ref.V[q].Dose != eval.V[q].Dose {
			return nil, fmt.Errorf("roi: compare metrics of %q: V_d level %d is %g Gy and %g Gy", ref.Name, q, ref.V[q].Dose, eval.V[q].Dose)
		}
	}
	dose := func(name string, r, e float64) Difference {
		d := Difference{Metric: name, Unit: "Gy", Reference: r, Evaluated: e, Delta: e - r}
		basis := r
		d.Basis = "reference value"
		if norm > 0 {
			basis, d.Basis = norm, fmt.Sprintf("normalisation dose %g Gy", norm)
		}
		if basis != 0 {
			d.Percent = 100 * d.Delta / basis
		}
		return d
	}
	out := []Difference{
		dose("Dmean", ref.Mean, eval.Mean),
		dose("Dmax", ref.Max, eval.Max),
		dose("Dmin", ref.Min, eval.Min),
		dose("D0.03cc", ref.D003cc, eval.D003cc),
		dose("D98%", ref.D98, eval.D98),
		dose("D95%", ref.D95, eval.D95),
		dose("D50%", ref.D50, eval.D50),
		dose("D2%", ref.D2, eval.D2),
	}
	for q := range ref.V {
		d := Difference{
			Metric: fmt.Sprintf("V%gGy", ref.V[q].Dose), Unit: "cm3",
			Reference: ref.V[q].CC, Evaluated: eval.V[q].CC, Delta: eval.V[q].CC - ref.V[q].CC,
			Basis: "reference region volume",
		}
		if ref.VolumeCC > 0 {
			d.Percent = 100 * d.Delta / ref.VolumeCC
		}
		out = append(out, d)
	}
	return out, nil
}
