package gamma

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"voxgamma/volume"
)

// TestStatsRadix: the statistics of a set large enough for the radix
// selection (statsRadixFrom points or more) against a direct computation:
// counts exact, Max and the percentiles exactly those of the sorted values
// (Percentile, Hyndman and Fan definition 7, itself checked against
// numpy's in TestPercentile), the mean to 1e-12; and the same Stats, bit
// for bit, with 1, 2, 3 and 8 workers, over every point and over a list of
// them.
func TestStatsRadix(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 3))
	for _, c := range []struct {
		name  string
		n     int
		gamma func() float32
	}{
		{"ties", 3*statsRadixFrom + 17, func() float32 { return float32(rng.IntN(40)) / 13 }},
		{"continuous", 2 * statsRadixFrom, func() float32 { return float32(2 * rng.Float64()) }},
		{"one value and zeros", statsRadixFrom + 1, func() float32 { return float32(rng.IntN(2)) * 0.75 }},
	} {
		r := &Result{Gamma: make([]float32, c.n), Status: make([]Status, c.n)}
		for i := range r.Status {
			switch v := rng.IntN(10); {
			case v == 0:
				r.Status[i], r.Gamma[i] = BelowThreshold, float32(math.NaN())
			case v == 1:
				r.Status[i], r.Gamma[i] = Outside, float32(math.NaN())
			case v == 2:
				r.Status[i], r.Gamma[i] = NotSelected, float32(math.NaN())
			case v == 3:
				r.Status[i], r.Gamma[i] = Capped, 1.5
			default:
				r.Status[i], r.Gamma[i] = Evaluated, c.gamma()
			}
		}
		var list []int32
		for i := 0; i < c.n; i += 1 + rng.IntN(2) {
			list = append(list, int32(i))
		}
		set := volume.RunsOf(list)
		for _, over := range []struct {
			name string
			idx  []int32
			all  bool
			set  *volume.Runs
		}{{"all", nil, true, nil}, {"list", list, false, &set}} {
			want := directStats(r, over.idx, over.all)
			var first Stats
			for k, w := range []int{1, 2, 3, 8} {
				r.workers = w
				got := r.stats(over.set)
				if k == 0 {
					first = got
				} else if !sameStats(got, first) {
					t.Fatalf("%s, %s: %d workers %+v, 1 worker %+v", c.name, over.name, w, got, first)
				}
			}
			if math.Abs(first.Mean-want.Mean) > 1e-12*want.Mean {
				t.Errorf("%s, %s: mean %.17g, want %.17g", c.name, over.name, first.Mean, want.Mean)
			}
			first.Mean = want.Mean
			if !sameStats(first, want) {
				t.Errorf("%s, %s: %+v, want %+v", c.name, over.name, first, want)
			}
		}
	}
}

// directStats computes Stats by sorting the values (Percentile).
func directStats(r *Result, indices []int32, all bool) Stats {
	var s Stats
	var v []float64
	visit := func(n int) {
		switch r.Status[n] {
		case NotSelected:
			s.NotSelected++
		case BelowThreshold:
			s.BelowThreshold++
		case Outside:
			s.Outside++
		case Capped:
			s.Capped++
			v = append(v, float64(r.Gamma[n]))
		case Evaluated:
			v = append(v, float64(r.Gamma[n]))
			if r.Gamma[n] <= 1 {
				s.Passed++
			}
		}
	}
	if all {
		for n := range r.Status {
			visit(n)
		}
	} else {
		for _, n := range indices {
			visit(int(n))
		}
	}
	s.Evaluated, s.Failed = len(v), len(v)-s.Passed
	sum, above := 0.0, 0
	for _, x := range v {
		sum += x
		if x > 1.5 {
			above++
		}
	}
	slices.Sort(v)
	n := float64(len(v))
	s.PassRate, s.Mean, s.Max, s.AboveOneHalf = 100*float64(s.Passed)/n, sum/n, v[len(v)-1], 100*float64(above)/n
	s.Median, s.P95, s.P99 = Percentile(v, 50), Percentile(v, 95), Percentile(v, 99)
	return s
}

// sameStats reports whether a and b are equal, float fields bit for bit.
func sameStats(a, b Stats) bool {
	fa := []float64{a.PassRate, a.Mean, a.Median, a.P95, a.P99, a.Max, a.AboveOneHalf}
	fb := []float64{b.PassRate, b.Mean, b.Median, b.P95, b.P99, b.Max, b.AboveOneHalf}
	for i := range fa {
		if math.Float64bits(fa[i]) != math.Float64bits(fb[i]) {
			return false
		}
	}
	a.PassRate, a.Mean, a.Median, a.P95, a.P99, a.Max, a.AboveOneHalf = 0, 0, 0, 0, 0, 0, 0
	b.PassRate, b.Mean, b.Median, b.P95, b.P99, b.Max, b.AboveOneHalf = 0, 0, 0, 0, 0, 0, 0
	return a == b
}
