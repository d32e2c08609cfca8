package gamma

import (
	"context"
	"fmt"
	"math"
	"testing"

	"voxgamma/volume"
)

// storedAs returns the world grid w (laid out along increasing patient x, y,
// z) stored with index axis a along patient axis perm[a], in the sense
// sign[a]: one of the 48 storage orders of the same samples. Offsets may be
// irregular.
func storedAs(t testing.TB, w *volume.Grid, perm [3]int, sign [3]float64) *volume.Grid {
	t.Helper()
	wd := w.Dims()
	var dims [3]int
	var dir [3][3]float64
	var off [3][]float64
	origin := w.Origin()
	for a := 0; a < 3; a++ {
		p := perm[a]
		dims[a] = wd[p]
		dir[a][p] = sign[a]
		wo := w.Offsets(p)
		n := len(wo)
		off[a] = make([]float64, n)
		for j := range off[a] {
			if sign[a] > 0 {
				off[a][j] = wo[j]
			} else {
				off[a][j] = wo[n-1] - wo[n-1-j]
			}
		}
		if sign[a] < 0 {
			origin[p] = w.Origin()[p] + wo[n-1]
		}
	}
	g, err := volume.New(dims, origin, dir, off)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				var wi [3]int
				for a, v := range [3]int{i, j, k} {
					if sign[a] < 0 {
						v = dims[a] - 1 - v
					}
					wi[perm[a]] = v
				}
				g.Set(i, j, k, w.At(wi[0], wi[1], wi[2]))
			}
		}
	}
	// The stored grid holds the same world samples.
	for n := 0; n < 50; n++ {
		i, j, k := n%dims[0], (n*7)%dims[1], (n*3)%dims[2]
		p := g.WorldOf(i, j, k)
		v, ok := w.Sample(p)
		if !ok || math.Abs(v-float64(g.At(i, j, k))) > 1e-5 {
			t.Fatalf("storage order %v %v: voxel (%d,%d,%d) at %v is %g, the world grid has %g", perm, sign, i, j, k, p, g.At(i, j, k), v)
		}
	}
	return g
}

// TestStorageOrders checks that Γ depends on the world, never on how the
// evaluated grid is stored: all 48 storage orders of one evaluated grid (3!
// axis permutations × 2³ flips, anisotropic, and with irregular frame
// offsets) give the same Γ map to 10⁻⁶, for every interpolant. The
// reference grid is fixed; its points fall between the evaluated nodes.
func TestStorageOrders(t *testing.T) {
	base := smoothField(11)
	sharp := func(p [3]float64) float64 {
		// A smooth dose with a steep oblique edge, so that the cells'
		// diagonals matter.
		u := 0.6*p[0] - 0.48*p[1] + 0.64*p[2]
		return base(p) + 2*0.5*math.Erfc(u/2.5)
	}
	perms := [][3]int{{0, 1, 2}, {0, 2, 1}, {1, 0, 2}, {1, 2, 0}, {2, 0, 1}, {2, 1, 0}}
	for _, irregular := range []bool{false, true} {
		var w *volume.Grid
		if irregular {
			off := [3][]float64{{}, {}, {0, 1.5, 4, 5, 7.5, 9, 12, 13, 15.5}}
			for i := 0; i < 9; i++ {
				off[0] = append(off[0], float64(i)*2.5)
			}
			for i := 0; i < 8; i++ {
				off[1] = append(off[1], float64(i)*2)
			}
			var err error
			w, err = volume.New([3]int{9, 8, 9}, [3]float64{-10.3, -7.1, -7.6}, volume.Identity, off)
			if err != nil {
				t.Fatal(err)
			}
		} else {
			w = mustGrid(t, [3]int{9, 8, 7}, [3]float64{-10.3, -7.1, -7.6}, [3]float64{2.5, 2, 2.6}, volume.Identity)
		}
		fill(w, func(p [3]float64) float64 { return 1.06 * sharp([3]float64{p[0] - 1.4, p[1] + 0.6, p[2]}) })
		ref := mustGrid(t, [3]int{12, 10, 9}, [3]float64{-6.1, -4.3, -3.9}, [3]float64{1.1, 0.9, 0.95}, volume.Identity)
		fill(ref, sharp)
		for _, interp := range []Interpolation{CubicBSpline, Trilinear, LinearSimplex} {
			t.Run(fmt.Sprintf("%v irregular=%v", interp, irregular), func(t *testing.T) {
				c := Criteria{DosePercent: 3, DTA: 2, ThresholdPercent: 10, Search: 5}
				var first *Result
				orders, worst := 0, 0.0
				for _, perm := range perms {
					for flips := 0; flips < 8; flips++ {
						sign := [3]float64{1, 1, 1}
						for a := 0; a < 3; a++ {
							if flips&(1<<a) != 0 {
								sign[a] = -1
							}
						}
						eval := storedAs(t, w, perm, sign)
						res, err := CompareGrids(context.Background(), ref, eval, c, Options{Interpolation: interp})
						if err != nil {
							t.Fatal(err)
						}
						orders++
						if first == nil {
							first = res
							if res.Stats.Evaluated < 500 {
								t.Fatalf("only %d points evaluated", res.Stats.Evaluated)
							}
							continue
						}
						for i := range res.Gamma {
							if res.Status[i] != first.Status[i] {
								t.Fatalf("order %v %v: point %d status %v, first order %v", perm, sign, i, res.Status[i], first.Status[i])
							}
							if res.Status[i] != Evaluated && res.Status[i] != Capped {
								continue
							}
							d := math.Abs(float64(res.Gamma[i] - first.Gamma[i]))
							worst = math.Max(worst, d)
							if d > 1e-6 {
								t.Fatalf("order %v %v: point %d Γ = %.8f, first order %.8f", perm, sign, i, res.Gamma[i], first.Gamma[i])
							}
						}
					}
				}
				if orders != 48 {
					t.Fatalf("%d storage orders", orders)
				}
				t.Logf("48 storage orders, %d points: max |ΔΓ| = %.2g (pass rate %.2f %%)", first.Stats.Evaluated, worst, first.Stats.PassRate)
			})
		}
	}
}
