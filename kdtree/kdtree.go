package kdtree

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"

	"voxgamma/internal/fault"
)

const (
	// leafSize is the largest number of points in a leaf bucket.
	leafSize = 8
	// stackSize bounds the query stack. The entries on the stack always
	// belong to distinct tree depths, and a tree of at most MaxPoints points
	// with buckets of leafSize points has fewer than 32 levels.
	stackSize = 64
	// smallSelect is the range length below which selection switches to an
	// insertion sort.
	smallSelect = 16
	// parallelMin is the smallest subtree Build hands to another goroutine.
	parallelMin = 1 << 16
)

// MaxPoints is the largest number of points a Tree can hold (2³¹-1): original
// indices are stored as int32. Build panics above it.
const MaxPoints = math.MaxInt32

// point holds the coordinates (x, y, z, dose) of one point in tree order.
type point [4]float32

// Tree is a static 4-D k-d tree stored in flat slices.
//
// The zero value is an empty tree. A Tree is immutable after Build and may be
// queried concurrently.
type Tree struct {
	n    int     // number of points given to Build, including those with NaN coordinates
	pts  []point // coordinates of the points without NaN, permuted into tree order
	idx  []int32 // idx[i] is the original index of pts[i]
	axis []uint8 // axis[mid] is the split axis of the internal node whose median is at mid
}

// stackEntry is a pending subtree [lo, hi) with the per-axis offsets from the
// query to the region known to contain it (a lower bound on each distance
// component of its points).
type stackEntry struct {
	lo, hi int
	off    [4]float64
}

// Build builds a tree over n = len(coords)/4 points; coords[4*i : 4*i+4] is
// point i (x, y, z, dose).
//
// doseWeightHint is the dose-axis weight used only to choose split axes (the
// spread of the dose axis is compared after multiplying by it); queries may use
// any weight, but are fastest when their weight is close to the hint. Build
// copies what it needs: coords is neither modified nor retained. n may be 0.
// Points with a NaN coordinate count in Len but are left out of the tree, as
// no query can ever return them. For large inputs Build uses up to GOMAXPROCS
// goroutines; the tree does not depend on their number or scheduling.
//
// Build panics if len(coords)%4 != 0, or if n exceeds MaxPoints.
func Build(coords []float32, doseWeightHint float64) *Tree {
	n := pointCount(len(coords))
	return BuildFunc(n, func(i int) [4]float32 { return [4]float32(coords[4*i : 4*i+4]) }, doseWeightHint)
}

// BuildFunc is Build over the n points at(0) … at(n−1) (x, y, z, dose),
// each asked for once, in order: a caller that can compute its points
// saves holding them twice while the tree is built. It panics if n exceeds
// MaxPoints.
func BuildFunc(n int, at func(i int) [4]float32, doseWeightHint float64) *Tree {
	if n < 0 || n > MaxPoints {
		panic(fmt.Sprintf("kdtree: Build: %d points, want 0 to %d (MaxPoints)", n, MaxPoints))
	}
	t := &Tree{n: n, pts: make([]point, n), idx: make([]int32, n)}
	// Points with a NaN coordinate have a NaN distance to every query and
	// can never be returned: leave them out of the tree.
	m := 0
	for i := range n {
		p := point(at(i))
		if p[0] != p[0] || p[1] != p[1] || p[2] != p[2] || p[3] != p[3] {
			continue
		}
		t.pts[m], t.idx[m] = p, int32(i)
		m++
	}
	if m < n {
		t.pts = slices.Clip(t.pts[:m])
		t.idx = slices.Clip(t.idx[:m])
	}
	if m > leafSize {
		t.axis = make([]uint8, m)
		b := &builder{t: t, hint: math.Abs(doseWeightHint)}
		if p := runtime.GOMAXPROCS(0); p > 1 && m >= 2*parallelMin {
			b.sem = make(chan struct{}, p-1)
		}
		b.build(0, m)
		b.wg.Wait()
		if b.fault != nil {
			panic(b.fault)
		}
	}
	return t
}

