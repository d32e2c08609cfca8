// Package parallel splits a loop over [0, n) into consecutive ranges, one
// per goroutine. Callers that sum keep a result per fixed part of their
// data and add the parts in order afterwards, so that what they compute
// does not depend on the number of goroutines.
package parallel

import (
	"runtime"
	"sync"
)

// Ranges calls fn(w, lo, hi) for w = 0, 1, …, each on its own goroutine,
// with consecutive non-empty ranges [lo, hi) that together cover [0, n),
// and returns when all have returned. There are at most workers of them
// (workers ≤ 0: runtime.GOMAXPROCS(0)) and never more than n; w numbers
// them in the order of their ranges. Each call must write only what its
// range owns.
func Ranges(n, workers int, fn func(w, lo, hi int)) {
	if n <= 0 {
		return
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	per := (n + min(workers, n) - 1) / min(workers, n)
	var wg sync.WaitGroup
	for w, lo := 0, 0; lo < n; w, lo = w+1, lo+per {
		hi := min(n, lo+per)
		wg.Add(1)
		go func() {
			defer wg.Done()
			fn(w, lo, hi)
		}()
	}
	wg.Wait()
}
