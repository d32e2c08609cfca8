package selection

import (
	"cmp"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestRadixAgainstSort: for keys with ties, spread over many buckets or
// crowded into one, with whole and fractional weights, Key returns the
// smallest key whose cumulative weight, summed over the keys sorted by the
// standard library, reaches each threshold; a pass made in shards and
// merged gives the same keys.
func TestRadixAgainstSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	type kw struct {
		k uint32
		w float64
	}
	for trial := 0; trial < 60; trial++ {
		n := 1 + rng.IntN(3000)
		v := make([]kw, n)
		for i := range v {
			switch trial % 3 {
			case 0:
				v[i].k = rng.Uint32()
			case 1:
				v[i].k = 0x4242_0000 | uint32(rng.IntN(300)) // one bucket, ties
			default:
				v[i].k = uint32(rng.IntN(50)) << 20 // a few buckets, ties
			}
			v[i].w = 1
			if trial%2 == 1 {
				v[i].w = float64(1+rng.IntN(8)) / 8
			}
		}
		sorted := slices.Clone(v)
		slices.SortFunc(sorted, func(a, b kw) int { return cmp.Compare(a.k, b.k) })
		total := 0.0
		for _, x := range v {
			total += x.w
		}
		want := func(t float64) (uint32, bool) {
			cum := 0.0
			for _, x := range sorted {
				if cum += x.w; cum >= t {
					return x.k, true
				}
			}
			return 0, false
		}
		// feed gives every key to all, and the first split of them to
		// first, the rest to rest.
		feed := func(all, first, rest func(uint32, float64), split int) {
			for i, x := range v {
				all(x.k, x.w)
				if i < split {
					first(x.k, x.w)
				} else {
					rest(x.k, x.w)
				}
			}
		}
		whole, parts, half := NewRadix(), NewRadix(), NewRadix()
		feed(whole.Add, parts.Add, half.Add, n/2)
		parts.Merge(half)
		thresholds := []float64{0, 1e-9, 0.5, 1, total / 2, total * 0.95, total, total + 1, float64(rng.IntN(n + 1))}
		var handles, partHandles []int
		for _, th := range thresholds {
			handles = append(handles, whole.Want(th))
			partHandles = append(partHandles, parts.Want(th))
		}
		shard := parts.Shard()
		feed(whole.AddLow, shard.AddLow, parts.AddLow, n/3)
		parts.MergeLow(shard)
		for j, th := range thresholds {
			k, ok := want(th)
			if ok != (handles[j] >= 0) || ok != (partHandles[j] >= 0) {
				t.Fatalf("trial %d, threshold %g of %g: handles %d, %d; reached %v", trial, th, total, handles[j], partHandles[j], ok)
			}
			if !ok {
				continue
			}
			if got := whole.Key(handles[j]); got != k {
				t.Fatalf("trial %d, threshold %g: key %#x, want %#x", trial, th, got, k)
			}
			if got := parts.Key(partHandles[j]); got != k {
				t.Fatalf("trial %d, threshold %g: key %#x from parts, want %#x", trial, th, got, k)
			}
		}
		// The next trials take these arrays again (Release).
		for _, s := range []*Radix{whole, parts, half, shard} {
			s.Release()
		}
	}
}

// TestRadixReleased: the count arrays a released Radix hands back come
// out of NewRadix, Want and Shard zeroed.
func TestRadixReleased(t *testing.T) {
	for round := 0; round < 4; round++ {
		s := NewRadix()
		for b := range s.hist {
			if s.hist[b] != 0 {
				t.Fatalf("round %d: a new Radix has count %g in bucket %d", round, s.hist[b], b)
			}
		}
		for k := uint32(0); k < 1<<20; k += 997 {
			s.Add(k*4099, 1)
		}
		s.Want(100)
		o := s.Shard()
		for _, r := range []*Radix{s, o} {
			for b, l := range r.low {
				for i, v := range l {
					if v != 0 {
						t.Fatalf("round %d: bucket %d's second digit %d starts at %g", round, b, i, v)
					}
				}
			}
		}
		for k := uint32(0); k < 1<<20; k += 997 {
			s.AddLow(k*4099, 1)
			o.AddLow(k*4099, 1)
		}
		o.Release()
		s.Release()
	}
}

// TestAscendingKey: the keys order float32s as the floats are ordered
// (−0 before +0), and FloatOfKey gives each back bit for bit.
func TestAscendingKey(t *testing.T) {
	vals := []float32{float32(math.Inf(-1)), -math.MaxFloat32, -2, -1e-45, float32(math.Copysign(0, -1)), 0, 1e-45, 2, math.MaxFloat32, float32(math.Inf(1))}
	for i, v := range vals {
		if back := FloatOfKey(AscendingKey(v)); math.Float32bits(back) != math.Float32bits(v) {
			t.Errorf("key of %g gives back %g", v, back)
		}
		if i > 0 && !(AscendingKey(vals[i-1]) < AscendingKey(v)) {
			t.Errorf("key of %g not before key of %g", vals[i-1], v)
		}
	}
}
