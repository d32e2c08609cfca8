package parallel

import (
	"sync"
	"testing"
)

// TestRanges: for counts of items and goroutines on and off each other's
// multiples, the ranges are consecutive, non-empty, numbered in order, at
// most as many as asked for, and cover every item once.
func TestRanges(t *testing.T) {
	for _, n := range []int{0, 1, 2, 7, 64, 65, 1000} {
		for _, workers := range []int{-1, 0, 1, 2, 3, 8, 2000} {
			var mu sync.Mutex
			got := map[int][2]int{}
			Ranges(n, workers, func(w, lo, hi int) {
				mu.Lock()
				defer mu.Unlock()
				got[w] = [2]int{lo, hi}
			})
			if workers > 0 && len(got) > workers || len(got) > n {
				t.Fatalf("n %d, workers %d: %d ranges", n, workers, len(got))
			}
			next := 0
			for w := 0; w < len(got); w++ {
				r, ok := got[w]
				if !ok || r[0] != next || r[1] <= r[0] {
					t.Fatalf("n %d, workers %d: range %d is %v (have %v), want one from %d", n, workers, w, r, got, next)
				}
				next = r[1]
			}
			if next != n {
				t.Fatalf("n %d, workers %d: ranges cover [0, %d)", n, workers, next)
			}
		}
	}
}
