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
// The evaluated grid is treated as a continuous field, trilinear inside each
// cell of eight voxel centres, and Γ is the minimum over that field, not over
// its nodes; results therefore do not depend on the evaluated grid's spacing
// beyond interpolation error. (Sampling the field at a step of about Δd/10
// already makes statistics converge, Wendling et al., Med Phys 34 (2007) 1647;
// Ju et al., Med Phys 35 (2008) 879, take the exact distance to a piecewise-
// linear surface. This package takes the exact minimum over the trilinear
// surface, up to the convergence tolerance of a local solver.)
//
// The fast search, for one reference point q with dose D_r, in the evaluated
// grid's local frame scaled to DTA units:
//
//  1. Upper bound from the evaluated dose at q itself: Γ² ≤ (D_e(q) − D_r)²/ΔD².
//  2. Upper bound from the nearest evaluated node in the renormalised space
//     (x/Δd, y/Δd, z/Δd, D/ΔD), found with a k-d tree (Yuan and Chen, Med Phys
//     37 (2010) 4868). The tree takes ΔD per query, so local normalisation uses
//     the same tree.
//  3. Exact refinement: every cell within the current bound (and the search
//     distance) is bounded below by its distance to q and by the gap between
//     D_r and the range of its eight corner doses (a trilinear interpolant
//     never leaves that range); cells whose bound cannot beat the current
//     minimum are skipped, and in the rest the minimum of the trilinear field is
//     found by a projected Gauss-Newton iteration on the cell box.
//
// An exhaustive method (a lattice at Δd/10 over the whole search sphere, no
// pruning, polished by a pattern search) serves audits and is the tests'
// oracle; the fast method agrees with it to |ΔΓ| ≤ 0.005.
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
