package kdtree

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"testing"

	"voxgamma/internal/fault"
)

// refDist2 is the definition of the distance, written out independently of
// the package: float64 arithmetic on the float32 coordinates, each operation
// rounded (explicit conversions forbid fused multiply-adds).
func refDist2(coords []float32, i int, q [4]float64, w float64) float64 {
	p := coords[4*i : 4*i+4]
	dx := float64(p[0]) - q[0]
	dy := float64(p[1]) - q[1]
	dz := float64(p[2]) - q[2]
	dd := w * (float64(p[3]) - q[3])
	return float64(dx*dx) + float64(dy*dy) + float64(dz*dz) + float64(dd*dd)
}

// bruteNearest scans all points in index order, keeping the first strict
// minimum below maxDist2 (so ties go to the smallest index).
func bruteNearest(coords []float32, q [4]float64, w, maxDist2 float64) (int, float64, bool) {
	bi, bd := -1, math.Inf(1)
	for i := range len(coords) / 4 {
		d := refDist2(coords, i, q, w)
		if d < maxDist2 && (bi < 0 || d < bd) {
			bi, bd = i, d
		}
	}
	return bi, bd, bi >= 0
}

// bruteWithin returns, in ascending order, the indices with distance <= r2.
func bruteWithin(coords []float32, q [4]float64, w, r2 float64) []int32 {
	var out []int32
	for i := range len(coords) / 4 {
		if refDist2(coords, i, q, w) <= r2 {
			out = append(out, int32(i))
		}
	}
	return out
}

// checkQuery compares Nearest and AppendWithin with brute force for one query.
func checkQuery(t *testing.T, tr *Tree, coords []float32, q [4]float64, w, maxDist2, r2 float64, ctx string) {
	t.Helper()
	gi, gd, gok := tr.Nearest(q, w, maxDist2)
	wi, wd, wok := bruteNearest(coords, q, w, maxDist2)
	if gok != wok || gi != wi || (wok && math.Float64bits(gd) != math.Float64bits(wd)) {
		t.Fatalf("%s: Nearest(q=%v, w=%g, maxDist2=%g) = (%d, %v, %v), brute force (%d, %v, %v)",
			ctx, q, w, maxDist2, gi, gd, gok, wi, wd, wok)
	}
	if !gok && (gi != -1 || !math.IsInf(gd, 1)) {
		t.Fatalf("%s: Nearest not ok but returned (%d, %v)", ctx, gi, gd)
	}
	prefix := []int32{-7, 99}
	got := tr.AppendWithin(slices.Clone(prefix), q, w, r2)
	want := append(slices.Clone(prefix), bruteWithin(coords, q, w, r2)...)
	if !slices.Equal(got, want) {
		t.Fatalf("%s: AppendWithin(q=%v, w=%g, r2=%g) = %v (len %d), brute force %v (len %d)",
			ctx, q, w, r2, trunc(got), len(got), trunc(want), len(want))
	}
}

func trunc(s []int32) []int32 {
	if len(s) > 20 {
		return s[:20]
	}
	return s
}

// randomWeight returns a dose weight from a wide range, including 0, very
// large values and negative values (the sign must not matter).
func randomWeight(r *rand.Rand) float64 {
	switch r.IntN(8) {
	case 0:
		return 0
	case 1:
		return 1e6
	case 2:
		return -math.Exp(r.NormFloat64() * 3)
	case 3:
		return 1
	default:
		return math.Exp(r.NormFloat64() * 3)
	}
}

// randomCoords returns n points of one of several distributions.
func randomCoords(r *rand.Rand, n int) []float32 {
	c := make([]float32, 4*n)
	kind := r.IntN(4)
	for i := range n {
		p := c[4*i : 4*i+4]
		switch kind {
		case 0: // uniform
			for k := range 4 {
				p[k] = float32(r.Float64()*20 - 10)
			}
		case 1: // clustered, with a dose scale unlike the spatial one
			cl := float64(r.IntN(5))
			for k := range 3 {
				p[k] = float32(cl*3 + r.NormFloat64()*0.3)
			}
			p[3] = float32(100 * r.Float64())
		case 2: // small integer lattice: many equal distances and duplicates
			for k := range 4 {
				p[k] = float32(r.IntN(5))
			}
		case 3: // a plane of constant dose plus a few outliers
			p[0], p[1], p[2] = float32(r.Float64()*10), float32(r.Float64()*10), 0
			p[3] = 50
			if r.IntN(10) == 0 {
				p[3] = float32(r.Float64() * 100)
			}
		}
	}
	return c
}

