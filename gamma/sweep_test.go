package gamma

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"voxgamma/internal/benchcase"
	"voxgamma/volume"
)

// The benchmark sweep's plan-like cases (internal/benchcase: three targets
// with 3–5 mm penumbrae, shifted, scaled, one with Monte Carlo-like noise)
// on the default interpolant, where most failing points are settled from
// their neighbour's offset and the rest through the k-d tree.

// TestSweepDeterministicAcrossWorkers checks that Γ and the status are the
// same bits for 1, 2 and 3 workers on every sweep case: the neighbour whose
// offset a point starts from is taken within the point's fixed block only.
func TestSweepDeterministicAcrossWorkers(t *testing.T) {
	size := benchcase.Size{48, 48, 30}
	if testing.Short() {
		size = benchcase.Size{32, 32, 20} // five blocks, about 7000 points evaluated
	}
	ref, err := benchcase.Reference(size)
	if err != nil {
		t.Fatal(err)
	}
	c := Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
	for _, v := range benchcase.Variants {
		eval, err := benchcase.Evaluated(size, v, 2026)
		if err != nil {
			t.Fatal(err)
		}
		var first *Result
		for _, w := range []int{1, 2, 3} {
			res, err := CompareGrids(context.Background(), ref, eval, c, Options{Workers: w})
			if err != nil {
				t.Fatal(err)
			}
			if first == nil {
				first = res
				// Points in more than one block, so that a block's
				// first points could have borrowed from another's.
				if res.Stats.Evaluated <= blockSize {
					t.Fatalf("%s: only %d points evaluated", v.Name, res.Stats.Evaluated)
				}
				continue
			}
			for i := range res.Gamma {
				if math.Float32bits(res.Gamma[i]) != math.Float32bits(first.Gamma[i]) || res.Status[i] != first.Status[i] {
					t.Fatalf("%s, %d workers: voxel %d Γ %v (%v), 1 worker %v (%v)", v.Name, w, i, res.Gamma[i], res.Status[i], first.Gamma[i], first.Status[i])
				}
			}
		}
		t.Logf("%s: %d points, pass rate %.2f %%", v.Name, first.Stats.Evaluated, first.Stats.PassRate)
	}
}

// TestSweepFastNotAboveExhaustive checks the fast search against the
// exhaustive oracle (a lattice of step DTA/10 over the search sphere, then
// finer lattices about its best positions: values the interpolant takes, so
// an upper bound of its minimum) on a sample of the failing sweep case's
// points, passing and failing: the fast Γ, certified to 10⁻⁷ of the
// interpolant's minimum, is never above the oracle's by more than that and
// float32 storage.
func TestSweepFastNotAboveExhaustive(t *testing.T) {
	if testing.Short() {
		t.Skip("exhaustive oracle is slow")
	}
	size := benchcase.Size{40, 40, 26}
	ref, err := benchcase.Reference(size)
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range benchcase.Variants {
		if v.Name == "mid" {
			continue
		}
		eval, err := benchcase.Evaluated(size, v, 2026)
		if err != nil {
			t.Fatal(err)
		}
		c := Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
		full, err := CompareGrids(context.Background(), ref, eval, c, Options{})
		if err != nil {
			t.Fatal(err)
		}
		// A sample of the evaluated points, half of them failing where
		// there are failing points.
		r := rand.New(rand.NewPCG(15, 2026))
		only := volume.NewMask(ref)
		var pass, fail []int
		for i, st := range full.Status {
			if st == Evaluated || st == Capped {
				if full.Gamma[i] > 1 {
					fail = append(fail, i)
				} else {
					pass = append(pass, i)
				}
			}
		}
		for _, set := range [][]int{pass, fail} {
			for n := 0; n < 25 && len(set) > 0; n++ {
				only.Bits[set[r.IntN(len(set))]] = true
			}
		}
		slow, err := CompareGrids(context.Background(), ref, eval, c, Options{Only: only, Method: Exhaustive})
		if err != nil {
			t.Fatal(err)
		}
		above, worst, compared, failing := math.Inf(-1), 0.0, 0, 0
		for i, in := range only.Bits {
			if !in {
				continue
			}
			if full.Status[i] != slow.Status[i] {
				t.Fatalf("%s voxel %d: status fast %v, exhaustive %v", v.Name, i, full.Status[i], slow.Status[i])
			}
			f, e := float64(full.Gamma[i]), float64(slow.Gamma[i])
			if f > e+1e-7+2e-7*e {
				t.Errorf("%s voxel %d: fast Γ %.8f above exhaustive %.8f", v.Name, i, f, e)
			}
			above = math.Max(above, f-e)
			worst = math.Max(worst, math.Abs(f-e))
			compared++
			if f > 1 {
				failing++
			}
		}
		if compared < 25 {
			t.Fatalf("%s: only %d points compared", v.Name, compared)
		}
		if v.Name == "fail" && failing < 20 {
			t.Fatalf("%s: only %d failing points compared", v.Name, failing)
		}
		t.Logf("%s: %d points (%d failing), max(fast − exhaustive) = %.2g, max |ΔΓ| = %.2g", v.Name, compared, failing, above, worst)
	}
}
