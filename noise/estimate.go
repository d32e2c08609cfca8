package noise

import (
	"errors"
	"fmt"
	"math"
	"voxgamma/internal/selection"
)

// Estimate is the statistical noise of a dose grid estimated from the grid
// itself (see the package documentation for the method).
type Estimate struct {
	// SigmaPercent is the 1σ noise at the dose maximum, in percent of the
	// maximum, under the Monte Carlo model σ(D) = σ_max·√(D/D_max).
	SigmaPercent float64
	// UncertaintyPercent is the standard error of SigmaPercent (percentage
	// points), from the spread of independent estimates on slabs of the
	// grid.
	UncertaintyPercent float64
	// MaxDose is D_max (Gy): the maximum of the grid after a light
	// smoothing, so that it is not raised by the noise itself.
	MaxDose float64
	// Voxels is the number of residuals the estimate rests on.
	Voxels int
	// Groups is the number of slabs the uncertainty comes from.
	Groups int
	// RegionFraction is the fraction of MaxDose above which voxels were
	// taken: RegionFractions[0], or the next when the high-dose region had
	// too few flat voxels (fewer than 300).
	RegionFraction float64
}

// RegionFractions are the fractions of the smoothed maximum above which
// voxels enter the estimate, tried in turn: the high-dose region, where
// the √D model is closest to the noise met at the maximum, then, for a
// high-dose region too small to hold enough (300) flat voxels, the region
// above a fifth of the maximum.
var RegionFractions = []float64{0.5, 0.2}

// SlopeLimit is the largest change of the smoothed dose per sample step,
// as a fraction of its maximum, of a voxel whose residual is taken: next
// to a steeper edge, one the grid may not resolve, the residual holds
// dose structure, not noise.
const SlopeLimit = 0.10

// madScale turns the median of |N(0, σ²)| samples into σ: 1/Φ⁻¹(3/4).
const madScale = 1.482602218505602

// minResiduals is the least number of residuals an estimate rests on;
// EnoughResiduals is the number from which the high-dose region alone is
// taken (the MAD's sampling error is then about 7 % of σ).
const (
	minResiduals    = 30
	EnoughResiduals = 300
)

// ErrNoEstimate reports a grid on which the noise cannot be estimated (too
// small, no dose, too few voxels in the high-dose region).
var ErrNoEstimate = errors.New("noise: cannot estimate")

// maxResiduals bounds the residuals an estimate computes: beyond it the
// high-dose voxels are taken at a regular stride (the estimate's own
// sampling error is then about 0.3 % of σ).
const maxResiduals = 200_000

// Estimate estimates the statistical noise of the dose from the dose
// alone (see the package documentation): the median absolute residual of
// a local linear fit along each axis, over the flat part of the high-dose
// region, scaled to σ at the maximum under the Monte Carlo model.
func (d *Dose) Estimate() (Estimate, error) {
	g := d.Grid
	dims := g.Dims()
	var used [3]bool
	nUsed := 0
	for a := 0; a < 3; a++ {
		if dims[a] >= 3 {
			used[a] = true
			nUsed++
		}
	}
	if nUsed == 0 {
		return Estimate{}, fmt.Errorf("%w: the grid %d×%d×%d has no axis of three samples or more", ErrNoEstimate, dims[0], dims[1], dims[2])
	}
	dmax := d.SmoothedMax()
	if !(dmax > 0) {
		return Estimate{}, fmt.Errorf("%w: the grid has no positive dose", ErrNoEstimate)
	}
	// Per axis and sample: the weights (a, b) of the residual
	// a·y[i−1] − y[i] + b·y[i+1] and its norm √(a² + 1 + b²). An axis of
	// fewer than three samples takes only the centre.
	var w [3][][2]float64
	var norm [3][]float64
	for a := 0; a < 3; a++ {
		if !used[a] {
			continue
		}
		w[a] = secondDiffWeights(g.Offsets(a))
		norm[a] = make([]float64, dims[a])
		for i := range w[a] {
			norm[a][i] = math.Sqrt(w[a][i][0]*w[a][i][0] + 1 + w[a][i][1]*w[a][i][1])
		}
	}
	e := Estimate{MaxDose: dmax}
	var z []float64
	for _, frac := range RegionFractions {
		zf := d.residuals(dmax, frac, used, w, norm)
		if len(zf) > len(z) {
			z, e.RegionFraction = zf, frac
		}
		if len(z) >= EnoughResiduals {
			break
		}
	}
	if len(z) < minResiduals {
		return Estimate{}, fmt.Errorf("%w: only %d voxels above %g %% of the maximum where the dose changes by less than %g %% per voxel (want %d): "+
			"the dose has too little flat region (a target a few voxels across, or a grid too coarse for its penumbrae)",
			ErrNoEstimate, len(z), 100*RegionFractions[len(RegionFractions)-1], 100*SlopeLimit, minResiduals)
	}
	e.Voxels = len(z)
	e.SigmaPercent = 100 * madScale * median(append([]float64(nil), z...)) / dmax
	// The standard error: the spread of the estimates on ten slabs, and
	// never below the MAD's own sampling error for independent residuals,
	// 1.166·σ/√n (its asymptotic efficiency is 37 % of the standard
	// deviation's; Rousseeuw and Croux, JASA 88 (1993) 1273).
	spread, groups := groupSpread(z, dmax)
	e.Groups = groups
	e.UncertaintyPercent = 1.166 * e.SigmaPercent / math.Sqrt(float64(len(z)))
	if spread > e.UncertaintyPercent {
		e.UncertaintyPercent = spread
	}
	return e, nil
}

