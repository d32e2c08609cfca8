package phantom

import (
	"errors"
	"math"

	"voxgamma/volume"
)

// DoseFunc is an analytic dose (Gy) as a function of patient position (mm).
type DoseFunc func(p [3]float64) float64

// Fill sets every voxel of g to f at the voxel's centre (patient
// coordinates), converted to float32. It returns an error when f gives a
// value that is not finite (NaN or ±Inf), leaving g partly filled. The
// voxels are visited one at a time in storage order (i fastest, then j,
// then k), so f may keep state, such as a seeded random source.
func Fill(g *volume.Grid, f DoseFunc) error {
	if g == nil || f == nil {
		return errors.New("phantom: Fill needs a grid and a dose function")
	}
	d := g.Dims()
	n := 0
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				v := f(g.WorldOf(i, j, k))
				if math.IsNaN(v) || math.IsInf(v, 0) {
					return errors.New("phantom: dose function gave a value that is not finite")
				}
				g.Data[n] = float32(v)
				n++
			}
		}
	}
	return nil
}

// Uniform returns the dose function that is d everywhere.
func Uniform(d float64) DoseFunc {
	return func([3]float64) float64 { return d }
}

// Ramp returns the linear dose a + g·(n·(p − origin)) that grows at g Gy/mm
// along direction n (normalised here) from a at origin. A zero n gives the
// constant a.
func Ramp(origin, n [3]float64, a, g float64) DoseFunc {
	l := math.Sqrt(n[0]*n[0] + n[1]*n[1] + n[2]*n[2])
	if l > 0 {
		n = [3]float64{n[0] / l, n[1] / l, n[2] / l}
	}
	return func(p [3]float64) float64 {
		return a + g*(n[0]*(p[0]-origin[0])+n[1]*(p[1]-origin[1])+n[2]*(p[2]-origin[2]))
	}
}

// Gaussian returns the dose peak·exp(−|p − centre|²/(2σ²)), a smooth
// invented dose cloud (sigma in mm, positive).
func Gaussian(centre [3]float64, sigma, peak float64) DoseFunc {
	s2 := 2 * sigma * sigma
	return func(p [3]float64) float64 {
		dx, dy, dz := p[0]-centre[0], p[1]-centre[1], p[2]-centre[2]
		return peak * math.Exp(-(dx*dx+dy*dy+dz*dz)/s2)
	}
}

// InsideDose returns a dose function that is inside where shape contains p
// and outside elsewhere: a step at the shape's boundary.
func InsideDose(shape Shape, inside, outside float64) DoseFunc {
	return func(p [3]float64) float64 {
		if shape.Inside(p) {
			return inside
		}
		return outside
	}
}
