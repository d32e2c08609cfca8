package gamma

import (
	"math"
	"voxgamma/internal/selection"
)

// Stats summarises Γ over a set of reference points.
type Stats struct {
	// Evaluated counts the points with a Γ: Evaluated and Capped.
	Evaluated int
	// Passed counts evaluated points with Γ ≤ 1 (never a capped point).
	Passed int
	// Failed = Evaluated − Passed.
	Failed int
	// PassRate is 100·Passed/Evaluated, NaN when nothing was evaluated.
	PassRate float64
	// Mean, Median, P95, P99 and Max describe Γ over the evaluated points
	// (capped points count at their cap); NaN when nothing was evaluated.
	// Percentiles interpolate linearly between order statistics (Hyndman
	// and Fan, Am Stat 50 (1996) 361, definition 7, numpy's default).
	Mean, Median, P95, P99, Max float64
	// AboveOneHalf is the percentage of evaluated points with Γ > 1.5.
	AboveOneHalf float64
	// Capped counts points whose minimum lay beyond the search distance.
	Capped int
	// BelowThreshold counts points under the low-dose threshold.
	BelowThreshold int
	// Outside counts points outside the evaluated grid.
	Outside int
	// NotSelected counts points the caller's selection excluded.
	NotSelected int
}

// StatsAll summarises every reference point.
func (r *Result) StatsAll() Stats { return r.stats(nil, true) }

// StatsOver summarises the reference points listed in indices (none when
// indices is empty).
func (r *Result) StatsOver(indices []int32) Stats { return r.stats(indices, false) }

func (r *Result) stats(indices []int32, all bool) Stats {
	var s Stats
	n := 0
	count := func(i int) {
		if st := r.Status[i]; st == Evaluated || st == Capped {
			n++
		}
	}
	if all {
		for i := range r.Status {
			count(i)
		}
	} else {
		for _, i := range indices {
			count(int(i))
		}
	}
	// Γ is stored as float32: its values are kept so (half the memory of
	// float64 for a whole grid's points), every sum and difference below is
	// taken in float64.
	values := make([]float32, 0, n)
	add := func(n int) {
		switch r.Status[n] {
		case NotSelected:
			s.NotSelected++
		case BelowThreshold:
			s.BelowThreshold++
		case Outside:
			s.Outside++
		case Capped:
			s.Capped++
			values = append(values, r.Gamma[n])
		case Evaluated:
			values = append(values, r.Gamma[n])
			if r.Gamma[n] <= 1 {
				s.Passed++
			}
		}
	}
	if all {
		for n := range r.Status {
			add(n)
		}
	} else {
		for _, n := range indices {
			add(int(n))
		}
	}
	s.Evaluated = len(values)
	s.Failed = s.Evaluated - s.Passed
	fillDistribution(&s, values)
	return s
}

func fillDistribution(s *Stats, values []float32) {
	nan := math.NaN()
	s.PassRate, s.Mean, s.Median, s.P95, s.P99, s.Max, s.AboveOneHalf = nan, nan, nan, nan, nan, nan, nan
	if len(values) == 0 {
		return
	}
	sum, above, mx := 0.0, 0, float64(values[0])
	for _, v32 := range values {
		v := float64(v32)
		sum += v
		if v > 1.5 {
			above++
		}
		mx = math.Max(mx, v)
	}
	n := float64(len(values))
	s.PassRate = 100 * float64(s.Passed) / n
	s.Mean = sum / n
	// Order statistics by selection, O(n), rather than a full sort; the
	// values are reordered, which changes nothing else here.
	s.Median = percentileSelect(values, 50)
	s.P95 = percentileSelect(values, 95)
	s.P99 = percentileSelect(values, 99)
	s.Max = mx
	s.AboveOneHalf = 100 * float64(above) / n
}

// percentileSelect returns Percentile(sorted(v), p) without sorting v: it
// selects the two order statistics the linear interpolation needs
// (Hyndman and Fan definition 7). v is reordered.
func percentileSelect(v []float32, p float64) float64 {
	h := (float64(len(v)) - 1) * p / 100
	lo := int(math.Floor(h))
	a := float64(selection.Kth(v, lo))
	if lo >= len(v)-1 {
		return a
	}
	// After selection, the elements above position lo are ≥ a; the next
	// order statistic is their minimum.
	b := v[lo+1]
	for _, x := range v[lo+1:] {
		if x < b {
			b = x
		}
	}
	return a + (h-float64(lo))*(float64(b)-a)
}

// Percentile returns the p-th percentile (0–100) of sorted values,
// interpolating linearly between order statistics (Hyndman and Fan,
// Am Stat 50 (1996) 361, definition 7; numpy.percentile's default).
// It returns NaN for no values.
func Percentile(sorted []float64, p float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	h := (float64(len(sorted)) - 1) * p / 100
	lo := int(math.Floor(h))
	if lo >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	return sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
}
