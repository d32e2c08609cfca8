package report

import "math"

// point is a 2D position: in the slice's pixel index space (column, row)
// for [isolines] and [outline], in mm once mapped.
type point struct{ X, Y float64 }

// segment is a line segment whose two ends carry keys: two segments that
// share a key share that end.
type segment struct {
	k [2]int
	p [2]point
}

// chain joins segments that share ends into polylines, so that a figure
// draws a few long paths rather than many short ones. A closed loop comes
// back to its first point. Every segment is used exactly once.
func chain(segs []segment) [][]point {
	at := make(map[int][]int, 2*len(segs))
	for i, s := range segs {
		at[s.k[0]] = append(at[s.k[0]], i)
		at[s.k[1]] = append(at[s.k[1]], i)
	}
	used := make([]bool, len(segs))
	// take returns an unused segment with an end at key, and which of its
	// ends is the other one.
	take := func(key int) (int, int) {
		for _, j := range at[key] {
			if !used[j] {
				used[j] = true
				if segs[j].k[0] == key {
					return j, 1
				}
				return j, 0
			}
		}
		return -1, 0
	}
	var lines [][]point
	for i := range segs {
		if used[i] {
			continue
		}
		used[i] = true
		fwd := []point{segs[i].p[0], segs[i].p[1]}
		for key := segs[i].k[1]; ; {
			j, e := take(key)
			if j < 0 {
				break
			}
			fwd = append(fwd, segs[j].p[e])
			key = segs[j].k[e]
		}
		var back []point
		for key := segs[i].k[0]; ; {
			j, e := take(key)
			if j < 0 {
				break
			}
			back = append(back, segs[j].p[e])
			key = segs[j].k[e]
		}
		line := make([]point, 0, len(back)+len(fwd))
		for n := len(back) - 1; n >= 0; n-- {
			line = append(line, back[n])
		}
		lines = append(lines, append(line, fwd...))
	}
	return lines
}

// outline returns the boundary of the set pixels of a w×h image (row-major,
// row 0 first) as polylines along pixel edges, in pixel-corner coordinates:
// corner (c, r) is the top-left corner of pixel (column c, row r), so a
// single pixel (0, 0) has the outline (0,0) (1,0) (1,1) (0,1) (0,0). Pixels
// beyond the image count as unset, so a set pixel on the border is closed
// by the image edge. Straight runs are merged into one segment.
func outline(in []bool, w, h int) [][]point {
	set := func(c, r int) bool {
		return c >= 0 && c < w && r >= 0 && r < h && in[r*w+c]
	}
	key := func(c, r int) int { return r*(w+1) + c }
	var segs []segment
	// Vertical edges: between pixel (c-1, r) and (c, r).
	for r := 0; r < h; r++ {
		for c := 0; c <= w; c++ {
			if set(c-1, r) != set(c, r) {
				segs = append(segs, segment{
					k: [2]int{key(c, r), key(c, r+1)},
					p: [2]point{{float64(c), float64(r)}, {float64(c), float64(r + 1)}},
				})
			}
		}
	}
	// Horizontal edges: between pixel (c, r-1) and (c, r).
	for r := 0; r <= h; r++ {
		for c := 0; c < w; c++ {
			if set(c, r-1) != set(c, r) {
				segs = append(segs, segment{
					k: [2]int{key(c, r), key(c+1, r)},
					p: [2]point{{float64(c), float64(r)}, {float64(c + 1), float64(r)}},
				})
			}
		}
	}
	lines := chain(segs)
	for i, l := range lines {
		lines[i] = dropCollinear(l)
	}
	return lines
}

