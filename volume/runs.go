package volume

import (
	"fmt"
	"iter"
	"sort"
)

// Run is the half-open range [Start, End) of Data positions of a grid.
type Run struct {
	Start, End int32
}

// Runs is a set of Data positions of a grid held as increasing, disjoint
// runs of consecutive positions, none touching the next. A region of a
// dose grid (a body outline of millions of voxels) is a few runs per row
// of voxels: 12 bytes a run instead of 4 bytes a voxel. The zero value is
// the empty set. Positions are int32: a grid that carries regions has
// fewer than 2³¹ voxels.
//
// Positions are added in increasing order ([Runs.Add], [Runs.AddRun]);
// [RunsOf] makes a set from any list.
type Runs struct {
	runs []Run
	// before[r] is the number of positions in runs[:r], for finding the
	// position of a given rank.
	before []int32
	n      int
}

// RunsOf returns the set of the positions in list, in any order, repeats
// allowed.
func RunsOf(list []int32) Runs {
	s := append([]int32(nil), list...)
	sort.Slice(s, func(a, b int) bool { return s[a] < s[b] })
	var r Runs
	for q, n := range s {
		if q == 0 || n != s[q-1] {
			r.Add(n)
		}
	}
	return r
}

// Len returns the number of positions in the set.
func (s *Runs) Len() int { return s.n }

// Runs returns the runs, increasing. The slice is the set's own: read it,
// do not change it.
func (s *Runs) Runs() []Run { return s.runs }

// Add adds position n, which must be greater than every position in the
// set (it panics otherwise: a caller's error, not an input's).
func (s *Runs) Add(n int32) { s.AddRun(n, n+1) }

// AddRun adds the positions [start, end), which must all be greater than
// every position in the set (it panics otherwise). An empty range adds
// nothing.
func (s *Runs) AddRun(start, end int32) {
	if end <= start {
		return
	}
	if k := len(s.runs); k > 0 {
		last := &s.runs[k-1]
		switch {
		case start < last.End:
			panic(fmt.Sprintf("volume: Runs.AddRun(%d, %d) after position %d: positions must increase", start, end, last.End-1))
		case start == last.End:
			last.End = end
			s.n += int(end - start)
			return
		}
	}
	s.runs = append(s.runs, Run{start, end})
	s.before = append(s.before, int32(s.n))
	s.n += int(end - start)
}

// Trim gives back spare room in the set's lists (once built, for a set
// kept long).
func (s *Runs) Trim() {
	if cap(s.runs) > len(s.runs)+len(s.runs)/32 {
		s.runs = exactCopy(s.runs)
		s.before = exactCopy(s.before)
	}
}

// Contains reports whether position n is in the set.
func (s *Runs) Contains(n int32) bool {
	r := sort.Search(len(s.runs), func(r int) bool { return s.runs[r].End > n })
	return r < len(s.runs) && s.runs[r].Start <= n
}

// All yields the positions, increasing.
func (s *Runs) All() iter.Seq[int32] {
	return func(yield func(int32) bool) {
		for _, r := range s.runs {
			for n := r.Start; n < r.End; n++ {
				if !yield(n) {
					return
				}
			}
		}
	}
}

// Ranked yields the positions of ranks lo to hi−1 (rank 0 is the smallest
// position) as runs, increasing: the set's runs, the first and last cut to
// the ranks. It lets the set be split into parts of equal counts.
func (s *Runs) Ranked(lo, hi int) iter.Seq[Run] {
	return func(yield func(Run) bool) {
		lo, hi = max(lo, 0), min(hi, s.n)
		if lo >= hi {
			return
		}
		// The last run that starts at or before rank lo.
		r := sort.Search(len(s.runs), func(r int) bool { return int(s.before[r]) > lo }) - 1
		for ; r < len(s.runs) && int(s.before[r]) < hi; r++ {
			run, b := s.runs[r], int(s.before[r])
			if e := b + int(run.End-run.Start); e > hi {
				run.End -= int32(e - hi)
			}
			if b < lo {
				run.Start += int32(lo - b)
			}
			if !yield(run) {
				return
			}
		}
	}
}

// Union returns the positions in a or in b.
func Union(a, b *Runs) Runs {
	var out Runs
	i, j := 0, 0
	for i < len(a.runs) || j < len(b.runs) {
		var r Run
		if j == len(b.runs) || (i < len(a.runs) && a.runs[i].Start <= b.runs[j].Start) {
			r = a.runs[i]
			i++
		} else {
			r = b.runs[j]
			j++
		}
		if k := len(out.runs); k > 0 && r.Start <= out.runs[k-1].End {
			// Overlapping or touching the last run: extend it.
			if r.End > out.runs[k-1].End {
				out.n += int(r.End - out.runs[k-1].End)
				out.runs[k-1].End = r.End
			}
			continue
		}
		out.AddRun(r.Start, r.End)
	}
	return out
}

// exactCopy returns a copy of s with no spare capacity.
func exactCopy[E any](s []E) []E {
	t := make([]E, len(s))
	copy(t, s)
	return t
}
