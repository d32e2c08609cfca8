package noise

import "math"

// ModelSigma returns the 1σ noise (Gy) of every voxel under the Monte
// Carlo model σ(D) = σ_max·√(D/D_max), with σ_max = sigmaPercent % of dmax:
// the variance of a Monte Carlo dose grows in proportion to the dose (the
// number of energy depositions scored), so that its relative uncertainty
// falls as 1/√D. D is the lightly smoothed dose, so that σ does not follow
// the noise itself; σ is 0 where that dose is not positive.
func (d *Dose) ModelSigma(sigmaPercent, dmax float64) []float32 {
	out := make([]float32, len(d.smooth))
	if !(dmax > 0) || !(sigmaPercent > 0) {
		return out
	}
	smax := sigmaPercent / 100 * dmax
	for n, s := range d.smooth {
		if s > 0 {
			out[n] = float32(smax * math.Sqrt(float64(s)/dmax))
		}
	}
	return out
}
