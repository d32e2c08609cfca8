// Package analysis runs one voxgamma comparison from files to result: it
// reads the reference (a dose grid or measured points), the evaluated dose
// and the structure set, checks that they belong together, rasterises the
// ROIs on the reference grid, computes Γ once over the whole reference, and
// derives from that one map every per-ROI statistic, the dose-volume
// metrics of both doses, the failing clusters and the protocol's verdict.
//
// Data flow: Load (read, check) → Prepare (rasterise ROIs, scale the
// evaluated dose, estimate its noise and decide on a correction; shared by a
// criteria sweep) → Prepared.Run (gamma; with a noise correction, gamma
// against the dose as given, then denoising and gamma against the denoised
// dose; the evaluated dose resampled onto the reference grid, ROI
// statistics, clusters, rules) → result.Result.
package analysis
