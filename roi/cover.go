package roi

import (
	"iter"

	"voxgamma/volume"
)

// Cover is a region's partial-volume cover: the voxels with a fraction > 0
// of their volume inside the ROI, and those fractions, in (0, 1]. Most of
// a large region's voxels lie wholly inside (fraction 1); only the others'
// fractions are kept, so a body outline's cover takes a few bytes per
// surface voxel rather than 8 per voxel. The zero value is empty.
type Cover struct {
	// Voxels are the Data positions with a fraction > 0.
	Voxels volume.Runs
	// partial lists, increasing, the positions of Voxels whose fraction
	// is below 1, and fraction their fractions.
	partial  []int32
	fraction []float32
}

// Len returns the number of voxels with a fraction > 0.
func (c *Cover) Len() int { return c.Voxels.Len() }

// add adds voxel n, beyond every voxel already in c, with fraction f in
// (0, 1].
func (c *Cover) add(n int32, f float32) {
	c.Voxels.Add(n)
	if f < 1 {
		c.partial = append(c.partial, n)
		c.fraction = append(c.fraction, f)
	}
}

// All yields each voxel's position and fraction, by increasing position.
func (c *Cover) All() iter.Seq2[int32, float32] {
	return func(yield func(int32, float32) bool) {
		k := 0
		for _, r := range c.Voxels.Runs() {
			for n := r.Start; n < r.End; n++ {
				f := float32(1)
				if k < len(c.partial) && c.partial[k] == n {
					f = c.fraction[k]
					k++
				}
				if !yield(n, f) {
					return
				}
			}
		}
	}
}

// trim gives back spare room in the cover's lists.
func (c *Cover) trim() {
	c.Voxels.Trim()
	c.partial = trimmed(c.partial)
	c.fraction = trimmed(c.fraction)
}

// unionCover returns the cover of the voxels in a or b, each with the
// larger of its fractions.
func unionCover(a, b *Cover) Cover {
	var out Cover
	ca, cb := coverCursor{c: a, r: -1}, coverCursor{c: b, r: -1}
	ia, fa, oka := ca.next()
	ib, fb, okb := cb.next()
	for oka || okb {
		switch {
		case !okb || (oka && ia < ib):
			out.add(ia, fa)
			ia, fa, oka = ca.next()
		case !oka || ib < ia:
			out.add(ib, fb)
			ib, fb, okb = cb.next()
		default:
			out.add(ia, max(fa, fb))
			ia, fa, oka = ca.next()
			ib, fb, okb = cb.next()
		}
	}
	return out
}

// coverCursor steps through a cover's voxels by increasing position. Start
// it with r = -1.
type coverCursor struct {
	c    *Cover
	r, k int   // the current run, the next partial voxel
	n    int32 // the last position returned
}

// next returns the next voxel and its fraction, or ok false at the end.
func (u *coverCursor) next() (n int32, f float32, ok bool) {
	runs := u.c.Voxels.Runs()
	if u.r < 0 || u.n+1 >= runs[u.r].End {
		u.r++
		if u.r >= len(runs) {
			u.r = len(runs) - 1
			return 0, 0, false
		}
		u.n = runs[u.r].Start
	} else {
		u.n++
	}
	f = 1
	if u.k < len(u.c.partial) && u.c.partial[u.k] == u.n {
		f = u.c.fraction[u.k]
		u.k++
	}
	return u.n, f, true
}
