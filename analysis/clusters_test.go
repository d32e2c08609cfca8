package analysis

import (
	"math/rand/v2"
	"testing"
)

// TestFailingLabelsSlot: each failing point's slot is the number of failing
// points before it (counted directly), other points have none, for counts
// on and off a word's boundary.
func TestFailingLabelsSlot(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 7))
	for _, count := range []int{1, 63, 64, 65, 1000, 4097} {
		fail := make([]bool, count)
		for n := range fail {
			fail[n] = rng.IntN(3) == 0
		}
		fl := newFailingLabels(count, func(n int) bool { return fail[n] })
		before := 0
		for n := range fail {
			sl, ok := fl.slot(n)
			if ok != fail[n] || (ok && sl != before) {
				t.Fatalf("count %d: point %d: slot %d, %v; want %d, %v", count, n, sl, ok, before, fail[n])
			}
			if fail[n] {
				before++
			}
		}
		if len(fl.label) != before {
			t.Fatalf("count %d: %d labels for %d failing points", count, len(fl.label), before)
		}
	}
}
