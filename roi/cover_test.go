package roi

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// TestCoverAgainstList checks a Cover (fractions of 1 implied, the others
// kept) and unionCover against the same voxels held as plain lists.
func TestCoverAgainstList(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	random := func(n int) ([]int32, []float32) {
		var idx []int32
		var fr []float32
		for i := 0; i < n; i++ {
			if rng.IntN(3) == 0 {
				continue
			}
			f := float32(1)
			if rng.IntN(3) == 0 {
				f = float32(1+rng.IntN(99)) / 100
			}
			idx, fr = append(idx, int32(i)), append(fr, f)
		}
		return idx, fr
	}
	build := func(idx []int32, fr []float32) *Cover {
		c := &Cover{}
		for q, n := range idx {
			c.add(n, fr[q])
		}
		return c
	}
	for trial := 0; trial < 200; trial++ {
		n := rng.IntN(200) // 0 gives an empty cover
		ia, fa := random(n)
		ib, fb := random(n)
		a, b := build(ia, fa), build(ib, fb)
		var gi []int32
		var gf []float32
		for p, f := range a.All() {
			gi, gf = append(gi, p), append(gf, f)
		}
		if !slices.Equal(gi, ia) || !slices.Equal(gf, fa) || a.Len() != len(ia) {
			t.Fatalf("All gives %v %v (Len %d), want %v %v", gi, gf, a.Len(), ia, fa)
		}
		want := map[int32]float32{}
		for q, p := range ia {
			want[p] = fa[q]
		}
		for q, p := range ib {
			want[p] = max(want[p], fb[q])
		}
		u := unionCover(a, b)
		keys := make([]int32, 0, len(want))
		for p := range want {
			keys = append(keys, p)
		}
		slices.Sort(keys)
		gi, gf = gi[:0], gf[:0]
		for p, f := range u.All() {
			gi, gf = append(gi, p), append(gf, f)
		}
		if !slices.Equal(gi, keys) {
			t.Fatalf("union covers %v, want %v", gi, keys)
		}
		for q, p := range gi {
			if gf[q] != want[p] {
				t.Fatalf("union fraction at %d is %g, want %g", p, gf[q], want[p])
			}
		}
	}
}