// randomQuery returns a query near the data: random, at a point, or on a
// half-integer lattice position.
func randomQuery(r *rand.Rand, coords []float32) [4]float64 {
	var q [4]float64
	n := len(coords) / 4
	switch r.IntN(3) {
	case 0:
		if n > 0 {
			i := r.IntN(n)
			for k := range 4 {
				q[k] = float64(coords[4*i+k])
			}
			return q
		}
		fallthrough
	case 1:
		for k := range 4 {
			q[k] = r.Float64()*24 - 12
		}
	case 2:
		for k := range 4 {
			q[k] = float64(r.IntN(11)) / 2
		}
	}
	return q
}

// randomLimit returns a squared-distance limit: infinite, tiny, zero or random.
func randomLimit(r *rand.Rand) float64 {
	switch r.IntN(5) {
	case 0:
		return math.Inf(1)
	case 1:
		return 1e-9
	case 2:
		return 0
	default:
		return r.Float64() * r.Float64() * 50
	}
}

func TestRandomAgainstBruteForce(t *testing.T) {
	sizes := []int{0, 1, 2, 7, 8, 9, 17, 100, 5000}
	for seed := range uint64(200) {
		r := rand.New(rand.NewPCG(seed, 0x6b64))
		for _, n := range sizes {
			coords := randomCoords(r, n)
			tr := Build(coords, randomWeight(r))
			if tr.Len() != n {
				t.Fatalf("seed %d: Len() = %d, want %d", seed, tr.Len(), n)
			}
			nq := 30
			if n >= 5000 {
				nq = 8
			}
			for qi := range nq {
				q := randomQuery(r, coords)
				w := randomWeight(r)
				r2 := randomLimit(r)
				if n > 0 && r.IntN(3) == 0 {
					// A radius exactly at some point's distance: boundary inclusion.
					r2 = refDist2(coords, r.IntN(n), q, w)
				}
				checkQuery(t, tr, coords, q, w, randomLimit(r), r2,
					fmt.Sprintf("seed %d n %d query %d", seed, n, qi))
			}
		}
	}
}

func TestEmptyTree(t *testing.T) {
	for _, tr := range []*Tree{Build(nil, 1), Build([]float32{}, 0), {}} {
		if tr.Len() != 0 {
			t.Fatalf("Len() = %d, want 0", tr.Len())
		}
		if i, d, ok := tr.Nearest([4]float64{}, 1, math.Inf(1)); ok || i != -1 || !math.IsInf(d, 1) {
			t.Fatalf("Nearest on empty tree = (%d, %v, %v), want (-1, +Inf, false)", i, d, ok)
		}
		dst := []int32{3, 1, 2}
		got := tr.AppendWithin(dst, [4]float64{}, 1, math.Inf(1))
		if !slices.Equal(got, []int32{3, 1, 2}) || &got[0] != &dst[0] {
			t.Fatalf("AppendWithin on empty tree = %v, want dst unchanged", got)
		}
		if got := tr.AppendWithin(nil, [4]float64{}, 1, 1); got != nil {
			t.Fatalf("AppendWithin(nil) on empty tree = %v, want nil", got)
		}
	}
}

func TestOnePoint(t *testing.T) {
	coords := []float32{1, 2, 3, 40}
	tr := Build(coords, 0.5)
	q := [4]float64{1, 2, 4, 42} // d² = 1 + (0.5·2)² = 2
	if i, d, ok := tr.Nearest(q, 0.5, math.Inf(1)); !ok || i != 0 || d != 2 {
		t.Fatalf("Nearest = (%d, %v, %v), want (0, 2, true)", i, d, ok)
	}
	// The limit is strict: a point at exactly maxDist2 does not qualify.
	if i, d, ok := tr.Nearest(q, 0.5, 2); ok {
		t.Fatalf("Nearest with maxDist2 = d² returned (%d, %v, true), want not ok", i, d)
	}
	if _, _, ok := tr.Nearest(q, 0.5, math.Nextafter(2, 3)); !ok {
		t.Fatal("Nearest with maxDist2 just above d² found nothing")
	}
	// The radius is inclusive.
	if got := tr.AppendWithin(nil, q, 0.5, 2); !slices.Equal(got, []int32{0}) {
		t.Fatalf("AppendWithin(r2 = d²) = %v, want [0]", got)
	}
	if got := tr.AppendWithin(nil, q, 0.5, math.Nextafter(2, 0)); len(got) != 0 {
		t.Fatalf("AppendWithin(r2 < d²) = %v, want []", got)
	}
	// The per-query weight is used: with w = 0 only space counts.
	if _, d, _ := tr.Nearest(q, 0, math.Inf(1)); d != 1 {
		t.Fatalf("Nearest with w = 0: d² = %v, want 1", d)
	}
}