// pointCount returns the number of points in a coordinate slice of length
// l, and panics if l is not a multiple of 4 or the count exceeds MaxPoints.
func pointCount(l int) int {
	if l%4 != 0 {
		panic(fmt.Sprintf("kdtree: Build: len(coords) = %d is not a multiple of 4", l))
	}
	n := l / 4
	if n > MaxPoints {
		panic(fmt.Sprintf("kdtree: Build: %d points exceed the limit of %d (MaxPoints)", n, MaxPoints))
	}
	return n
}

// builder holds the state shared by the goroutines of one Build.
type builder struct {
	t    *Tree
	hint float64
	sem  chan struct{} // one token per extra goroutine allowed; nil for a serial build
	wg   sync.WaitGroup
	// fault is the first panic of a helper goroutine, raised again in the
	// caller's goroutine once all helpers are done: a panic in a goroutine
	// of its own would end the process, whatever the caller recovers.
	faultOnce sync.Once
	fault     any
}

// build organises the range [lo, hi) of t.pts into a subtree. Large left
// subtrees are handed to another goroutine while a token is free; the
// result does not depend on the scheduling, since subtrees are disjoint and
// the selection is deterministic.
func (b *builder) build(lo, hi int) {
	t := b.t
	for hi-lo > leafSize {
		a := splitAxis(t.pts[lo:hi], b.hint)
		mid := lo + (hi-lo)/2
		selectNth(t.pts[lo:hi], t.idx[lo:hi], mid-lo, a)
		t.axis[mid] = uint8(a)
		if b.sem != nil && mid-lo >= parallelMin {
			select {
			case b.sem <- struct{}{}:
				b.wg.Add(1)
				go func(lo, hi int) {
					defer b.wg.Done()
					defer func() {
						if r := recover(); r != nil {
							b.faultOnce.Do(func() { b.fault = r })
						}
						<-b.sem
					}()
					fault.Point(fault.KDTreeHelper)
					b.build(lo, hi)
				}(lo, mid)
				lo = mid + 1
				continue
			default:
			}
		}
		b.build(lo, mid)
		lo = mid + 1
	}
}

// splitAxis returns the axis of largest spread of pts, the dose spread being
// multiplied by hint. Ties go to the lower axis. pts holds no NaN.
func splitAxis(pts []point, hint float64) int {
	p := &pts[0]
	mn0, mn1, mn2, mn3 := p[0], p[1], p[2], p[3]
	mx0, mx1, mx2, mx3 := mn0, mn1, mn2, mn3
	for i := 1; i < len(pts); i++ {
		p := &pts[i]
		v0, v1, v2, v3 := p[0], p[1], p[2], p[3]
		if v0 < mn0 {
			mn0 = v0
		} else if v0 > mx0 {
			mx0 = v0
		}
		if v1 < mn1 {
			mn1 = v1
		} else if v1 > mx1 {
			mx1 = v1
		}
		if v2 < mn2 {
			mn2 = v2
		} else if v2 > mx2 {
			mx2 = v2
		}
		if v3 < mn3 {
			mn3 = v3
		} else if v3 > mx3 {
			mx3 = v3
		}
	}
	spread := [4]float64{
		float64(mx0) - float64(mn0),
		float64(mx1) - float64(mn1),
		float64(mx2) - float64(mn2),
		(float64(mx3) - float64(mn3)) * hint,
	}
	// With infinite coordinates a spread may be NaN; prefer any number.
	best := 0
	for k := 1; k < 4; k++ {
		if s, b := spread[k], spread[best]; s > b || (b != b && s == s) {
			best = k
		}
	}
	return best
}

// selectNth rearranges pts (and idx alongside) so that pts[k] holds the value
// that would be at position k if pts were sorted along axis a, every element
// before k is not greater and every element after k is not smaller (pts
// holds no NaN). It is the selection algorithm of Floyd and Rivest (Commun.
// ACM 18 (1975) 173): expected time linear, about n + min(k, n-k)
// comparisons, pivots chosen by recursively selecting in a sample around k.
func selectNth(pts []point, idx []int32, k, a int) {
	floydRivest(pts, idx, 0, len(pts)-1, k, a)
}

