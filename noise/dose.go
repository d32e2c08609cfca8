package noise

import (
	"fmt"
	"math"

	"voxgamma/volume"
)

// Dose is a dose grid prepared for noise estimation and filtering: the
// grid and a lightly smoothed copy of it, computed once.
type Dose struct {
	// Grid is the dose (Gy); it is not modified.
	Grid *volume.Grid
	// smooth is Grid smoothed by the binomial kernel (1, 4, 6, 4, 1)/16
	// along each axis of three samples or more.
	smooth  []float32
	workers int
}

// NewDose prepares g. It refuses a grid holding a value that is not
// finite. workers bounds the goroutines of every computation on the dose
// (0: GOMAXPROCS); results do not depend on it.
func NewDose(g *volume.Grid, workers int) (*Dose, error) {
	for n, v := range g.Data {
		if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return nil, fmt.Errorf("noise: voxel %d of the dose is %g: want a finite value", n, v)
		}
	}
	return &Dose{Grid: g, smooth: smoothed(g, workers), workers: workers}, nil
}

// SmoothedMax returns the largest value of the lightly smoothed dose: the
// dose maximum with the noise's own excursions taken out (a noisy grid's
// largest voxel lies several σ above the true maximum).
func (d *Dose) SmoothedMax() float64 {
	m := 0.0
	for _, v := range d.smooth {
		m = math.Max(m, float64(v))
	}
	return m
}

// smoothed returns g smoothed by the binomial kernel (1, 4, 6, 4, 1)/16
// along each axis of three samples or more (ends repeated): the dose with
// its noise reduced about sevenfold, for choosing regions, the noise model
// and the filter's range weights, never for the comparison.
func smoothed(g *volume.Grid, workers int) []float32 {
	dims := g.Dims()
	out := make([]float32, len(g.Data))
	copy(out, g.Data)
	for a := 0; a < 3; a++ {
		if dims[a] < 3 {
			continue
		}
		ls := linesAlong(dims, a)
		parallelLines(ls, workers, ls.n, func(l int, buf []float64) {
			s := ls.start(l)
			n := ls.n
			for i := 0; i < n; i++ {
				buf[i] = float64(out[s+i*ls.stride])
			}
			at := func(i int) float64 { return buf[min(max(i, 0), n-1)] }
			for i := 0; i < n; i++ {
				out[s+i*ls.stride] = float32((at(i-2) + 4*at(i-1) + 6*buf[i] + 4*at(i+1) + at(i+2)) / 16)
			}
		})
	}
	return out
}