// shuffled returns the points of coords in a random order.
func shuffled(r *rand.Rand, coords []float32) []float32 {
	n := len(coords) / 4
	out := make([]float32, 0, len(coords))
	for _, i := range r.Perm(n) {
		out = append(out, coords[4*i:4*i+4]...)
	}
	return out
}

func TestLatticeTies(t *testing.T) {
	// A 10×10×10 lattice with dose on a 3-level lattice: queries at lattice
	// and half-lattice positions have many points at exactly equal distance.
	var coords []float32
	for x := range 10 {
		for y := range 10 {
			for z := range 10 {
				coords = append(coords, float32(x), float32(y), float32(z), float32((x+2*y+z)%3))
			}
		}
	}
	r := rand.New(rand.NewPCG(1, 2))
	for rep := range 4 {
		c := coords
		if rep > 0 {
			c = shuffled(r, coords)
		}
		for _, hint := range []float64{0, 1, 10} {
			tr := Build(c, hint)
			for qi := range 300 {
				var q [4]float64
				for k := range 4 {
					q[k] = float64(r.IntN(23)-1) / 2
				}
				w := []float64{0, 0.5, 1, 2}[r.IntN(4)]
				r2 := float64(r.IntN(12)) / 4
				checkQuery(t, tr, c, q, w, []float64{math.Inf(1), 1, 0.25, 2}[r.IntN(4)], r2,
					fmt.Sprintf("lattice rep %d hint %g query %d", rep, hint, qi))
			}
		}
	}
}

func TestTieBreakSmallestIndex(t *testing.T) {
	// Points symmetric about the query: the 2·n points at distance 1 are
	// placed so that the smallest index is deep inside the tree order.
	r := rand.New(rand.NewPCG(3, 4))
	for rep := range 50 {
		n := 1 + r.IntN(300)
		var coords []float32
		for range n {
			k := r.IntN(4)
			var p [4]float32
			p[k] = 1
			coords = append(coords, p[:]...)
			p[k] = -1
			coords = append(coords, p[:]...)
			// Farther filler points.
			p = [4]float32{float32(r.Float64()*10 + 2), float32(r.Float64()*10 - 5), 3, 0}
			coords = append(coords, p[:]...)
		}
		c := shuffled(r, coords)
		tr := Build(c, 1)
		i, d, ok := tr.Nearest([4]float64{}, 1, math.Inf(1))
		wi, _, _ := bruteNearest(c, [4]float64{}, 1, math.Inf(1))
		if !ok || d != 1 || i != wi {
			t.Fatalf("rep %d: Nearest = (%d, %v, %v), want (%d, 1, true)", rep, i, d, ok, wi)
		}
		// Among all points at distance 1, wi must be the smallest index.
		for j := range wi {
			if refDist2(c, j, [4]float64{}, 1) == 1 {
				t.Fatalf("rep %d: point %d < %d is also at distance 1", rep, j, wi)
			}
		}
	}
}

