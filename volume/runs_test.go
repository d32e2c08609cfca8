package volume

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// randomList returns about n/2 distinct positions below n, in runs of
// random lengths (some of one position), increasing.
func randomList(rng *rand.Rand, n int) []int32 {
	var out []int32
	for i := 0; i < n; {
		if rng.IntN(2) == 0 {
			i += 1 + rng.IntN(5)
			continue
		}
		for l := 1 + rng.IntN(7); l > 0 && i < n; l-- {
			out = append(out, int32(i))
			i++
		}
	}
	return out
}

// TestRunsAgainstList checks every operation of Runs against the same
// set held as a plain sorted list.
func TestRunsAgainstList(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(300)
		list := randomList(rng, n)
		var s Runs
		for _, p := range list {
			s.Add(p)
		}
		if s.Len() != len(list) {
			t.Fatalf("Len %d, want %d", s.Len(), len(list))
		}
		if all := slices.Collect(s.All()); !slices.Equal(all, list) {
			t.Fatalf("All %v, want %v", all, list)
		}
		for r, run := range s.Runs() {
			if run.End <= run.Start || r > 0 && run.Start <= s.Runs()[r-1].End {
				t.Fatalf("runs %v: run %d empty, overlapping or touching the one before", s.Runs(), r)
			}
		}
		for p := int32(-1); p <= int32(n); p++ {
			_, want := slices.BinarySearch(list, p)
			if s.Contains(p) != want {
				t.Fatalf("Contains(%d) = %v, want %v", p, !want, want)
			}
		}
		// Every rank range, and its positions in order.
		for lo := -1; lo <= len(list)+1; lo++ {
			for hi := lo; hi <= len(list)+2; hi += 1 + rng.IntN(4) {
				var got []int32
				for run := range s.Ranked(lo, hi) {
					if run.End <= run.Start {
						t.Fatalf("Ranked(%d, %d) yields the empty run %v", lo, hi, run)
					}
					for p := run.Start; p < run.End; p++ {
						got = append(got, p)
					}
				}
				want := list[min(max(lo, 0), len(list)):min(max(hi, 0), len(list))]
				if !slices.Equal(got, want) {
					t.Fatalf("Ranked(%d, %d) = %v, want %v", lo, hi, got, want)
				}
			}
		}
		// Union with another set, and RunsOf of the shuffled union.
		other := randomList(rng, n)
		var o Runs
		for _, p := range other {
			o.Add(p)
		}
		merged := append(slices.Clone(list), other...)
		slices.Sort(merged)
		merged = slices.Compact(merged)
		u := Union(&s, &o)
		if got := slices.Collect(u.All()); !slices.Equal(got, merged) || u.Len() != len(merged) {
			t.Fatalf("Union %v (Len %d), want %v", got, u.Len(), merged)
		}
		shuffled := append(slices.Clone(list), other...)
		rng.Shuffle(len(shuffled), func(a, b int) { shuffled[a], shuffled[b] = shuffled[b], shuffled[a] })
		r := RunsOf(shuffled)
		if !slices.Equal(r.Runs(), u.Runs()) || r.Len() != u.Len() {
			t.Fatalf("RunsOf %v, want %v", r.Runs(), u.Runs())
		}
	}
}

// TestRunsAddOutOfOrder: adding a position not beyond the set's last is a
// caller's error and panics rather than corrupting the set.
func TestRunsAddOutOfOrder(t *testing.T) {
	var s Runs
	s.AddRun(3, 6)
	defer func() {
		if recover() == nil {
			t.Error("Add(5) after [3, 6) did not panic")
		}
	}()
	s.Add(5)
}
