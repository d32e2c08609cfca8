package roi

import "math"

// overlapFinder finds, among the polygons of one contour plane, those that
// cover each other without one lying inside the other (see the package
// documentation, "Contours that overlap"), and groups them.
type overlapFinder struct {
	polys  []ovPoly
	groups []int32 // group of each polygon, set by find when any overlap
	sw     sweep
	ys     []float64
	es     []edge
}

// ovPoly is one polygon of the plane.
type ovPoly struct {
	contour                int
	edges                  []edge // sorted by y0
	minX, maxX, minY, maxY float64
	area                   float64 // even-odd area
}

func (o *overlapFinder) reset() { o.polys = o.polys[:0]; o.groups = nil }

// add adds the closed polygon (xs[m], ys[m]), contour number contour of the
// ROI.
func (o *overlapFinder) add(contour int, xs, ys []float64) {
	p := ovPoly{contour: contour, minX: math.Inf(1), maxX: math.Inf(-1), minY: math.Inf(1), maxY: math.Inf(-1)}
	for m := range xs {
		p.minX, p.maxX = math.Min(p.minX, xs[m]), math.Max(p.maxX, xs[m])
		p.minY, p.maxY = math.Min(p.minY, ys[m]), math.Max(p.maxY, ys[m])
	}
	p.edges = appendEdges(nil, xs, ys, 0)
	sortEdges(p.edges)
	p.area, o.ys = evenOddArea(p.edges, nil, math.Inf(-1), math.Inf(1), math.Inf(-1), math.Inf(1), &o.sw, o.ys)
	o.polys = append(o.polys, p)
}

// overlapTolerance is the share of the larger polygon's area within which
// two areas count as equal in the classification of find.
const overlapTolerance = 1e-6

// find classifies every pair of polygons whose bounding boxes overlap, by
// the area of their intersection I = (A + B − X)/2, X being the even-odd
// area of both together (their symmetric difference): I = 0, disjoint; I =
// min(A, B) < max(A, B), one inside the other (an island and its hole);
// I = A = B, the same region twice; otherwise a partial overlap. The last
// two are returned (Z left 0), and their polygons joined into groups
// (o.groups, one entry per polygon), which the fill unites.
func (o *overlapFinder) find() []ContourOverlap {
	n := len(o.polys)
	if n < 2 {
		return nil
	}
	parent := make([]int, n)
	for i := range parent {
		parent[i] = i
	}
	root := func(i int) int {
		for parent[i] != i {
			parent[i] = parent[parent[i]]
			i = parent[i]
		}
		return i
	}
	var found []ContourOverlap
	for i := 0; i < n; i++ {
		a := &o.polys[i]
		for j := i + 1; j < n; j++ {
			b := &o.polys[j]
			if a.maxX <= b.minX || b.maxX <= a.minX || a.maxY <= b.minY || b.maxY <= a.minY {
				continue // boxes apart or only touching: no common area
			}
			o.es = append(append(o.es[:0], a.edges...), b.edges...)
			sortEdges(o.es)
			var x float64
			x, o.ys = evenOddArea(o.es, nil, math.Inf(-1), math.Inf(1), math.Inf(-1), math.Inf(1), &o.sw, o.ys)
			inter := (a.area + b.area - x) / 2
			big, small := math.Max(a.area, b.area), math.Min(a.area, b.area)
			tol := overlapTolerance * big
			var kind OverlapKind
			switch {
			case inter <= tol:
				continue // disjoint
			case math.Abs(inter-small) <= tol && big-small > tol:
				continue // nested: a hole or an island in a hole
			case math.Abs(inter-small) <= tol:
				kind = Duplicate
			default:
				kind = Partial
			}
			found = append(found, ContourOverlap{Kind: kind, A: a.contour, B: b.contour})
			parent[root(j)] = root(i)
		}
	}
	if len(found) == 0 {
		return nil
	}
	o.groups = make([]int32, n)
	index := map[int]int32{}
	for i := range o.groups {
		r := root(i)
		g, ok := index[r]
		if !ok {
			g = int32(len(index))
			index[r] = g
		}
		o.groups[i] = g
	}
	return found
}