func floydRivest(pts []point, idx []int32, left, right, k, a int) {
	for right-left >= smallSelect {
		if right-left > 600 {
			// Select within a sample of size s around k first, so that
			// pts[k] becomes a pivot close to the target rank.
			n := float64(right - left + 1)
			i := float64(k - left + 1)
			z := math.Log(n)
			s := 0.5 * math.Exp(2*z/3)
			sd := 0.5 * math.Sqrt(z*s*(n-s)/n)
			if i < n/2 {
				sd = -sd
			}
			newLeft := max(left, int(float64(k)-i*s/n+sd))
			newRight := min(right, int(float64(k)+(n-i)*s/n+sd))
			floydRivest(pts, idx, newLeft, newRight, k, a)
		}
		t := pts[k][a]
		i, j := left, right
		swap(pts, idx, left, k)
		if pts[right][a] > t {
			swap(pts, idx, right, left)
		}
		// Now pts[left] <= t <= pts[right] serve as sentinels.
		for i < j {
			swap(pts, idx, i, j)
			i++
			j--
			for pts[i][a] < t {
				i++
			}
			for pts[j][a] > t {
				j--
			}
		}
		if pts[left][a] == t {
			swap(pts, idx, left, j)
		} else {
			j++
			swap(pts, idx, j, right)
		}
		// pts[j] == t is in its final place.
		if j <= k {
			left = j + 1
		}
		if k <= j {
			right = j - 1
		}
	}
	// Insertion sort of the small remaining range.
	for i := left + 1; i <= right; i++ {
		p, x := pts[i], idx[i]
		j := i
		for j > left && p[a] < pts[j-1][a] {
			pts[j], idx[j] = pts[j-1], idx[j-1]
			j--
		}
		pts[j], idx[j] = p, x
	}
}

func swap(pts []point, idx []int32, i, j int) {
	pts[i], pts[j] = pts[j], pts[i]
	idx[i], idx[j] = idx[j], idx[i]
}

// Len returns the number of points.
func (t *Tree) Len() int {
	return t.n
}

// dist2 returns the squared distance between p and q under dose weight w,
// rounding every operation to float64 (the conversions forbid fused
// multiply-adds), so the result is reproducible and pruning bounds computed
// by bound never exceed it.
func dist2(p *point, q *[4]float64, w float64) float64 {
	d0 := float64(p[0]) - q[0]
	d1 := float64(p[1]) - q[1]
	d2 := float64(p[2]) - q[2]
	d3 := w * (float64(p[3]) - q[3])
	return float64(d0*d0) + float64(d1*d1) + float64(d2*d2) + float64(d3*d3)
}

// bound returns a lower bound on dist2 of every point in a region whose
// per-axis offsets from the query are off. It evaluates the same expression
// as dist2 with |off[k]| <= |component k|, so by monotonicity of rounding it
// is never larger than the dist2 of any point of the region.
func bound(off *[4]float64) float64 {
	return float64(off[0]*off[0]) + float64(off[1]*off[1]) + float64(off[2]*off[2]) + float64(off[3]*off[3])
}

// split returns, for the internal node with median mid, its split axis, the
// near and far child ranges for query q, and the weighted offset of q from the
// split plane.
func (t *Tree) split(lo, mid, hi int, q *[4]float64, w float64) (a int, nlo, nhi, flo, fhi int, diff float64) {
	a = int(t.axis[mid])
	s := float64(t.pts[mid][a])
	diff = q[a] - s
	if a == 3 {
		diff = w * diff
	}
	if q[a] < s {
		return a, lo, mid, mid + 1, hi, diff
	}
	return a, mid + 1, hi, lo, mid, diff
}

