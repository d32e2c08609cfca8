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
// over that field, not over its nodes, so results do not depend on the
// evaluated grid's spacing beyond interpolation error. The field is the
// piecewise-linear interpolant on the Kuhn triangulation of each cell (six
// tetrahedra per cube, cut the same way in every cell, so the field is
// continuous and reproduces linear doses exactly): the surface of Ju et al.,
// Med Phys 35 (2008) 879, on which Γ is the exact distance from the reference
// point to a piecewise-linear surface in (x/Δd, y/Δd, z/Δd, D/ΔD) space. On
// each tetrahedron that distance is a convex problem with one minimum, found
// in closed form; a trilinear field would allow several local minima in one
// cell, which no local solver can be trusted to resolve. (Sampling a field at
// a step of about Δd/10 already makes statistics converge, Wendling et al.,
// Med Phys 34 (2007) 1647; the exhaustive method below samples far finer.)
//
// The fast search, for one reference point q with dose D_r, in the evaluated
// grid's local frame scaled to DTA units:
//
//  1. Upper bound from the evaluated dose at q itself and the exact minimum
//     over the cell holding q, which usually is the answer.
//  2. Where that bound is still Γ > 1 (the point fails at home, and the
//     search ball may hold thousands of cells), the nearest evaluated node in
//     the renormalised space (x/Δd, y/Δd, z/Δd, D/ΔD), found with a k-d tree
//     (Yuan and Chen, Med Phys 37 (2010) 4868), can shrink it. The tree takes
//     ΔD per query, so local normalisation uses the same tree, and it is built
//     only over the nodes within the search distance of such points.
//  3. Exact refinement: every cell within the current bound (and the search
//     distance) is bounded below by its distance to q and by the gap between
//     D_r and the range of its eight corner doses (a piecewise-linear
//     interpolant never leaves that range); cells are taken in increasing
//     order of that bound until it cannot beat the minimum found, and in each,
//     every tetrahedron that could still beat it is solved exactly: the
//     distance to its hyperplane (the closed form for a linear dose) when the
//     foot of the perpendicular lies inside, else the nearest of the faces the
//     foot sees.
//
// An exhaustive method (a lattice at Δd/10 over the whole search sphere, no
// pruning, then zooming lattices around the 64 best positions) samples the
// same field point by point through a separate code path; it serves audits
// and is the tests' oracle. Being a sampling, it is an upper bound: the fast
// method is never above it by more than rounding, and on smooth doses they
// agree to |ΔΓ| ≤ 0.005 (the tests hold them to it). On noisy doses with
// local normalisation, where a minimum can sit in a basin narrower than the
// lattice step, the lattice itself can miss it by more (BENCHMARKS.md gives
// the figures, and a finer ExhaustiveStep closes the gap).
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
