package report

import (
	"fmt"
	"math"
	"slices"
	"testing"

	"voxgamma/volume"
)

// indexGrid returns a grid whose value at voxel (i, j, k) is
// i + 100·j + 10000·k, so that a value names its voxel.
func indexGrid(t *testing.T, dims [3]int, origin, spacing [3]float64, dir [3][3]float64) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform(dims, origin, spacing, dir)
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		i, j, k := g.IJK(n)
		g.Data[n] = float32(i + 100*j + 10000*k)
	}
	return g
}

// TestSliceHandWorked checks the three slices of small grids against
// values worked out by hand: 3 columns (i), 2 rows (j), 2 frames (k), the
// voxel value i + 100j + 10000k. Display rows are listed top first.
func TestSliceHandWorked(t *testing.T) {
	cases := []struct {
		name string
		dir  [3][3]float64
		view view
		at   [3]int // voxel the slice goes through
		want []float32
		w, h int
	}{
		// Head-first supine: i along +x, j along +y, k along +z.
		// Axial at k = 1: x to the right, y (anterior first) down.
		{"HFS axial", volume.Identity, axial, [3]int{0, 0, 1}, []float32{10000, 10001, 10002, 10100, 10101, 10102}, 3, 2},
		// Coronal at j = 0: x to the right, superior (k = 1) on top.
		{"HFS coronal", volume.Identity, coronal, [3]int{0, 0, 0}, []float32{10000, 10001, 10002, 0, 1, 2}, 3, 2},
		// Sagittal at i = 2: y to the right (anterior on the left), superior on top.
		{"HFS sagittal", volume.Identity, sagittal, [3]int{2, 0, 0}, []float32{10002, 10102, 2, 102}, 2, 2},
		// Feet-first-like flips: i along -x, k along -z.
		// Axial at k = 0: patient x increases as i decreases, so columns run i = 2, 1, 0.
		{"flipped axial", [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}}, axial, [3]int{0, 0, 0}, []float32{2, 1, 0, 102, 101, 100}, 3, 2},
		// Coronal at j = 1: superior on top is the smaller k (k runs along -z).
		{"flipped coronal", [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}}, coronal, [3]int{0, 1, 0}, []float32{102, 101, 100, 10102, 10101, 10100}, 3, 2},
		// Prone-like: j along -y. Sagittal at i = 0: anterior (larger j) on the left.
		{"prone sagittal", [3][3]float64{{-1, 0, 0}, {0, -1, 0}, {0, 0, 1}}, sagittal, [3]int{0, 0, 0}, []float32{10100, 10000, 100, 0}, 2, 2},
		// Permuted axes: i along y, j along z, k along x. Axial at j = 1
		// (z fixed): columns x = k (2 frames), rows y = i (3 columns).
		{"permuted axial", [3][3]float64{{0, 1, 0}, {0, 0, 1}, {1, 0, 0}}, axial, [3]int{0, 1, 0}, []float32{100, 10100, 101, 10101, 102, 10102}, 2, 3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			g := indexGrid(t, [3]int{3, 2, 2}, [3]float64{-10, 20, 5}, [3]float64{2, 3, 4}, c.dir)
			s := extractSlice(g, c.view, g.WorldOf(c.at[0], c.at[1], c.at[2]))
			if s.W != c.w || s.H != c.h {
				t.Fatalf("slice is %d×%d, want %d×%d", s.W, s.H, c.w, c.h)
			}
			if got := s.values(g); !slices.Equal(got, c.want) {
				t.Errorf("slice\n got %v\nwant %v", got, c.want)
			}
		})
	}
}

