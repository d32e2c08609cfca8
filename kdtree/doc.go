// Package kdtree provides a static, balanced 4-D k-d tree for the search step
// of the volumetric gamma index (Low et al., Med Phys 25 (1998) 656).
//
// The gamma index of a reference voxel is the minimum, over the evaluated dose
// distribution, of the distance in a renormalised space whose three spatial
// axes are divided by the distance-to-agreement criterion Δd and whose dose
// axis is divided by the dose-difference criterion ΔD. Yuan and Chen, Med Phys
// 37 (2010) 4868, showed that a k-d tree built over the points (x, y, z, D) of
// that renormalised space turns the exhaustive search into a nearest-neighbour
// query. This package implements such a tree.
//
// # Coordinates and distance
//
// Every point has four float32 coordinates (p0, p1, p2, p3): p0..p2 are the
// spatial coordinates already divided by Δd by the caller, p3 is the raw dose.
// A query q carries its own dose weight w (normally w = 1/ΔD for that query),
// so that local dose normalisation, where ΔD depends on the reference point,
// is served by one tree. The squared distance is
//
//	d²(p, q) = (p0-q0)² + (p1-q1)² + (p2-q2)² + (w·(p3-q3))²
//
// evaluated in float64 from the stored float32 coordinates, in exactly this
// order, each difference, product and sum rounded to float64 (no fused
// multiply-add). Results are therefore bit-for-bit reproducible, and equal to a
// brute-force search that evaluates the same expression; pruning is exact (it
// never discards a point that a brute-force search would return, including
// ties, which are broken by the smallest original index).
//
// The sign of w is irrelevant; w must not be infinite. A point any of whose
// coordinates is NaN has a NaN distance to every query and is never returned:
// Build accepts such points (they count in Len) but leaves them out of the
// tree. Infinite coordinates are allowed.
//
// # Layout and complexity
//
// The tree is stored in flat slices, with no pointer per node: the points,
// permuted into tree order, as contiguous float32 quadruples, their original
// indices as []int32, and one split-axis byte per point. A range of points
// [lo, hi) with more than a small bucket size (8) of points is an internal node
// whose split point is its median position mid = lo + (hi-lo)/2; its children
// are the ranges [lo, mid) and [mid+1, hi). The split axis of a node is the one
// with the largest spread (the dose spread multiplied by the build-time weight
// hint). Smaller ranges are leaf buckets scanned linearly. Because the tree is
// balanced, its depth is at most about log2(n/8)+1, and queries use a fixed
// array stack with no heap allocation.
//
//   - Build: O(n log n) expected time: one expected-linear Floyd–Rivest
//     selection per level, no sort. Large inputs are built by up to
//     GOMAXPROCS goroutines; the result does not depend on their number.
//   - Memory: 21 bytes per point (16 for the coordinates, 4 for the index,
//     1 for the split axis), plus the Tree header; this is also the peak extra
//     memory of Build, and the input is not retained.
//   - Nearest: O(log n) expected for well-distributed data, O(n) worst case.
//   - AppendWithin: for well-distributed data, O(log n + k) nodes visited
//     and O(k log k) to sort the k results.
//
// The number of points is limited to MaxPoints = math.MaxInt32 (2³¹-1), since
// original indices are stored as int32; Build panics above it.
//
// A built Tree is immutable, and safe for concurrent queries from many
// goroutines.
package kdtree
