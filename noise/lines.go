package noise

import (
	"runtime"
	"sync"
)

// lineSet describes the lines of a grid along one index axis: every line
// has n samples, stride apart in the flat data, and starts at one of the
// starts.
type lineSet struct {
	n, stride int
	count     int
	dims      [3]int
	axis      int
}

func linesAlong(dims [3]int, axis int) lineSet {
	strides := [3]int{1, dims[0], dims[0] * dims[1]}
	return lineSet{n: dims[axis], stride: strides[axis], count: dims[0] * dims[1] * dims[2] / dims[axis], dims: dims, axis: axis}
}

// start returns the flat index of the first sample of line l (0 ≤ l <
// count): lines are numbered with the two other axes, lower axis first.
func (s lineSet) start(l int) int {
	b, c := (s.axis+1)%3, (s.axis+2)%3
	if b > c {
		b, c = c, b
	}
	strides := [3]int{1, s.dims[0], s.dims[0] * s.dims[1]}
	ib, ic := l%s.dims[b], l/s.dims[b]
	return ib*strides[b] + ic*strides[c]
}

// parallelLines calls fn for every line of s, on up to workers goroutines
// (0: GOMAXPROCS), in fixed blocks. Each call must write only its own
// line's samples, so results do not depend on scheduling. buf is scratch
// space of scratch float64s, one per goroutine.
func parallelLines(s lineSet, workers, scratch int, fn func(line int, buf []float64)) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	const block = 64
	blocks := (s.count + block - 1) / block
	workers = max(1, min(workers, blocks))
	var wg sync.WaitGroup
	next := make(chan int, blocks)
	for b := 0; b < blocks; b++ {
		next <- b
	}
	close(next)
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			buf := make([]float64, scratch)
			for b := range next {
				for l := b * block; l < min((b+1)*block, s.count); l++ {
					fn(l, buf)
				}
			}
		}()
	}
	wg.Wait()
}
