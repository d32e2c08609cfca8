package roi

import (
	"math"
	"slices"
)

// edge is a non-horizontal polygon edge in a contour plane, in the in-plane
// coordinates (x, y) of the scanline fill: y is the row coordinate, x the
// coordinate along a row. It is oriented so that y0 < y1 and counts as
// crossed by the row at y when y0 ≤ y < y1 (the half-open rule, which makes
// a vertex on a row count once per polygon passing through it, so the even-odd
// parity is right at vertices). Horizontal edges are never crossed and are
// dropped.
type edge struct {
	y0, y1 float64
	x0     float64 // x at y0
	dxdy   float64 // change of x per unit y
	xa, xb float64 // x at y0 and y1 (for breakpoints of the exact area)
	poly   int32   // the polygon of its plane it belongs to
}

// appendEdges appends the edges of the closed polygon (xs[m], ys[m]), the
// plane's polygon number poly, to es.
func appendEdges(es []edge, xs, ys []float64, poly int32) []edge {
	n := len(xs)
	for m := 0; m < n; m++ {
		xa, ya := xs[m], ys[m]
		xb, yb := xs[(m+1)%n], ys[(m+1)%n]
		if ya == yb {
			continue
		}
		if ya > yb {
			xa, ya, xb, yb = xb, yb, xa, ya
		}
		es = append(es, edge{y0: ya, y1: yb, x0: xa, dxdy: (xb - xa) / (yb - ya), xa: xa, xb: xb, poly: poly})
	}
	return es
}

// sweep answers "where does the row at y cross the edges?" for rows taken
// in non-decreasing y, keeping an active edge list so that each query costs
// the number of edges that span y rather than all edges. Its buffers are
// reused between queries: no allocation once warm.
//
// With groups (see reset) the answer is the boundaries of the plane's
// region as grouped polygons define it: each polygon by the even-odd rule,
// the polygons of one group united, the groups combined by the even-odd
// rule (see the package documentation, "Contours that overlap").
type sweep struct {
	edges  []edge // sorted by y0
	next   int
	active []int32
	xs     []float64

	group  []int32 // group of each polygon; nil: one even-odd fill
	ev     []crossing
	parity []bool  // per polygon: inside it
	count  []int32 // per group: polygons inside
}

// crossing is where a row crosses an edge of polygon poly.
type crossing struct {
	x    float64
	poly int32
}

// reset starts a new pass over edges, which must be sorted by y0. groups
// gives each polygon's group (nil: every polygon its own, even-odd).
func (s *sweep) reset(edges []edge, groups []int32) {
	s.edges = edges
	s.next = 0
	s.active = s.active[:0]
	s.group = groups
	if groups != nil {
		s.parity = slices.Grow(s.parity[:0], len(groups))[:len(groups)]
		clear(s.parity)
		s.count = slices.Grow(s.count[:0], len(groups))[:len(groups)]
		clear(s.count)
	}
}

// at returns the sorted crossings of the row at y with the edges, or with
// groups the sorted boundaries of the region; either way the row is inside
// between the first and second value, the third and fourth, and so on. y
// must not decrease between calls after a reset. The returned slice is
// valid until the next call.
func (s *sweep) at(y float64) []float64 {
	for s.next < len(s.edges) && s.edges[s.next].y0 <= y {
		s.active = append(s.active, int32(s.next))
		s.next++
	}
	xs := s.xs[:0]
	ev := s.ev[:0]
	k := 0
	for _, ei := range s.active {
		e := &s.edges[ei]
		if e.y1 <= y {
			continue // retired: every later row is above it too
		}
		s.active[k] = ei
		k++
		if e.y0 <= y {
			x := e.x0 + (y-e.y0)*e.dxdy
			if s.group == nil {
				xs = append(xs, x)
			} else {
				ev = append(ev, crossing{x, e.poly})
			}
		}
	}
	s.active = s.active[:k]
	if s.group == nil {
		slices.Sort(xs)
		s.xs = xs
		return xs
	}
	slices.SortFunc(ev, func(a, b crossing) int {
		switch {
		case a.x < b.x:
			return -1
		case a.x > b.x:
			return 1
		}
		return 0
	})
	// Walk the crossings left to right: a polygon's parity flips at each
	// of its crossings, a group is inside while any of its polygons is,
	// the region while an odd number of groups are. Crossings at one x are
	// taken together, so a boundary where one polygon of a group ends as
	// another begins is no boundary.
	odd, inside := false, false
	for i := 0; i < len(ev); {
		x := ev[i].x
		for ; i < len(ev) && ev[i].x == x; i++ {
			p := ev[i].poly
			g := s.group[p]
			s.parity[p] = !s.parity[p]
			if s.parity[p] {
				s.count[g]++
				if s.count[g] == 1 {
					odd = !odd
				}
			} else {
				s.count[g]--
				if s.count[g] == 0 {
					odd = !odd
				}
			}
		}
		if odd != inside {
			xs = append(xs, x)
			inside = odd
		}
	}
	// A closed polygon crosses a row an even number of times (half-open
	// edges): every parity is back to outside. Clear anyway, so that a
	// rounding accident in one row cannot leak into the next.
	for _, c := range ev {
		s.parity[c.poly] = false
		s.count[s.group[c.poly]] = 0
	}
	s.ev, s.xs = ev, xs
	return xs
}

// sortEdges sorts edges by y0, as sweep needs.
func sortEdges(es []edge) {
	slices.SortFunc(es, func(a, b edge) int {
		switch {
		case a.y0 < b.y0:
			return -1
		case a.y0 > b.y0:
			return 1
		}
		return 0
	})
}

// evenOddArea returns the area of the even-odd interior of the edges (all
// polygons of one plane together; with groups, of the region they define,
// see sweep) within the rectangle [x0, x1] × [y0, y1]
// (infinite bounds allowed). The inside length of a row is piecewise linear
// in y, with breaks only at vertex rows, where an edge crosses x0 or x1,
// where the rectangle starts or ends, and where two edges cross; between
// breaks the midpoint rule is exact. Breaks of the first three kinds are
// found, so the area is exact (to rounding) for polygons whose edges do not
// cross each other; where edges cross, the midpoint rule approximates. ys is
// scratch space, returned for reuse.
func evenOddArea(es []edge, groups []int32, x0, x1, y0, y1 float64, sw *sweep, ys []float64) (float64, []float64) {
	ys = ys[:0]
	for i := range es {
		e := &es[i]
		ys = append(ys, e.y0, e.y1)
		for _, xc := range [2]float64{x0, x1} {
			if math.IsInf(xc, 0) {
				continue
			}
			lo, hi := math.Min(e.xa, e.xb), math.Max(e.xa, e.xb)
			if xc > lo && xc < hi {
				// y where the edge crosses x = xc.
				ys = append(ys, e.y0+(xc-e.x0)/e.dxdy)
			}
		}
	}
	if !math.IsInf(y0, 0) {
		ys = append(ys, y0)
	}
	if !math.IsInf(y1, 0) {
		ys = append(ys, y1)
	}
	slices.Sort(ys)
	sw.reset(es, groups)
	var area float64
	for m := 1; m < len(ys); m++ {
		ya, yb := math.Max(ys[m-1], y0), math.Min(ys[m], y1)
		if !(yb > ya) {
			continue
		}
		xs := sw.at((ya + yb) / 2)
		var run float64
		for q := 0; q+1 < len(xs); q += 2 {
			a, b := math.Max(xs[q], x0), math.Min(xs[q+1], x1)
			if b > a {
				run += b - a
			}
		}
		area += run * (yb - ya)
	}
	return area, ys
}
