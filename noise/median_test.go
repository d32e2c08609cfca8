package noise

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestStreamMedian checks the streaming median against the median of the
// whole slice (noise's own median, itself checked against sorting here):
// the same float64, bit for bit, for odd and even counts, below and above
// the bin count, with ties, one value, a range of zero width and a
// distribution that crowds most values into one bin.
func TestStreamMedian(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 8))
	var cases [][]float64
	for _, n := range []int{1, 2, 3, medianBins - 1, medianBins, medianBins + 1, medianBins + 2, 50000, 50001} {
		uniform := make([]float64, n)
		ties := make([]float64, n)
		skewed := make([]float64, n)
		for i := range uniform {
			uniform[i] = r.Float64()
			ties[i] = float64(r.IntN(7)) / 3
			skewed[i] = math.Exp(8 * r.NormFloat64()) // most values near 0, a few huge
		}
		cases = append(cases, uniform, ties, skewed, slices.Repeat([]float64{0.75}, n))
	}
	for ci, v := range cases {
		want := median(slices.Clone(v))
		// The sort-based median, as a check of median itself.
		s := slices.Sorted(slices.Values(v))
		ref := s[len(s)/2]
		if len(s)%2 == 0 {
			ref = (s[len(s)/2-1] + s[len(s)/2]) / 2
		}
		if want != ref {
			t.Fatalf("case %d (n = %d): median %v, sorted %v", ci, len(v), want, ref)
		}
		passes := 0
		got := streamMedian(func(yield func(float64)) {
			passes++
			for _, x := range v {
				yield(x)
			}
		})
		if got != want {
			t.Fatalf("case %d (n = %d): streamMedian %v, median %v", ci, len(v), got, want)
		}
		if passes > 3 {
			t.Fatalf("case %d: %d passes over the values, want at most 3", ci, passes)
		}
	}
	if got := streamMedian(func(func(float64)) {}); !math.IsNaN(got) {
		t.Fatalf("no values: %v, want NaN", got)
	}
}
