package gamma

import (
	"math"
	"runtime"
	"slices"

	"voxgamma/internal/parallel"
	"voxgamma/internal/selection"
	"voxgamma/volume"
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
func (r *Result) StatsAll() Stats { return r.stats(nil) }

// StatsOver summarises the reference points whose positions are in set
// (none when it is empty).
func (r *Result) StatsOver(set *volume.Runs) Stats {
	if set == nil {
		set = &volume.Runs{}
	}
	return r.stats(set)
}

// statsChunk is how many points each part of the statistics covers. The
// parts are fixed whatever the worker count, and their sums are added in
// order, so the statistics do not depend on it.
const statsChunk = 1 << 16

// statsRadixFrom is the number of evaluated points from which the
// percentiles are found by a radix selection on the workers (512 kB of
// counts each) rather than by selection in place on one.
const statsRadixFrom = 1 << 16

// statsPart is what one part of the points contributes to Stats.
type statsPart struct {
	notSelected, below, outside, capped, passed, above int
	sum                                                float64 // of Γ, in float64
	max                                                float32
}

// stats summarises the points in set, or every point when set is nil, on
// the comparison's workers. Each worker takes consecutive parts of the
// points (by rank in the set), counts them, sums Γ and copies it (float32)
// into its own list; the parts' sums are added in order. The percentiles
// come from the lists: from statsRadixFrom values by a radix selection of
// Γ's float32 bits on the workers (internal/selection.Radix: the counts of
// each value of the top 16 bits, then of the low 16 bits in the buckets
// that hold the order statistics wanted), below it by selection in place
// (percentileSelect). Nothing depends on the worker count.
func (r *Result) stats(set *volume.Runs) Stats {
	n := len(r.Status)
	if set != nil {
		n = set.Len()
	}
	// ranges calls fn with the positions of ranks [lo, hi) of the points,
	// as ranges of positions: one call per run of the set.
	ranges := func(lo, hi int, fn func(a, b int)) {
		if set == nil {
			fn(lo, hi)
			return
		}
		for run := range set.Ranked(lo, hi) {
			fn(int(run.Start), int(run.End))
		}
	}
	parts := make([]statsPart, (n+statsChunk-1)/statsChunk)
	workers := r.workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	lists := make([][]float32, max(1, min(workers, len(parts))))
	parallel.Ranges(len(parts), workers, func(w, lo, hi int) {
		// The list is made to size (the statuses counted first) rather
		// than grown: growing it left twice its size to the collector.
		size := 0
		ranges(lo*statsChunk, min(n, hi*statsChunk), func(a, b int) {
			for _, st := range r.Status[a:b] {
				if st == Evaluated || st == Capped {
					size++
				}
			}
		})
		list := make([]float32, 0, size)
		for p := lo; p < hi; p++ {
			pt := statsPart{max: float32(math.Inf(-1))}
			ranges(p*statsChunk, min(n, (p+1)*statsChunk), func(a, b int) {
				list = r.addStats(a, b, &pt, list)
			})
			parts[p] = pt
		}
		lists[w] = list
	})
	var s Stats
	sum, above, mx := 0.0, 0, float32(math.Inf(-1))
	for _, pt := range parts {
		s.NotSelected += pt.notSelected
		s.BelowThreshold += pt.below
		s.Outside += pt.outside
		s.Capped += pt.capped
		s.Passed += pt.passed
		sum += pt.sum
		above += pt.above
		mx = max(mx, pt.max)
	}
	for _, l := range lists {
		s.Evaluated += len(l)
	}
	s.Failed = s.Evaluated - s.Passed
	nan := math.NaN()
	s.PassRate, s.Mean, s.Median, s.P95, s.P99, s.Max, s.AboveOneHalf = nan, nan, nan, nan, nan, nan, nan
	if s.Evaluated == 0 {
		return s
	}
	cnt := float64(s.Evaluated)
	s.PassRate = 100 * float64(s.Passed) / cnt
	s.Mean = sum / cnt
	s.Max = float64(mx)
	s.AboveOneHalf = 100 * float64(above) / cnt
	if s.Evaluated < statsRadixFrom {
		values := lists[0]
		for _, l := range lists[1:] {
			values = append(values, l...)
		}
		s.Median = percentileSelect(values, 50)
		s.P95 = percentileSelect(values, 95)
		s.P99 = percentileSelect(values, 99)
		return s
	}
	// Fewer ranges than workers leave lists that no range filled.
	lists = slices.DeleteFunc(lists, func(l []float32) bool { return l == nil })
	s.Median, s.P95, s.P99 = radixPercentiles(lists, s.Evaluated)
	return s
}

// addStats counts the points at positions [a, b) into pt and appends
// their Γ to list, which it returns.
func (r *Result) addStats(a, b int, pt *statsPart, list []float32) []float32 {
	for m := a; m < b; m++ {
		switch r.Status[m] {
		case NotSelected:
			pt.notSelected++
			continue
		case BelowThreshold:
			pt.below++
			continue
		case Outside:
			pt.outside++
			continue
		case Capped:
			pt.capped++
		case Evaluated:
			if r.Gamma[m] <= 1 {
				pt.passed++
			}
		default:
			continue
		}
		g := r.Gamma[m]
		pt.sum += float64(g)
		if g > 1.5 {
			pt.above++
		}
		pt.max = max(pt.max, g)
		list = append(list, g)
	}
	return list
}

// radixPercentiles returns the 50th, 95th and 99th percentiles (Hyndman and
// Fan definition 7) of the count values in lists, one list per worker, by
// a radix selection on as many goroutines.
func radixPercentiles(lists [][]float32, count int) (p50, p95, p99 float64) {
	sels := make([]*selection.Radix, len(lists))
	parallel.Ranges(len(lists), len(lists), func(w, _, _ int) {
		sel := selection.NewRadix()
		for _, g := range lists[w] {
			sel.Add(selection.AscendingKey(g), 1)
		}
		sels[w] = sel
	})
	sel := sels[0]
	defer sel.Release()
	for _, o := range sels[1:] {
		sel.Merge(o)
		o.Release()
	}
	// The order statistics each percentile interpolates between, ranks lo
	// and lo+1 (0-based): rank k is the smallest key whose cumulative
	// count reaches k+1.
	pcts := [3]float64{50, 95, 99}
	var h [3]float64
	var at [3][2]int
	for i, p := range pcts {
		h[i] = (float64(count) - 1) * p / 100
		lo := math.Floor(h[i])
		at[i][0] = sel.Want(lo + 1)
		at[i][1] = at[i][0]
		if int(lo)+1 < count {
			at[i][1] = sel.Want(lo + 2)
		}
	}
	shards := make([]*selection.Radix, len(lists))
	parallel.Ranges(len(lists), len(lists), func(w, _, _ int) {
		shard := sel.Shard()
		for _, g := range lists[w] {
			shard.AddLow(selection.AscendingKey(g), 1)
		}
		shards[w] = shard
	})
	for _, o := range shards {
		sel.MergeLow(o)
		o.Release()
	}
	var out [3]float64
	for i := range pcts {
		a := float64(selection.FloatOfKey(sel.Key(at[i][0])))
		b := float64(selection.FloatOfKey(sel.Key(at[i][1])))
		out[i] = a + (h[i]-math.Floor(h[i]))*(b-a)
	}
	return out[0], out[1], out[2]
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