// Nearest returns the index (into the original coords order) of the point
// nearest to q under dose weight w, and its squared distance, considering only
// points with squared distance < maxDist2 (pass math.Inf(1) for no limit). ok
// is false when no point qualifies (empty tree or none inside maxDist2); idx is
// then -1 and dist2 is +Inf.
//
// Ties: among points at exactly equal distance, the smallest original index
// wins (deterministic).
//
// Nearest does not allocate.
func (t *Tree) Nearest(q [4]float64, w float64, maxDist2 float64) (idx int, dist2 float64, ok bool) {
	n := len(t.pts)
	if n == 0 || !(maxDist2 > 0) {
		return -1, math.Inf(1), false
	}
	best := maxDist2
	bestIdx := int32(-1) // -1 while nothing qualifies; then best is maxDist2
	var stack [stackSize]stackEntry
	stack[0] = stackEntry{lo: 0, hi: n}
	sp := 1
	for sp > 0 {
		sp--
		lo, hi, off := stack[sp].lo, stack[sp].hi, stack[sp].off
		// Prune unless the region may hold a point closer than best, or one
		// as close with a smaller index. The comparisons are false for NaN,
		// which never prunes.
		if b := bound(&off); b > best || (b == best && bestIdx < 0) {
			continue
		}
		for hi-lo > leafSize {
			mid := lo + (hi-lo)/2
			if d := dist2Of(t, mid, &q, w); d < best || (d == best && t.idx[mid] < bestIdx) {
				best, bestIdx = d, t.idx[mid]
			}
			a, nlo, nhi, flo, fhi, diff := t.split(lo, mid, hi, &q, w)
			far := off
			far[a] = diff
			if b := bound(&far); !(b > best || (b == best && bestIdx < 0)) {
				stack[sp] = stackEntry{lo: flo, hi: fhi, off: far}
				sp++
			}
			lo, hi = nlo, nhi
		}
		for i := lo; i < hi; i++ {
			if d := dist2Of(t, i, &q, w); d < best || (d == best && t.idx[i] < bestIdx) {
				best, bestIdx = d, t.idx[i]
			}
		}
	}
	if bestIdx < 0 {
		return -1, math.Inf(1), false
	}
	return int(bestIdx), best, true
}

// dist2Of returns the squared distance from the point at tree position i to q.
func dist2Of(t *Tree, i int, q *[4]float64, w float64) float64 {
	return dist2(&t.pts[i], q, w)
}

// AppendWithin appends to dst the original indices of all points with squared
// distance <= r2 under weight w, in ascending index order, and returns the
// extended slice. The elements of dst already present are left as they are;
// only the appended part is sorted. It does not allocate when dst has enough
// spare capacity (no more than Len is ever needed). A negative or NaN r2
// appends nothing.
func (t *Tree) AppendWithin(dst []int32, q [4]float64, w float64, r2 float64) []int32 {
	n := len(t.pts)
	if n == 0 || !(r2 >= 0) {
		return dst
	}
	start := len(dst)
	var stack [stackSize]stackEntry
	stack[0] = stackEntry{lo: 0, hi: n}
	sp := 1
	for sp > 0 {
		sp--
		lo, hi, off := stack[sp].lo, stack[sp].hi, stack[sp].off
		if bound(&off) > r2 {
			continue
		}
		for hi-lo > leafSize {
			mid := lo + (hi-lo)/2
			if dist2Of(t, mid, &q, w) <= r2 {
				dst = append(dst, t.idx[mid])
			}
			a, nlo, nhi, flo, fhi, diff := t.split(lo, mid, hi, &q, w)
			far := off
			far[a] = diff
			if !(bound(&far) > r2) {
				stack[sp] = stackEntry{lo: flo, hi: fhi, off: far}
				sp++
			}
			lo, hi = nlo, nhi
		}
		for i := lo; i < hi; i++ {
			if dist2Of(t, i, &q, w) <= r2 {
				dst = append(dst, t.idx[i])
			}
		}
	}
	slices.Sort(dst[start:])
	return dst
}
