package analysis

import (
	"math"
	"runtime"
	"testing"

	"voxgamma/internal/benchcase"
)

// TestDoseMeansParts: the check of the doses' ratio, made in fixed parts on
// the cores, gives the same bits whatever their number, and the means a
// direct pass over the high-dose points gives (to 1e-12; the sums run in
// another order), over the sweep generator's 64 × 64 × 40 failing case
// (three parts of the grid and a bit).
func TestDoseMeansParts(t *testing.T) {
	size := benchcase.Size{64, 64, 40}
	ref, err := benchcase.Reference(size)
	if err != nil {
		t.Fatal(err)
	}
	eval, err := benchcase.Evaluated(size, benchcase.Variants[2], 2026)
	if err != nil {
		t.Fatal(err)
	}
	p := &Prepared{Loaded: &Loaded{Reference: ref, Evaluated: eval}}

	peak, _ := ref.Max()
	var sr, se float64
	var n int
	for i, r := range ref.Data {
		if r < float32(ScaleSample)*peak {
			continue
		}
		x, y, z := ref.IJK(i)
		if e, ok := eval.Sample(ref.WorldOf(x, y, z)); ok {
			sr, se, n = sr+float64(r), se+float64(float32(e)), n+1
		}
	}
	if n == 0 {
		t.Fatal("no high-dose point")
	}

	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	var first [3]float64
	for k, procs := range []int{1, 2, 3, 8} {
		runtime.GOMAXPROCS(procs)
		mr, me, m := p.doseMeans()
		if m != n || math.Abs(mr-sr/float64(n)) > 1e-12*mr || math.Abs(me-se/float64(n)) > 1e-12*me {
			t.Fatalf("%d cores: means %.17g, %.17g over %d points; direct %.17g, %.17g over %d", procs, mr, me, m, sr/float64(n), se/float64(n), n)
		}
		got := [3]float64{mr, me, float64(m)}
		if k == 0 {
			first = got
		} else if got != first {
			t.Fatalf("%d cores: %v, one core %v", procs, got, first)
		}
	}
}
