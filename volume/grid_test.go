package volume

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func mustUniform(t *testing.T, dims [3]int, origin, spacing [3]float64, dir [3][3]float64) *Grid {
	t.Helper()
	g, err := NewUniform(dims, origin, spacing, dir)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// linear is exact under trilinear interpolation: a field that varies
// linearly along each patient axis, with a cross term (still multilinear).
func linear(p [3]float64) float64 {
	return 3 + 0.5*p[0] - 0.25*p[1] + 0.125*p[2] + 0.01*p[0]*p[1]
}

func fillFn(g *Grid, fn func([3]float64) float64) {
	d := g.Dims()
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				g.Set(i, j, k, float32(fn(g.WorldOf(i, j, k))))
			}
		}
	}
}

var orientations = map[string][3][3]float64{
	"head-first supine": Identity,
	"head-first prone":  {{-1, 0, 0}, {0, -1, 0}, {0, 0, 1}},
	"feet-first supine": {{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}},
	"feet-first prone":  {{1, 0, 0}, {0, -1, 0}, {0, 0, -1}},
	"permuted":          {{0, 1, 0}, {0, 0, -1}, {1, 0, 0}},
}

func TestWorldIndexRoundTrip(t *testing.T) {
	for name, dir := range orientations {
		g := mustUniform(t, [3]int{5, 6, 7}, [3]float64{-10, 20, 35}, [3]float64{2.5, 2, 3}, dir)
		for n := 0; n < g.Len(); n++ {
			i, j, k := g.IJK(n)
			if g.Index(i, j, k) != n {
				t.Fatalf("%s: IJK/Index mismatch at %d", name, n)
			}
			p := g.WorldOf(i, j, k)
			u := g.WorldToLocal(p)
			want := g.LocalOf(i, j, k)
			for a := 0; a < 3; a++ {
				if math.Abs(u[a]-want[a]) > 1e-12 {
					t.Fatalf("%s: voxel %d local %v, want %v", name, n, u, want)
				}
			}
			back := g.LocalToWorld(u)
			if back != p {
				t.Fatalf("%s: world %v → local → %v", name, p, back)
			}
		}
		// The step between neighbours along each index axis is the spacing
		// along that axis's direction cosine (geometry, no source needed).
		p0, p1 := g.WorldOf(0, 0, 0), g.WorldOf(1, 0, 0)
		for a := 0; a < 3; a++ {
			if math.Abs(p1[a]-p0[a]-2.5*dir[0][a]) > 1e-12 {
				t.Fatalf("%s: step along i is %v", name, p1)
			}
		}
	}
}

