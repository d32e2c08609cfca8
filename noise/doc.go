// Package noise estimates the statistical noise of a Monte Carlo dose and
// removes it before a gamma comparison.
//
// Noise in the evaluated dose lowers Γ: each reference point gets more
// chances to meet its dose nearby (Low and Dempsey, Med Phys 30 (2003)
// 2455; Graves, Jia and Jiang, arXiv:1208.2379, published in Phys Med Biol
// 58 (2013) 1839, volume and page from memory). A
// recalculation with 2–3 % noise can pass a plan by 10 points or more
// that truly fails. This package knows the noise (an estimate from the
// dose alone, a value given, or a per-voxel map) and gives a denoised dose
// to compare instead.
//
// # The noise model
//
// The variance of a Monte Carlo dose grows in proportion to the dose (the
// number of energy depositions scored), so the 1σ noise is modelled as
// σ(D) = σ_max·√(D/D_max): σ_max, in percent of D_max, is the figure
// reported ("σ at the maximum"). D_max is the maximum of the dose after a
// light binomial smoothing, (1, 4, 6, 4, 1)/16 along each axis, because a
// noisy grid's largest voxel lies several σ above the true maximum. A
// per-voxel uncertainty map, when given, replaces the model.
//
// # The estimator
//
// Every interior voxel of the high-dose region (smoothed dose at least
// half of D_max) gives one residual: the tensor product, over the axes of
// three samples or more, of the three-point residual of linear
// interpolation a·y[i−1] − y[i] + b·y[i+1] (the pseudo-residual of Gasser,
// Sroka and Jennen-Steinmetz, Biometrika 73 (1986) 625; in two dimensions
// with a = b = ½ it is the mask of Immerkær, Computer Vision and Image
// Understanding 64 (1996) 300), divided by its norm (unit variance for
// white noise) and by √(D/D_max). σ_max is 1.4826 times the median
// absolute residual: the MAD scale estimate that Donoho and Johnstone
// (Biometrika 81 (1994) 425) use for the finest wavelet coefficients,
// robust to the minority of residuals that dose structure leaves. Its
// standard error is the spread of the estimates on ten slabs of the grid,
// and never less than the MAD's sampling error 1.166·σ/√n (Rousseeuw and
// Croux, JASA 88 (1993) 1273).
//
// How it behaves on dose structure: the residual is exactly 0 for any
// dose that does not vary along one of the axes (a field edge parallel to
// an axis, whatever its penumbra) and for any dose linear along one axis;
// for a smooth dose it is of the order of h⁶ times a mixed sixth
// derivative (h the spacing), so a 3–5 mm penumbra on a 1–2 mm grid leaves
// less than 10⁻³ % whatever its direction. A penumbra that the grid does
// not resolve (3 mm on a 3 mm grid) leaves residuals of several percent
// next to the edge; voxels where the smoothed dose changes by more than
// 10 % of D_max per sample step (within about two samples of such an
// edge) are therefore left out. When fewer than 300 flat voxels remain
// above half of D_max, the region above a fifth of D_max is taken if it
// holds more; with fewer than 30 (a target a few voxels across), there
// is no estimate (an error saying why) rather than a number that would
// take the edge for noise. On the package's noise-free test doses the
// estimate is at most 0.05 % (exactly 0 where the dose does not vary
// along an axis); with noise from 0.5 % to 5 % it is within 25 % of the
// truth.
//
// The estimate assumes voxel noise independent from voxel to voxel, as a
// Monte Carlo engine scores it on its own grid. A dose resampled or
// smoothed after scoring has correlated noise, and the estimate then errs
// low: give the value or the engine's uncertainty map instead.
//
// # The correction
//
// The dose is smoothed by local polynomial least-squares fits
// (Savitzky–Golay, Anal Chem 36 (1964) 1627) along each axis in turn, whose
// window is chosen for each voxel from the noise: the family of the
// locally adaptive Savitzky–Golay filter that El Naqa et al. (Phys Med
// Biol 50 (2005) 909) found the most effective of the Monte Carlo
// denoising methods they compared (Kawrakow, Phys Med Biol 47 (2002) 3087;
// Deasy, Phys Med Biol 45 (2000) 1765). At each voxel, windows of 5, 7, 9,
// 13 and 17 samples (at most 24 mm on each side) are tried in turn: the
// fits over 5 and 7 samples are quadratic, those over 9 samples and more
// quartic. A quadratic over 9 to 13 samples of a 2–3 mm grid rounds the
// gentle shoulders of a 5 mm penumbra by up to half of σ, a bias too small
// for any test on the window's residuals, which moved corrected pass rates
// by 3–4 points; the quartic (Savitzky and Golay's order 4) follows the
// shoulder, and keeps more noise for a window of the same width (the
// variance of the centre estimate 0.278σ² over 13 samples, the
// quadratic's 0.175σ²), hence the wider last window. On grids of 1.5 mm or
// finer the filter works on the dose's detail, the dose minus its light
// binomial smoothing, which follows a 3–5 mm penumbra within a fraction of
// a percent: there every fit is quadratic, over 5 to 13 samples. A larger
// window is taken only while
//
//   - its estimate differs from the raw value, and from the previous
//     window's estimate, by at most 3.5 standard deviations of the
//     difference (the pairwise comparisons of Lepski's rule: Lepski,
//     Mammen and Spokoiny, Annals of Statistics 25 (1997) 929), and
//   - the window's residuals are compatible with the noise (their χ²
//     within 5 standard deviations of its expectation).
//
// Each neighbour is weighted by how close its lightly smoothed dose is to
// the voxel's, with Tukey's biweight (Beaton and Tukey, Technometrics 16
// (1974) 147) over ±4σ, so that a window reaching across a steep edge
// gives it no weight (the range weights of the bilateral filter, Tomasi
// and Manduchi, ICCV 1998). The noise variance of every filtered value is
// carried from axis to axis (the passes along x, y and z keep the noise
// independent along the next axis), so the strength of the filter follows
// σ: a noise-free dose is left as it is, a steep penumbra keeps small
// windows, a flat high-dose region gets the largest.
//
// What it cannot do: a real dose feature smaller than the noise over a few
// voxels is indistinguishable from noise and is smoothed with it; and
// what noise remains (on 3 mm grids the windows span few voxels across a
// small field) still lowers Γ slightly (BENCHMARKS.md gives the effect on
// pass rates and mean Γ).
package noise
