package report

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"testing"
)

// unitEdges splits outline polylines (pixel-corner coordinates, axis
// parallel) into unit edges, as sorted strings "x0,y0-x1,y1" with the
// smaller end first. It fails on diagonal or non-lattice segments.
func unitEdges(t *testing.T, lines [][]point) []string {
	t.Helper()
	var out []string
	for _, l := range lines {
		for i := 1; i < len(l); i++ {
			a, b := l[i-1], l[i]
			if a.X != b.X && a.Y != b.Y {
				t.Fatalf("diagonal outline segment %v-%v", a, b)
			}
			dx, dy := sign(b.X-a.X), sign(b.Y-a.Y)
			for p := a; p != b; {
				q := point{p.X + dx, p.Y + dy}
				lo, hi := p, q
				if hi.X < lo.X || hi.Y < lo.Y {
					lo, hi = hi, lo
				}
				out = append(out, fmt.Sprintf("%g,%g-%g,%g", lo.X, lo.Y, hi.X, hi.Y))
				p = q
			}
		}
	}
	sort.Strings(out)
	return out
}

func sign(v float64) float64 {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

func mask(rows ...string) ([]bool, int, int) {
	var in []bool
	for _, r := range rows {
		for _, c := range r {
			in = append(in, c == '#')
		}
	}
	return in, len(rows[0]), len(rows)
}

func TestOutlineSquare(t *testing.T) {
	in, w, h := mask(
		"....",
		".##.",
		".##.",
		"....",
	)
	lines := outline(in, w, h)
	if len(lines) != 1 {
		t.Fatalf("%d polylines, want one loop: %v", len(lines), lines)
	}
	l := lines[0]
	if l[0] != l[len(l)-1] {
		t.Errorf("loop not closed: %v", l)
	}
	// Straight runs merged: the four corners and the closing point.
	if len(l) != 5 {
		t.Errorf("%d points, want 5 (corners 1..3 merged): %v", len(l), l)
	}
	want := []string{
		"1,1-1,2", "1,1-2,1", "1,2-1,3", "1,3-2,3",
		"2,1-3,1", "2,3-3,3", "3,1-3,2", "3,2-3,3",
	}
	if got := unitEdges(t, lines); !slices.Equal(got, want) {
		t.Errorf("edges\n got %v\nwant %v", got, want)
	}
}

func TestOutlineBorderAndDiagonal(t *testing.T) {
	// A pixel in the corner of the image, and two pixels touching only at
	// a corner: each is closed by its own four edges.
	in, w, h := mask(
		"#..",
		"..#",
		".#.",
	)
	want := []string{
		// pixel (0,0), closed by the image edge
		"0,0-0,1", "0,0-1,0", "0,1-1,1", "1,0-1,1",
		// pixel (2,1)
		"2,1-2,2", "2,1-3,1", "2,2-3,2", "3,1-3,2",
		// pixel (1,2)
		"1,2-1,3", "1,2-2,2", "1,3-2,3", "2,2-2,3",
	}
	sort.Strings(want)
	if got := unitEdges(t, outline(in, w, h)); !slices.Equal(got, want) {
		t.Errorf("edges\n got %v\nwant %v", got, want)
	}
}

func TestOutlineHole(t *testing.T) {
	// A ring, a 3×3 block with the centre unset: the outer square (12 unit
	// edges) and the hole's square (4).
	in, w, h := mask(
		"###",
		"#.#",
		"###",
	)
	lines := outline(in, w, h)
	if got := len(unitEdges(t, lines)); got != 16 {
		t.Errorf("%d unit edges, want 16", got)
	}
	if len(lines) != 2 {
		t.Errorf("%d loops, want 2 (outer, hole)", len(lines))
	}
}

func TestIsolinesRamp(t *testing.T) {
	// v = column index on a 5×4 image: the 2.5 level is the vertical line
	// x = 2.5 from the top row to the bottom row.
	w, h := 5, 4
	v := make([]float32, w*h)
	for r := 0; r < h; r++ {
		for c := 0; c < w; c++ {
			v[r*w+c] = float32(c)
		}
	}
	lines := isolines(v, w, h, 2.5)
	if len(lines) != 1 {
		t.Fatalf("%d lines, want 1: %v", len(lines), lines)
	}
	l := lines[0]
	if len(l) != h {
		t.Errorf("%d points, want %d (one per row)", len(l), h)
	}
	ys := []float64{}
	for _, p := range l {
		if math.Abs(p.X-2.5) > 1e-12 {
			t.Errorf("point %v not on x = 2.5", p)
		}
		ys = append(ys, p.Y)
	}
	sort.Float64s(ys)
	if !slices.Equal(ys, []float64{0, 1, 2, 3}) {
		t.Errorf("rows %v, want 0..3", ys)
	}
}

func TestIsolinesPeak(t *testing.T) {
	// A single sample of 1 amid zeros, level 0.25: a closed diamond a
	// quarter of the way from the peak towards each neighbour.
	w, h := 3, 3
	v := make([]float32, 9)
	v[4] = 1
	lines := isolines(v, w, h, 0.25)
	if len(lines) != 1 {
		t.Fatalf("%d lines, want 1", len(lines))
	}
	l := lines[0]
	if len(l) != 5 || l[0] != l[4] {
		t.Fatalf("want a closed loop of 4 segments, got %v", l)
	}
	want := map[point]bool{{1, 0.25}: true, {1, 1.75}: true, {0.25, 1}: true, {1.75, 1}: true}
	for _, p := range l[:4] {
		if !want[p] {
			t.Errorf("unexpected point %v", p)
		}
	}
}

func TestIsolinesSaddle(t *testing.T) {
	// Checkerboard 2×2: a and c high. Centre mean 0.5: with level 0.4 the
	// centre is above, a and c joined; the lines cut off b and d.
	v := []float32{1, 0, 0, 1}
	lines := isolines(v, 2, 2, 0.4)
	if len(lines) != 2 {
		t.Fatalf("%d lines, want 2", len(lines))
	}
	for _, l := range lines {
		// Each line cuts off one low corner: (1,0) or (0,1); its points are
		// both within 0.6 of that corner.
		corner := point{1, 0}
		if l[0].X < 0.5 || l[1].X < 0.5 {
			corner = point{0, 1}
		}
		for _, p := range l {
			if math.Hypot(p.X-corner.X, p.Y-corner.Y) > 0.61 {
				t.Errorf("line %v does not cut off corner %v", l, corner)
			}
		}
	}
}