func TestSampleExactForMultilinear(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for name, dir := range orientations {
		g := mustUniform(t, [3]int{6, 7, 8}, [3]float64{-4, 3, 10}, [3]float64{1.5, 2, 2.5}, dir)
		fillFn(g, linear)
		lo, hi := g.Bounds()
		for n := 0; n < 500; n++ {
			var p [3]float64
			for a := 0; a < 3; a++ {
				p[a] = lo[a] + r.Float64()*(hi[a]-lo[a])
			}
			v, ok := g.Sample(p)
			if !ok {
				t.Fatalf("%s: %v inside the bounds reported outside", name, p)
			}
			// float32 storage limits the agreement.
			if want := linear(p); math.Abs(v-want) > 1e-5*math.Max(1, math.Abs(want)) {
				t.Fatalf("%s: Sample(%v) = %g, want %g", name, p, v, want)
			}
		}
		// Just outside every face.
		for a := 0; a < 3; a++ {
			p := [3]float64{(lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2, (lo[2] + hi[2]) / 2}
			p[a] = hi[a] + 1e-3
			if _, ok := g.Sample(p); ok {
				t.Fatalf("%s: point beyond the upper face along %c reported inside", name, "xyz"[a])
			}
			p[a] = lo[a] - 1e-3
			if _, ok := g.Sample(p); ok {
				t.Fatalf("%s: point beyond the lower face along %c reported inside", name, "xyz"[a])
			}
			p[a] = hi[a] // exactly on the face: inside
			if _, ok := g.Sample(p); !ok {
				t.Fatalf("%s: point on the face along %c reported outside", name, "xyz"[a])
			}
		}
	}
}

func TestIrregularOffsets(t *testing.T) {
	off := [3][]float64{{0, 1, 2}, {0, 2}, {0, 1, 3, 3.5, 6}}
	g, err := New([3]int{3, 2, 5}, [3]float64{0, 0, 0}, Identity, off)
	if err != nil {
		t.Fatal(err)
	}
	if _, uniform := g.Spacing(2); uniform {
		t.Fatal("irregular axis reported uniform")
	}
	if s, uniform := g.Spacing(0); !uniform || s != 1 {
		t.Fatalf("axis 0 spacing %g %v", s, uniform)
	}
	fillFn(g, linear)
	for _, z := range []float64{0, 0.5, 1, 2.2, 3, 3.25, 3.5, 4.7, 6} {
		p := [3]float64{1.3, 0.7, z}
		v, ok := g.Sample(p)
		if !ok || math.Abs(v-linear(p)) > 1e-5 {
			t.Fatalf("Sample at z=%g: %g %v, want %g", z, v, ok, linear(p))
		}
	}
	// Decreasing offsets flip the axis and describe the same points.
	dec := [3][]float64{{0, 1, 2}, {0, 2}, {0, -1, -3, -3.5, -6}}
	h, err := New([3]int{3, 2, 5}, [3]float64{0, 0, 6}, Identity, dec)
	if err != nil {
		t.Fatal(err)
	}
	if h.Axis(2).Sign != -1 {
		t.Fatalf("decreasing offsets: axis sign %g, want -1", h.Axis(2).Sign)
	}
	if p := h.WorldOf(0, 0, 4); p != [3]float64{0, 0, 0} {
		t.Fatalf("last frame at %v, want z = 0", p)
	}
}

func TestNewRejects(t *testing.T) {
	oblique := [3][3]float64{{0.9950042, 0.0998334, 0}, {-0.0998334, 0.9950042, 0}, {0, 0, 1}}
	cases := []struct {
		name string
		err  func() error
		want string
	}{
		{"oblique", func() error {
			_, err := NewUniform([3]int{2, 2, 2}, [3]float64{}, [3]float64{1, 1, 1}, oblique)
			return err
		}, "oblique"},
		{"not orthogonal", func() error {
			_, err := NewUniform([3]int{2, 2, 2}, [3]float64{}, [3]float64{1, 1, 1}, [3][3]float64{{1, 0, 0}, {1, 0, 0}, {0, 0, 1}})
			return err
		}, "not orthogonal"},
		{"zero spacing", func() error {
			_, err := NewUniform([3]int{2, 2, 2}, [3]float64{}, [3]float64{1, 0, 1}, Identity)
			return err
		}, "spacing"},
		{"negative spacing", func() error {
			_, err := NewUniform([3]int{2, 2, 2}, [3]float64{}, [3]float64{1, 1, -2}, Identity)
			return err
		}, "spacing"},
		{"NaN origin", func() error {
			_, err := NewUniform([3]int{2, 2, 2}, [3]float64{math.NaN(), 0, 0}, [3]float64{1, 1, 1}, Identity)
			return err
		}, "origin"},
		{"no samples", func() error {
			_, err := NewUniform([3]int{0, 2, 2}, [3]float64{}, [3]float64{1, 1, 1}, Identity)
			return err
		}, "samples"},
		{"non-monotonic", func() error {
			_, err := New([3]int{1, 1, 3}, [3]float64{}, Identity, [3][]float64{{0}, {0}, {0, 2, 1}})
			return err
		}, "monotonic"},
		{"repeated offset", func() error {
			_, err := New([3]int{1, 1, 3}, [3]float64{}, Identity, [3][]float64{{0}, {0}, {0, 2, 2}})
			return err
		}, "monotonic"},
		{"offset count", func() error {
			_, err := New([3]int{1, 1, 3}, [3]float64{}, Identity, [3][]float64{{0}, {0}, {0, 2}})
			return err
		}, "offsets"},
		{"too many voxels", func() error {
			_, err := NewUniform([3]int{65535, 65535, 65535}, [3]float64{}, [3]float64{1, 1, 1}, Identity)
			return err
		}, "too many"},
	}
	for _, tc := range cases {
		err := tc.err()
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want one mentioning %q", tc.name, err, tc.want)
		}
	}
}