// dropCollinear removes the inner points of straight runs of a polyline
// whose points lie on a lattice (exact arithmetic).
func dropCollinear(l []point) []point {
	if len(l) < 3 {
		return l
	}
	out := []point{l[0]}
	for i := 1; i < len(l)-1; i++ {
		a, b, c := out[len(out)-1], l[i], l[i+1]
		if (b.X-a.X)*(c.Y-b.Y)-(b.Y-a.Y)*(c.X-b.X) == 0 &&
			(b.X-a.X)*(c.X-b.X)+(b.Y-a.Y)*(c.Y-b.Y) > 0 {
			continue
		}
		out = append(out, b)
	}
	return append(out, l[len(l)-1])
}

// isolines returns the lines where the w×h samples v (row-major, samples at
// pixel centres (c, r)) cross level, by marching squares with linear
// interpolation along the cell edges, as polylines in pixel-centre
// coordinates (column, row as fractions). A sample counts as above when it
// is at least level; NaN counts as below. Saddle cells are resolved by the
// mean of their four corners.
func isolines(v []float32, w, h int, level float64) [][]point {
	if w < 2 || h < 2 {
		return nil
	}
	above := func(x float32) bool { return float64(x) >= level }
	// val gives a NaN sample as -Inf: below the level, crossed half-way.
	val := func(c, r int) float64 {
		x := float64(v[r*w+c])
		if math.IsNaN(x) {
			return math.Inf(-1)
		}
		return x
	}
	// Keys of the cell edges: horizontal edge from (c, r) to (c+1, r) is
	// 2(r·w+c), vertical edge from (c, r) to (c, r+1) is 2(r·w+c)+1.
	hKey := func(c, r int) int { return 2 * (r*w + c) }
	vKey := func(c, r int) int { return 2*(r*w+c) + 1 }
	cross := func(a, b float64) float64 {
		if math.IsInf(a, -1) || math.IsInf(b, -1) || b == a {
			return 0.5
		}
		t := (level - a) / (b - a)
		return math.Max(0, math.Min(1, t))
	}
	type end struct {
		k int
		p point
	}
	var segs []segment
	for r := 0; r < h-1; r++ {
		for c := 0; c < w-1; c++ {
			a, b := v[r*w+c], v[r*w+c+1]
			cc, d := v[(r+1)*w+c+1], v[(r+1)*w+c]
			code := 0
			if above(a) {
				code |= 8
			}
			if above(b) {
				code |= 4
			}
			if above(cc) {
				code |= 2
			}
			if above(d) {
				code |= 1
			}
			if code == 0 || code == 15 {
				continue
			}
			va, vb, vc, vd := val(c, r), val(c+1, r), val(c+1, r+1), val(c, r+1)
			top := func() end {
				return end{hKey(c, r), point{float64(c) + cross(va, vb), float64(r)}}
			}
			bottom := func() end {
				return end{hKey(c, r+1), point{float64(c) + cross(vd, vc), float64(r + 1)}}
			}
			left := func() end {
				return end{vKey(c, r), point{float64(c), float64(r) + cross(va, vd)}}
			}
			right := func() end {
				return end{vKey(c+1, r), point{float64(c + 1), float64(r) + cross(vb, vc)}}
			}
			add := func(e0, e1 end) {
				segs = append(segs, segment{k: [2]int{e0.k, e1.k}, p: [2]point{e0.p, e1.p}})
			}
			switch code {
			case 1, 14:
				add(left(), bottom())
			case 2, 13:
				add(bottom(), right())
			case 3, 12:
				add(left(), right())
			case 4, 11:
				add(top(), right())
			case 6, 9:
				add(top(), bottom())
			case 7, 8:
				add(left(), top())
			case 5, 10:
				centre := (float64(a) + float64(b) + float64(cc) + float64(d)) / 4
				// Corners a and c are joined through the centre when the centre
				// is on their side of the level (above in case 10, below in
				// case 5): the lines then cut off corners b and d.
				if (code == 10) == (centre >= level) {
					add(top(), right())
					add(left(), bottom())
				} else {
					add(left(), top())
					add(bottom(), right())
				}
			}
		}
	}
	return chain(segs)
}
