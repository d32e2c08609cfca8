package gamma

import (
	"context"
	"runtime"
	"sync/atomic"
	"testing"

	"voxgamma/volume"
)

// The fast search over a tensor-product interpolant reads the spline only:
// once the caller has let go of the evaluated grid, its samples are
// collected during the search (the noise correction passes its denoised
// dose this way, so that it does not sit beside the engine's structures).
// Checked with a finalizer on the samples, run while the search reports
// progress; the exhaustive method reads the samples and keeps them.
func TestSearchReleasesEvaluatedSamples(t *testing.T) {
	for _, tc := range []struct {
		method  Method
		release bool
	}{{Fast, true}, {Exhaustive, false}} {
		ref := mustGrid(t, [3]int{2, 2, 1}, [3]float64{10, 10, 6}, [3]float64{2, 2, 2}, volume.Identity)
		fill(ref, func(p [3]float64) float64 { return 10 + p[0] })
		var freed atomic.Bool
		var freedDuring atomic.Bool
		prog := func(done, total int) {
			runtime.GC()
			runtime.GC() // the finalizer is queued by one cycle and run after it
			if freed.Load() {
				freedDuring.Store(true)
			}
		}
		res, err := func() (*Result, error) {
			eval := mustGrid(t, [3]int{12, 12, 6}, [3]float64{1, 0, 0}, [3]float64{2, 2, 2}, volume.Identity)
			fill(eval, func(p [3]float64) float64 { return 10 + p[0] })
			runtime.SetFinalizer(&eval.Data[0], func(*float32) { freed.Store(true) })
			c := Criteria{DosePercent: 3, DTA: 2, Normalisation: Global, ThresholdPercent: 10}
			return CompareGrids(context.Background(), ref, eval, c, Options{Method: tc.method, ExhaustiveStep: 1, Workers: 1, Progress: prog})
		}()
		if err != nil {
			t.Fatal(err)
		}
		if freedDuring.Load() != tc.release {
			t.Errorf("%v: samples collected during the search %v, want %v", tc.method, freedDuring.Load(), tc.release)
		}
		runtime.KeepAlive(res)
	}
}
