package selection

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// TestKthAgainstSort: for every k of slices with ties, runs and random
// values, Kth returns what the standard library's sort puts at k, and
// leaves v partitioned about it.
func TestKthAgainstSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	cases := [][]float64{{5}, {2, 1}, {1, 1, 1, 1}, {3, 1, 2, 3, 1, 2}, {1, 2, 3, 4, 5, 6, 7}, {7, 6, 5, 4, 3, 2, 1}}
	for n := 0; n < 40; n++ {
		v := make([]float64, 1+rng.IntN(200))
		for i := range v {
			v[i] = float64(rng.IntN(1 + len(v)/3)) // many ties
			if n%2 == 1 {
				v[i] = rng.NormFloat64()
			}
		}
		cases = append(cases, v)
	}
	for _, c := range cases {
		want := slices.Clone(c)
		slices.Sort(want)
		for k := range c {
			v := slices.Clone(c)
			got := Kth(v, k)
			if got != want[k] || v[k] != got {
				t.Fatalf("%v: k=%d got %g (v[k] %g), sorted %g", c, k, got, v[k], want[k])
			}
			// The same values as float32 (Γ's storage type).
			v32 := make([]float32, len(c))
			for i, x := range c {
				v32[i] = float32(x)
			}
			if got := Kth(v32, k); got != slices.Sorted(slices.Values(v32))[k] {
				t.Fatalf("%v: float32 k=%d got %g", c, k, got)
			}
			for i := range v {
				if i < k && v[i] > got || i > k && v[i] < got {
					t.Fatalf("%v: k=%d not partitioned at %d: %v", c, k, i, v)
				}
			}
		}
	}
}