func TestDuplicates(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	// Many duplicates of a few distinct points.
	distinct := []float32{0, 0, 0, 1, 1, 0, 0, 1, 0, 1, 0, 2, 3, 3, 3, 3}
	var coords []float32
	for range 3000 {
		j := r.IntN(len(distinct) / 4)
		coords = append(coords, distinct[4*j:4*j+4]...)
	}
	tr := Build(coords, 1)
	for qi := range 200 {
		q := randomQuery(r, coords)
		checkQuery(t, tr, coords, q, randomWeight(r), randomLimit(r), float64(r.IntN(8))/2,
			fmt.Sprintf("duplicates query %d", qi))
	}

	// All points identical.
	same := make([]float32, 4*1000)
	for i := range 1000 {
		copy(same[4*i:], []float32{2, -1, 0.5, 7})
	}
	tr = Build(same, 1)
	q := [4]float64{2, -1, 0.5, 8}
	if i, d, ok := tr.Nearest(q, 1, math.Inf(1)); !ok || i != 0 || d != 1 {
		t.Fatalf("identical points: Nearest = (%d, %v, %v), want (0, 1, true)", i, d, ok)
	}
	got := tr.AppendWithin(nil, q, 1, 1)
	if len(got) != 1000 {
		t.Fatalf("identical points: AppendWithin returned %d indices, want 1000", len(got))
	}
	for i, v := range got {
		if v != int32(i) {
			t.Fatalf("identical points: AppendWithin[%d] = %d, want %d", i, v, i)
		}
	}
	if got := tr.AppendWithin(nil, q, 1, 0.99); len(got) != 0 {
		t.Fatalf("identical points: AppendWithin(r2 = 0.99) returned %d indices, want 0", len(got))
	}
	for qi := range 50 {
		q := randomQuery(r, same)
		checkQuery(t, tr, same, q, randomWeight(r), randomLimit(r), r.Float64()*4,
			fmt.Sprintf("identical query %d", qi))
	}
}

func TestNaNAndInfCoordinates(t *testing.T) {
	// Points with NaN coordinates never match and must not hide the others;
	// infinite coordinates must not break pruning.
	r := rand.New(rand.NewPCG(7, 8))
	nan := float32(math.NaN())
	inf := float32(math.Inf(1))
	for rep := range 40 {
		n := 1 + r.IntN(2000)
		coords := randomCoords(r, n)
		for range r.IntN(n/4 + 1) {
			c := r.IntN(len(coords))
			switch r.IntN(3) {
			case 0, 1:
				coords[c] = nan
			case 2:
				coords[c] = inf
				if r.IntN(2) == 0 {
					coords[c] = -inf
				}
			}
		}
		tr := Build(coords, randomWeight(r))
		for qi := range 30 {
			q := randomQuery(r, coords)
			r2 := randomLimit(r)
			if r.IntN(4) == 0 {
				r2 = math.Inf(1)
			}
			checkQuery(t, tr, coords, q, randomWeight(r), randomLimit(r), r2,
				fmt.Sprintf("nan rep %d query %d", rep, qi))
		}
	}
	// A NaN query matches nothing.
	tr := Build([]float32{0, 0, 0, 0}, 1)
	if _, _, ok := tr.Nearest([4]float64{math.NaN(), 0, 0, 0}, 1, math.Inf(1)); ok {
		t.Fatal("Nearest with a NaN query found a point")
	}
	if got := tr.AppendWithin(nil, [4]float64{0, 0, 0, 0}, 1, math.NaN()); len(got) != 0 {
		t.Fatalf("AppendWithin with r2 = NaN = %v, want []", got)
	}
}

func TestLargeTree(t *testing.T) {
	if testing.Short() {
		t.Skip("large tree skipped in short mode")
	}
	r := rand.New(rand.NewPCG(9, 10))
	n := 300000
	coords := randomCoords(r, n)
	tr := Build(coords, 1)
	checkStructure(t, tr, coords)
	for qi := range 20 {
		q := randomQuery(r, coords)
		checkQuery(t, tr, coords, q, randomWeight(r), randomLimit(r), r.Float64(),
			fmt.Sprintf("large query %d", qi))
	}

	// The tree must not depend on how many goroutines built it.
	for _, procs := range []int{1, 3} {
		old := runtime.GOMAXPROCS(procs)
		other := Build(coords, 1)
		runtime.GOMAXPROCS(old)
		if !slices.Equal(other.pts, tr.pts) || !slices.Equal(other.idx, tr.idx) || !slices.Equal(other.axis, tr.axis) {
			t.Fatalf("tree built with GOMAXPROCS=%d differs from GOMAXPROCS=%d", procs, old)
		}
	}
}

