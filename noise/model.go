package noise

import "math"

// ModelSigma returns the 1σ noise (Gy) of every voxel under the Monte
// Carlo model σ(D) = σ_max·√(D/D_max), with σ_max = sigmaPercent % of dmax:
// the variance of a Monte Carlo dose grows in proportion to the dose (the
// number of energy depositions scored), so that its relative uncertainty
// falls as 1/√D. D is the lightly smoothed dose, so that σ does not follow
// the noise itself; σ is 0 where that dose is not positive.
func (d *Dose) ModelSigma(sigmaPercent, dmax float64) []float32 {
	m := d.model(sigmaPercent, dmax)
	out := make([]float32, len(d.smooth))
	for n := range out {
		out[n] = m.at(n)
	}
	return out
}

// sigmaSource gives the 1σ noise (Gy) of each voxel: from a map m, or
// when m is nil from the model σ_max·√(D/D_max) of the smoothed dose.
type sigmaSource struct {
	m          []float32
	smooth     []float32
	smax, dmax float64 // σ_max (Gy) and D_max; smax 0 for σ = 0 throughout
}

// model returns the model's σ source (ModelSigma).
func (d *Dose) model(sigmaPercent, dmax float64) sigmaSource {
	src := sigmaSource{smooth: d.smooth, dmax: dmax}
	if dmax > 0 && sigmaPercent > 0 {
		src.smax = sigmaPercent / 100 * dmax
	}
	return src
}

// at returns σ of voxel n.
func (s *sigmaSource) at(n int) float32 {
	if s.m != nil {
		return s.m[n]
	}
	if v := s.smooth[n]; v > 0 && s.smax > 0 {
		return float32(s.smax * math.Sqrt(float64(v)/s.dmax))
	}
	return 0
}
