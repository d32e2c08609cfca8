package noise

import (
	"fmt"
	"math"
	"strings"
)

// MapUnit says how the values of a per-voxel uncertainty map are read.
type MapUnit int

// Units of an uncertainty map.
const (
	// UnitAuto: from the file where it says (an RT Dose in GY), else
	// inferred (see Dose.InferUnit).
	UnitAuto MapUnit = iota
	// UnitGy: the absolute 1σ in Gy.
	UnitGy
	// UnitFraction: the relative 1σ, σ/D.
	UnitFraction
	// UnitPercent: the relative 1σ in percent, 100·σ/D.
	UnitPercent
)

// String returns "auto", "gy", "relative" or "percent".
func (u MapUnit) String() string {
	switch u {
	case UnitGy:
		return "gy"
	case UnitFraction:
		return "relative"
	case UnitPercent:
		return "percent"
	}
	return "auto"
}

// ParseMapUnit reads a unit: auto, gy, relative (or fraction) or percent.
func ParseMapUnit(s string) (MapUnit, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "", "auto":
		return UnitAuto, nil
	case "gy":
		return UnitGy, nil
	case "relative", "fraction":
		return UnitFraction, nil
	case "percent", "%":
		return UnitPercent, nil
	}
	return UnitAuto, fmt.Errorf("unit %q: want auto, gy (absolute 1σ), relative (σ/D) or percent (100·σ/D)", s)
}

// MapSigma turns the values of an uncertainty map on the dose's grid into
// the absolute 1σ (Gy) of every voxel. A relative value multiplies the
// lightly smoothed dose (so that σ does not follow the noise). NaN marks a
// voxel the map does not cover: allowed where the dose is below 1 % of its
// maximum (σ 0 there), an error elsewhere. Negative or infinite values are
// errors.
func (d *Dose) MapSigma(m []float32, unit MapUnit) ([]float32, error) {
	if len(m) != len(d.smooth) {
		return nil, fmt.Errorf("noise: the uncertainty map has %d values for %d voxels", len(m), len(d.smooth))
	}
	if unit == UnitAuto {
		return nil, fmt.Errorf("noise: MapSigma needs a unit")
	}
	low := float32(0.01 * d.SmoothedMax())
	out := make([]float32, len(m))
	for n, v := range m {
		s := d.smooth[n]
		switch {
		case v != v:
			if s >= low {
				i, j, k := d.Grid.IJK(n)
				return nil, fmt.Errorf("the uncertainty map does not cover voxel (%d, %d, %d) of the evaluated dose (%.3g Gy)", i, j, k, s)
			}
			continue
		case v < 0 || math.IsInf(float64(v), 0):
			i, j, k := d.Grid.IJK(n)
			return nil, fmt.Errorf("the uncertainty map holds %g at voxel (%d, %d, %d): want a finite value ≥ 0", v, i, j, k)
		}
		switch unit {
		case UnitGy:
			out[n] = v
		case UnitFraction:
			out[n] = v * max(s, 0)
		case UnitPercent:
			out[n] = v / 100 * max(s, 0)
		}
	}
	return out, nil
}

// SigmaAtMax returns the 1σ at the dose maximum in percent of the maximum
// (the smoothed maximum, SmoothedMax) from a per-voxel σ: the median of σ
// over the voxels whose smoothed dose is at least 90 % of the maximum. It
// returns NaN when the dose has no positive maximum.
func (d *Dose) SigmaAtMax(sigma []float32) float64 {
	dmax := d.SmoothedMax()
	if !(dmax > 0) {
		return math.NaN()
	}
	level := float32(0.9 * dmax)
	var vals []float64
	for n, s := range d.smooth {
		if s >= level {
			vals = append(vals, float64(sigma[n]))
		}
	}
	return 100 * median(vals) / dmax
}

// InferUnit chooses the unit of an uncertainty map whose file does not
// say it: the reading (Gy, relative or percent) whose σ at the maximum
// agrees with the dose's own estimate est within a factor of 2, when no
// other reading that gives a clearly different σ (by a factor of 1.5 or
// more) agrees within a factor of 3. It returns the unit and a sentence
// saying why, or an error when the estimate cannot decide (a noise-free or
// too small dose, or no reading near it).
func (d *Dose) InferUnit(m []float32, est Estimate) (MapUnit, string, error) {
	if !(est.SigmaPercent > 0.05) || !(est.SigmaPercent > 3*est.UncertaintyPercent) {
		return UnitAuto, "", fmt.Errorf("the unit of the uncertainty map cannot be told from the file, and the evaluated dose's own noise (%.3g %%) is too small to tell it", est.SigmaPercent)
	}
	type reading struct {
		unit MapUnit
		pct  float64
	}
	var rs []reading
	for _, u := range []MapUnit{UnitGy, UnitFraction, UnitPercent} {
		s, err := d.MapSigma(m, u)
		if err != nil {
			return UnitAuto, "", err
		}
		rs = append(rs, reading{u, d.SigmaAtMax(s)})
	}
	dist := func(p float64) float64 { return math.Abs(math.Log(p / est.SigmaPercent)) }
	best := -1
	for i, r := range rs {
		if r.pct > 0 && (best < 0 || dist(r.pct) < dist(rs[best].pct)) {
			best = i
		}
	}
	if best < 0 || dist(rs[best].pct) > math.Log(2) {
		return UnitAuto, "", fmt.Errorf("no reading of the uncertainty map (Gy %.3g %%, relative %.3g %%, percent %.3g %% at the maximum) agrees with the evaluated dose's own noise, %.3g %%",
			rs[0].pct, rs[1].pct, rs[2].pct, est.SigmaPercent)
	}
	for i, r := range rs {
		if i == best || !(r.pct > 0) {
			continue
		}
		differs := math.Abs(math.Log(r.pct/rs[best].pct)) >= math.Log(1.5)
		if differs && dist(r.pct) < math.Log(3) {
			return UnitAuto, "", fmt.Errorf("the uncertainty map read as %s (%.3g %%) and as %s (%.3g %%) both come near the evaluated dose's own noise, %.3g %%",
				rs[best].unit, rs[best].pct, r.unit, r.pct, est.SigmaPercent)
		}
	}
	why := fmt.Sprintf("read as %s: that reading gives %.3g %% at the maximum, the dose's own estimate %.3g %%", rs[best].unit, rs[best].pct, est.SigmaPercent)
	return rs[best].unit, why, nil
}