// checkStructure verifies the tree invariants: idx is a permutation of the
// points without NaN coordinates, the stored coordinates are those of the
// original points, every internal node separates its children along its
// split axis, and the depth is bounded.
func checkStructure(t *testing.T, tr *Tree, coords []float32) {
	t.Helper()
	n := len(coords) / 4
	if tr.Len() != n {
		t.Fatalf("Len() = %d, want %d", tr.Len(), n)
	}
	var want []int32
	for i := range n {
		p := coords[4*i : 4*i+4]
		if !slices.ContainsFunc(p, func(v float32) bool { return v != v }) {
			want = append(want, int32(i))
		}
	}
	got := slices.Sorted(slices.Values(tr.idx))
	if !slices.Equal(got, want) {
		t.Fatalf("tree holds indices %v, want the %d points without NaN %v", trunc(got), len(want), trunc(want))
	}
	for i, o := range tr.idx {
		for k := range 4 {
			if math.Float32bits(tr.pts[i][k]) != math.Float32bits(coords[4*int(o)+k]) {
				t.Fatalf("pts[%d] = %v, original point %d = %v", i, tr.pts[i], o, coords[4*int(o):4*int(o)+4])
			}
		}
	}
	var walk func(lo, hi, depth int)
	walk = func(lo, hi, depth int) {
		if depth >= stackSize {
			t.Fatalf("tree depth %d reaches the stack size", depth)
		}
		if hi-lo <= leafSize {
			return
		}
		mid := lo + (hi-lo)/2
		a := tr.axis[mid]
		s := tr.pts[mid][a]
		for i := lo; i < mid; i++ {
			if !(tr.pts[i][a] <= s) {
				t.Fatalf("node [%d,%d) axis %d: left point %d has %v > split %v", lo, hi, a, i, tr.pts[i][a], s)
			}
		}
		for i := mid + 1; i < hi; i++ {
			if !(tr.pts[i][a] >= s) {
				t.Fatalf("node [%d,%d) axis %d: right point %d has %v < split %v", lo, hi, a, i, tr.pts[i][a], s)
			}
		}
		walk(lo, mid, depth+1)
		walk(mid+1, hi, depth+1)
	}
	walk(0, len(tr.pts), 0)
}

func TestStructure(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	for rep := range 30 {
		coords := randomCoords(r, r.IntN(3000))
		if rep%3 == 0 {
			for range 20 {
				if len(coords) > 0 {
					coords[r.IntN(len(coords))] = float32(math.NaN())
				}
			}
		}
		checkStructure(t, Build(coords, randomWeight(r)), coords)
	}
}

func TestSplitAxisUsesHint(t *testing.T) {
	// Spatial spread 10 on x, dose spread 100: with hint 1 the root splits on
	// dose, with hint 0.01 (weighted dose spread 1) it splits on x.
	var coords []float32
	for i := range 100 {
		coords = append(coords, float32(i)/10, 0, 0, float32((i*37)%101))
	}
	mid := 100 / 2
	if a := Build(coords, 1).axis[mid]; a != 3 {
		t.Fatalf("hint 1: root split axis %d, want 3", a)
	}
	if a := Build(coords, 0.01).axis[mid]; a != 0 {
		t.Fatalf("hint 0.01: root split axis %d, want 0", a)
	}
	if a := Build(coords, -1).axis[mid]; a != 3 {
		t.Fatalf("hint -1: root split axis %d, want 3 (the sign is ignored)", a)
	}
}

func TestBuildCopiesInput(t *testing.T) {
	r := rand.New(rand.NewPCG(13, 14))
	coords := randomCoords(r, 500)
	orig := slices.Clone(coords)
	tr := Build(coords, 1)
	if !slices.Equal(coords, orig) {
		t.Fatal("Build modified its input")
	}
	for i := range coords {
		coords[i] = 1e9
	}
	for qi := range 50 {
		q := randomQuery(r, orig)
		checkQuery(t, tr, orig, q, 1, math.Inf(1), 2, fmt.Sprintf("copy query %d", qi))
	}
}

func TestBuildPanics(t *testing.T) {
	for _, l := range []int{1, 2, 3, 5, 4001} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("Build with len(coords) = %d did not panic", l)
				}
			}()
			Build(make([]float32, l), 1)
		}()
	}
	// The point-count limit, checked without allocating 2³¹ points.
	if got := pointCount(4 * MaxPoints); got != MaxPoints {
		t.Fatalf("pointCount(4·MaxPoints) = %d, want %d", got, MaxPoints)
	}
	func() {
		defer func() {
			if recover() == nil {
				t.Error("pointCount above MaxPoints did not panic")
			}
		}()
		pointCount(4 * (MaxPoints + 1))
	}()
}