func TestResampleOnto(t *testing.T) {
	src := mustUniform(t, [3]int{10, 10, 10}, [3]float64{0, 0, 0}, [3]float64{2, 2, 2}, Identity)
	fillFn(src, linear)
	// A flipped, finer target overlapping half of the source.
	dst := mustUniform(t, [3]int{20, 12, 8}, [3]float64{27, 3, 25}, [3]float64{1, 1.5, 1}, orientations["feet-first supine"])
	out, err := src.ResampleOnto(dst, -1)
	if err != nil {
		t.Fatal(err)
	}
	if !out.SameGeometry(dst) {
		t.Fatal("resampled grid does not have the target geometry")
	}
	inside, outside := 0, 0
	for n, v := range out.Data {
		i, j, k := dst.IJK(n)
		p := dst.WorldOf(i, j, k)
		if _, ok := src.Sample(p); ok {
			inside++
			if math.Abs(float64(v)-linear(p)) > 1e-4 {
				t.Fatalf("voxel %v: %g, want %g", p, v, linear(p))
			}
		} else {
			outside++
			if v != -1 {
				t.Fatalf("voxel %v outside the source got %g, want the fill -1", p, v)
			}
		}
	}
	if inside == 0 || outside == 0 {
		t.Fatalf("inside %d outside %d: the case should have both", inside, outside)
	}
	far := mustUniform(t, [3]int{2, 2, 2}, [3]float64{500, 0, 0}, [3]float64{1, 1, 1}, Identity)
	if _, err := src.ResampleOnto(far, 0); !errors.Is(err, ErrNoOverlap) {
		t.Fatalf("disjoint grids: %v", err)
	}
}

func TestSingleSampleAxis(t *testing.T) {
	// A single frame: only its own plane is inside.
	g := mustUniform(t, [3]int{4, 4, 1}, [3]float64{0, 0, 5}, [3]float64{1, 1, 1}, Identity)
	fillFn(g, linear)
	if v, ok := g.Sample([3]float64{1.5, 2.5, 5}); !ok || math.Abs(v-linear([3]float64{1.5, 2.5, 5})) > 1e-5 {
		t.Fatalf("in-plane sample %g %v", v, ok)
	}
	if _, ok := g.Sample([3]float64{1.5, 2.5, 5.1}); ok {
		t.Fatal("off-plane point reported inside a single-frame grid")
	}
}

func TestMask(t *testing.T) {
	g := mustUniform(t, [3]int{3, 3, 3}, [3]float64{}, [3]float64{1, 1, 1}, Identity)
	fillFn(g, func(p [3]float64) float64 { return p[0] })
	m := Threshold(g, 1) // x ≥ 1: two of three columns
	if m.Count() != 18 {
		t.Fatalf("threshold count %d, want 18", m.Count())
	}
	o := Threshold(g, 2)
	u := m.Clone()
	if err := u.And(o); err != nil || u.Count() != 9 {
		t.Fatalf("and: %d %v", u.Count(), err)
	}
	o.Not()
	if err := o.Or(m); err != nil || o.Count() != 27 {
		t.Fatalf("or: %d %v", o.Count(), err)
	}
	other := NewMask(mustUniform(t, [3]int{2, 2, 2}, [3]float64{}, [3]float64{1, 1, 1}, Identity))
	if err := m.Or(other); err == nil {
		t.Fatal("masks of different dimensions combined")
	}
}

func TestMax(t *testing.T) {
	g := mustUniform(t, [3]int{2, 2, 1}, [3]float64{}, [3]float64{1, 1, 1}, Identity)
	g.Data = []float32{float32(math.NaN()), 2, 5, 1}
	if v, at := g.Max(); v != 5 || at != 2 {
		t.Fatalf("Max = %g at %d", v, at)
	}
}

// TestUniformGeometry: a geometry without samples places every position
// where the same grid with samples does, and holds no samples.
func TestUniformGeometry(t *testing.T) {
	dims := [3]int{4, 3, 5}
	origin := [3]float64{-7.5, 2.25, 10}
	spacing := [3]float64{0.5, 0.5, 0.5}
	full, err := NewUniform(dims, origin, spacing, Identity)
	if err != nil {
		t.Fatal(err)
	}
	geo, err := NewUniformGeometry(dims, origin, spacing, Identity)
	if err != nil {
		t.Fatal(err)
	}
	if geo.Data != nil {
		t.Fatalf("geometry holds %d samples, want none", len(geo.Data))
	}
	if geo.Len() != full.Len() || full.Len() != len(full.Data) {
		t.Fatalf("Len %d (geometry), %d (grid of %d samples)", geo.Len(), full.Len(), len(full.Data))
	}
	for n := 0; n < full.Len(); n++ {
		i, j, k := geo.IJK(n)
		if fi, fj, fk := full.IJK(n); fi != i || fj != j || fk != k || geo.WorldOf(i, j, k) != full.WorldOf(i, j, k) {
			t.Fatalf("position %d: geometry (%d,%d,%d) at %v, grid (%d,%d,%d) at %v", n, i, j, k, geo.WorldOf(i, j, k), fi, fj, fk, full.WorldOf(fi, fj, fk))
		}
	}
	if _, err := NewUniformGeometry(dims, origin, [3]float64{0.5, 0, 0.5}, Identity); err == nil {
		t.Fatal("a zero spacing was accepted")
	}
}