// TestSlicePatientOrientation checks, on grids of every axis arrangement
// and sense, that every pixel shows the voxel at its patient position and
// that the display is in patient orientation.
func TestSlicePatientOrientation(t *testing.T) {
	perms := [][3]int{{0, 1, 2}, {0, 2, 1}, {1, 0, 2}, {1, 2, 0}, {2, 0, 1}, {2, 1, 0}}
	for _, perm := range perms {
		for signs := 0; signs < 8; signs++ {
			var dir [3][3]float64
			for a := 0; a < 3; a++ {
				s := 1.0
				if signs&(1<<a) != 0 {
					s = -1
				}
				dir[a][perm[a]] = s
			}
			g := indexGrid(t, [3]int{5, 4, 3}, [3]float64{7, -3, 11}, [3]float64{1.5, 2, 2.5}, dir)
			for _, v := range views {
				name := fmt.Sprintf("%v %v", dir, v)
				p := g.WorldOf(2, 1, 1)
				s := extractSlice(g, v, p)
				across, down, downInc := v.inPlane()
				for c := 1; c < s.W; c++ {
					if !(s.X[c] > s.X[c-1]) {
						t.Fatalf("%s: columns not increasing in %c", name, "xyz"[across])
					}
				}
				for r := 1; r < s.H; r++ {
					if (s.Y[r] > s.Y[r-1]) != downInc {
						t.Fatalf("%s: rows run the wrong way along %c", name, "xyz"[down])
					}
				}
				if s.Plane != p[v.fixed()] {
					t.Fatalf("%s: plane at %g, want %g", name, s.Plane, p[v.fixed()])
				}
				vals := s.values(g)
				for r := 0; r < s.H; r++ {
					for c := 0; c < s.W; c++ {
						n := int(vals[r*s.W+c])
						w := g.WorldOf(n%100, n/100%100, n/10000)
						if w[across] != s.X[c] || w[down] != s.Y[r] || w[v.fixed()] != s.Plane {
							t.Fatalf("%s: pixel (%d, %d) shows the voxel at %v, want %c=%g %c=%g %c=%g", name, c, r, w,
								"xyz"[across], s.X[c], "xyz"[down], s.Y[r], "xyz"[v.fixed()], s.Plane)
						}
					}
				}
				// Edges bound the centres.
				for c := 0; c < s.W; c++ {
					if !(s.XEdges[c] < s.X[c] && s.X[c] < s.XEdges[c+1]) {
						t.Fatalf("%s: column %d centre %g outside its edges", name, c, s.X[c])
					}
				}
			}
		}
	}
}

func TestSliceNearestPlaneAndClamp(t *testing.T) {
	g := indexGrid(t, [3]int{2, 2, 5}, [3]float64{0, 0, 0}, [3]float64{1, 1, 3}, volume.Identity)
	for _, c := range []struct {
		z    float64
		want int
	}{{-50, 0}, {0, 0}, {1.4, 0}, {1.6, 1}, {7.4, 2}, {12, 4}, {99, 4}} {
		s := extractSlice(g, axial, [3]float64{0, 0, c.z})
		if s.Index != c.want || s.Plane != 3*float64(c.want) {
			t.Errorf("z = %g: plane %d at %g mm, want %d", c.z, s.Index, s.Plane, c.want)
		}
	}
}

func TestRasterAxis(t *testing.T) {
	// Uniform: one raster pixel per voxel.
	if m := rasterAxis([]float64{0, 2, 4, 6}); !slices.Equal(m, []int{0, 1, 2}) {
		t.Errorf("uniform axis: %v", m)
	}
	// Irregular: pixel edges 0, 1, 2, 4 (widths 1, 1, 2): pixels 1 mm wide,
	// the wide voxel twice.
	if m := rasterAxis([]float64{0, 1, 2, 4}); !slices.Equal(m, []int{0, 1, 2, 2}) {
		t.Errorf("irregular axis: %v", m)
	}
	// Decreasing edges (a coronal view's rows, top is superior).
	if m := rasterAxis([]float64{4, 2, 1, 0}); !slices.Equal(m, []int{0, 0, 1, 2}) {
		t.Errorf("decreasing irregular axis: %v", m)
	}
}

func TestSliceIrregularFrames(t *testing.T) {
	g, err := volume.New([3]int{2, 2, 4}, [3]float64{}, volume.Identity,
		[3][]float64{{0, 1}, {0, 1}, {0, 2, 3, 7}})
	if err != nil {
		t.Fatal(err)
	}
	s := extractSlice(g, coronal, [3]float64{0, 0, 0})
	// Rows top first: z = 7, 3, 2, 0; edges half-way between, half a
	// spacing beyond the ends.
	wantEdges := []float64{9, 5, 2.5, 1, -1}
	for i, e := range wantEdges {
		if math.Abs(s.YEdges[i]-e) > 1e-12 {
			t.Fatalf("row edges %v, want %v", s.YEdges, wantEdges)
		}
	}
}