func TestNoAllocations(t *testing.T) {
	r := rand.New(rand.NewPCG(15, 16))
	coords := randomCoords(r, 20000)
	tr := Build(coords, 1)
	q := randomQuery(r, coords)
	var sink int
	if a := testing.AllocsPerRun(100, func() {
		i, _, _ := tr.Nearest(q, 1, math.Inf(1))
		sink += i
	}); a != 0 {
		t.Errorf("Nearest: %v allocations per call, want 0", a)
	}
	want := len(tr.AppendWithin(nil, q, 1, 4))
	if want < 2 {
		t.Fatalf("test setup: only %d points within the radius", want)
	}
	dst := make([]int32, 0, want)
	if a := testing.AllocsPerRun(100, func() {
		dst = tr.AppendWithin(dst[:0], q, 1, 4)
	}); a != 0 {
		t.Errorf("AppendWithin with pre-sized dst: %v allocations per call, want 0", a)
	}
	if len(dst) != want {
		t.Errorf("AppendWithin returned %d indices, want %d", len(dst), want)
	}
	_ = sink
}

func TestConcurrentQueries(t *testing.T) {
	r := rand.New(rand.NewPCG(17, 18))
	coords := randomCoords(r, 3000)
	tr := Build(coords, 1)
	qs := make([][4]float64, 200)
	for i := range qs {
		qs[i] = randomQuery(r, coords)
	}
	done := make(chan error, 4)
	for g := range 4 {
		go func() {
			var dst []int32
			for i, q := range qs {
				w := float64(g + 1)
				gi, gd, _ := tr.Nearest(q, w, math.Inf(1))
				wi, wd, _ := bruteNearest(coords, q, w, math.Inf(1))
				dst = tr.AppendWithin(dst[:0], q, w, 1)
				if gi != wi || gd != wd || !slices.Equal(dst, bruteWithin(coords, q, w, 1)) {
					done <- fmt.Errorf("goroutine %d query %d differs from brute force", g, i)
					return
				}
			}
			done <- nil
		}()
	}
	for range 4 {
		if err := <-done; err != nil {
			t.Error(err)
		}
	}
}

func ExampleTree_Nearest() {
	// Three points (x/Δd, y/Δd, z/Δd, dose in Gy).
	coords := []float32{
		0, 0, 0, 1.0,
		1, 0, 0, 2.0,
		0, 2, 0, 1.5,
	}
	tr := Build(coords, 1)
	q := [4]float64{0.9, 0, 0, 1.0}

	// With ΔD = 2 Gy (w = 0.5) point 1 is nearest: 0.1² + (0.5·1)² = 0.26.
	i, d2, ok := tr.Nearest(q, 0.5, math.Inf(1))
	fmt.Printf("w=0.5: point %d, d²=%.4f, ok=%v\n", i, d2, ok)

	// With ΔD = 0.2 Gy (w = 5) the dose difference dominates: point 0, 0.9² = 0.81.
	i, d2, ok = tr.Nearest(q, 5, math.Inf(1))
	fmt.Printf("w=5:   point %d, d²=%.4f, ok=%v\n", i, d2, ok)

	// Nothing within gamma 0.5 (d² < 0.25) at w = 5.
	_, _, ok = tr.Nearest(q, 5, 0.25)
	fmt.Println("within 0.25:", ok)

	// All points within d² <= 1 at w = 0.5.
	fmt.Println(tr.AppendWithin(nil, q, 0.5, 1))
	// Output:
	// w=0.5: point 1, d²=0.2600, ok=true
	// w=5:   point 0, d²=0.8100, ok=true
	// within 0.25: false
	// [0 1]
}

// TestHelperPanicReachesCaller: a panic in a helper goroutine of Build would
// end the process whatever the caller recovers (issue 11, item 9); Build
// raises it again in the caller's goroutine, where the program's recovery
// turns it into an error. The fault is injected with internal/fault.
func TestHelperPanicReachesCaller(t *testing.T) {
	if runtime.GOMAXPROCS(0) < 2 {
		t.Skip("one CPU: Build uses no helper goroutine")
	}
	t.Cleanup(fault.SetForTest(func(site string) {
		if site == fault.KDTreeHelper {
			panic("injected")
		}
	}))
	n := 4 * parallelMin
	rng := rand.New(rand.NewPCG(1, 2))
	coords := make([]float32, 4*n)
	for i := range coords {
		coords[i] = rng.Float32()
	}
	got := func() (p any) {
		defer func() { p = recover() }()
		Build(coords, 1)
		return nil
	}()
	if got != "injected" {
		t.Fatalf("Build recovered %v in the caller, want the helper's panic", got)
	}
}