// residuals returns, in slab order, the residuals (scaled to σ at dmax)
// of the interior voxels whose smoothed dose is at least frac of dmax and
// changes by at most SlopeLimit of dmax per sample step along every axis
// used, taking every voxel or, beyond maxResiduals candidates, a regular
// stride of them.
func (d *Dose) residuals(dmax, frac float64, used [3]bool, w [3][][2]float64, norm [3][]float64) []float64 {
	g := d.Grid
	dims := g.Dims()
	strides := [3]int{1, dims[0], dims[0] * dims[1]}
	lo, hi := [3]int{}, dims
	for a := 0; a < 3; a++ {
		if used[a] {
			lo[a], hi[a] = 1, dims[a]-1
		}
	}
	level := float32(frac * dmax)
	slopeMax := SlopeLimit * dmax
	flat := func(n int) bool {
		if d.smooth[n] < level {
			return false
		}
		for a := 0; a < 3; a++ {
			if used[a] && math.Abs(float64(d.smooth[n+strides[a]])-float64(d.smooth[n-strides[a]]))/2 > slopeMax {
				return false
			}
		}
		return true
	}
	inRegion := func(yield func(n int, ijk [3]int) bool) {
		for k := lo[2]; k < hi[2]; k++ {
			for j := lo[1]; j < hi[1]; j++ {
				for i := lo[0]; i < hi[0]; i++ {
					n := i + dims[0]*(j+dims[1]*k)
					if flat(n) && !yield(n, [3]int{i, j, k}) {
						return
					}
				}
			}
		}
	}
	total := 0
	for range inRegion {
		total++
	}
	stride := max(1, (total+maxResiduals-1)/maxResiduals)
	z := make([]float64, 0, total/stride+1)
	q := 0
	for n, ijk := range inRegion {
		q++
		if (q-1)%stride != 0 {
			continue
		}
		// The tensor product of the three-point stencils.
		var cw [3][3]float64
		scale := math.Sqrt(float64(d.smooth[n]) / dmax)
		for a := 0; a < 3; a++ {
			if !used[a] {
				cw[a] = [3]float64{0, 1, 0}
				continue
			}
			wa := w[a][ijk[a]]
			cw[a] = [3]float64{wa[0], -1, wa[1]}
			scale *= norm[a][ijk[a]]
		}
		r := 0.0
		for c := 0; c < 3; c++ {
			if cw[2][c] == 0 {
				continue
			}
			for b := 0; b < 3; b++ {
				if cw[1][b] == 0 {
					continue
				}
				wbc := cw[2][c] * cw[1][b]
				base := n + (c-1)*strides[2] + (b-1)*strides[1]
				for a := 0; a < 3; a++ {
					if cw[0][a] != 0 {
						r += wbc * cw[0][a] * float64(g.Data[base+a-1])
					}
				}
			}
		}
		z = append(z, math.Abs(r)/scale)
	}
	return z
}

// groupSpread splits the residuals (in slab order) into up to ten groups
// of equal size and returns the standard error of the estimate from the
// spread of the groups' estimates: sd/√G, in percent of dmax.
func groupSpread(z []float64, dmax float64) (float64, int) {
	g := min(10, len(z)/minResiduals)
	if g < 2 {
		return math.NaN(), g
	}
	est := make([]float64, g)
	for q := 0; q < g; q++ {
		part := append([]float64(nil), z[q*len(z)/g:(q+1)*len(z)/g]...)
		est[q] = 100 * madScale * median(part) / dmax
	}
	mean := 0.0
	for _, v := range est {
		mean += v
	}
	mean /= float64(g)
	ss := 0.0
	for _, v := range est {
		ss += (v - mean) * (v - mean)
	}
	return math.Sqrt(ss/float64(g-1)) / math.Sqrt(float64(g)), g
}

// secondDiffWeights returns, for each sample i of an axis with positions
// off, the weights (a, b) of the residual a·y[i−1] − y[i] + b·y[i+1] of
// linear interpolation between the neighbours (zero at the ends): a =
// h₊/(h₋+h₊), b = h₋/(h₋+h₊). For uniform spacing a = b = ½.
func secondDiffWeights(off []float64) [][2]float64 {
	w := make([][2]float64, len(off))
	for i := 1; i < len(off)-1; i++ {
		hm, hp := off[i]-off[i-1], off[i+1]-off[i]
		w[i] = [2]float64{hp / (hm + hp), hm / (hm + hp)}
	}
	return w
}

// median returns the median of v (the mean of the two middle values for
// an even count), reordering v.
func median(v []float64) float64 {
	n := len(v)
	if n == 0 {
		return math.NaN()
	}
	m := selection.Kth(v, n/2)
	if n%2 == 1 {
		return m
	}
	// The largest of the lower half.
	lo := v[0]
	for _, x := range v[:n/2] {
		lo = math.Max(lo, x)
	}
	return (lo + m) / 2
}
