// Package gamma computes the gamma index of Low et al. (Med Phys 25 (1998)
// 656) between a reference dose, a grid or scattered measured points, and an
// evaluated dose grid:
//
//	Γ(r_r) = min over r_e of sqrt(|r_e − r_r|²/Δd² + (D_e(r_e) − D_r(r_r))²/ΔD²)
//
// with Δd the distance-to-agreement (DTA) criterion and ΔD the dose-difference
// criterion, global (δ·D_norm) or local (δ·D_r at each point). A point passes
// when Γ ≤ 1. The reference is iterated and the evaluated grid searched.
//
// # The evaluated distribution is continuous
//
// The evaluated grid is treated as a continuous field and Γ is the minimum
// over that field, not over its nodes. Which field, between the nodes, is
// a choice (Options.Interpolation), stated in every result:
//
//   - CubicBSpline (the default): the tensor-product cubic spline through
//     the samples, prefiltered into B-spline coefficients (Unser, IEEE
//     Signal Processing Magazine 16(6) (1999) 22), natural at the grid's
//     edges, knots at the samples on irregular frames. On evaluated grids of
//     2.5-3 mm it stays far closer to the true dose than the linear
//     interpolants (BENCHMARKS.md).
//   - Trilinear: the tensor-product linear interpolant.
//   - LinearSimplex: the piecewise-linear interpolant on the Kuhn split of
//     each cell into six tetrahedra, the surface of Ju et al., Med Phys 35
//     (2008) 879.
//
// Every one is defined in patient coordinates: the grid is first laid out
// along increasing patient x, y and z (the canonical frame), so the same
// world dose stored with flipped or transposed axes gives the same Γ (the
// simplex split follows the canonical cell diagonal, from the corner of
// lowest to the corner of highest coordinates). A grid holding a sample that
// is not a finite number is refused.
//
// # The fast search
//
// For one reference point q with dose D_r, in the canonical frame scaled to
// DTA units, Γ² is the minimum of g(p) = |p − q|² + w²(E(p) − D_r)², w =
// 1/ΔD:
//
//  1. Home: for the simplex interpolant, the value at q and the exact
//     minimum over the cell holding q; for the tensor-product ones, the
//     value at q polished by Newton's method into a local minimum.
//  2. Where that bound is still Γ > 1 (the point fails at home, and the
//     search ball may hold thousands of cells), the nearest evaluated node in
//     the renormalised space (x/Δd, y/Δd, z/Δd, D/ΔD), found with a k-d tree
//     (Yuan and Chen, Med Phys 37 (2010) 4868), can shrink it. The tree takes
//     ΔD per query, so local normalisation uses the same tree, and it is built
//     only over the nodes within the search distance of such points.
//  3. Certification: every cell within the current bound (and the search
//     distance) is bounded below by its distance to q and the gap between
//     D_r and the range of its dose, taken in increasing order of that bound
//     until it cannot beat the minimum found. Simplex cells are solved
//     exactly, tetrahedron by tetrahedron (a linear dose makes g a convex
//     quadratic: the distance to a hyperplane when its foot lies inside,
//     else the faces the foot sees). Tensor-product cells are searched by
//     branch and bound on the cell's Bernstein (Bézier) form, with lower
//     bounds that cannot exclude a true minimum (the patch's control values;
//     a linear fit within a proven slab; an exact expansion about the best
//     point with Hessian bounds from the control values' differences) and
//     de Casteljau subdivision (tsearch.go): the Γ reported is a value the
//     interpolant takes, proven within 10⁻⁶ of its minimum.
//
// An exhaustive method (a lattice at Δd/10 over the whole search sphere, no
// pruning, then zooming lattices around the 64 best positions) samples the
// same interpolant point by point through a separate code path (the cubic
// spline by the recursive definition of its basis functions); it serves
// audits and is the tests' oracle. Being a sampling, it is an upper bound:
// the fast method is never above it by more than the tolerance, and on
// smooth doses they agree to |ΔΓ| ≤ 0.005 (the tests hold them to it). On
// noisy doses with local normalisation, where a minimum can sit in a basin
// narrower than the lattice step, the lattice itself can miss it by more
// (BENCHMARKS.md gives the figures, and a finer ExhaustiveStep closes the
// gap).
//
// # What is counted
//
// Reference points below the low-dose threshold (a percentage of D_norm) are
// not evaluated and are counted nowhere in the pass rate; with local
// normalisation a reference dose of zero or less also counts as below the
// threshold. Points outside the evaluated grid are counted separately, never
// passed. A point with no Γ below R/Δd within the search distance R is given
// Γ = R/Δd, flagged Capped, and always fails. Γ is stored as float32; whether
// a point passes is decided on the stored value.
//
// # Parallelism and determinism
//
// Points are processed in fixed blocks by a bounded pool of goroutines; each
// block writes only its own slots, so results are bit-identical for any
// number of workers.
package gamma
