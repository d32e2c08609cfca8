package spc

import (
	"errors"
	"math"
)

// D2 is the d2 constant for moving ranges of two consecutive values (the
// expected range of two independent standard normal values, 2/√π ≈ 1.128,
// to the precision the control-chart tables give it).
const D2 = 1.128

// D4 is the upper moving-range chart factor for ranges of two: the
// moving-range chart's upper limit is D4·mR̄.
const D4 = 3.267

// TG-218's action-limit constants (from memory; see the package
// documentation).
const (
	// Beta is β of ΔA = β·√(σ² + (x̄ − T)²).
	Beta = 6.0
	// Target is T, in percent of points passing.
	Target = 100.0
)

// MinPlans is the number of values below which limits are flagged as
// uncertain: trial control limits are commonly set from at least 20 to 25
// subgroups (common SPC practice, e.g. Montgomery, Introduction to
// Statistical Quality Control, from memory), and an individuals chart has
// subgroups of one.
const MinPlans = 20

// ErrTooFew is returned for fewer than two values: there is no moving
// range.
var ErrTooFew = errors.New("spc: fewer than two values: no moving range, no control limits")

// IChart is an individuals and moving-range chart.
type IChart struct {
	// N counts the values.
	N int
	// Mean is the centre line x̄.
	Mean float64
	// MRBar is the mean moving range of consecutive values.
	MRBar float64
	// Sigma is σ̂ = MRBar/D2.
	Sigma float64
	// UCL and LCL are x̄ ± 3σ̂.
	UCL, LCL float64
	// MRUCL is the moving-range chart's upper limit D4·MRBar.
	MRUCL float64
	// SD is the sample standard deviation (n − 1) of the values.
	SD float64
}

// NewIChart computes the individuals chart of values in time order. It
// returns ErrTooFew for fewer than two values and an error for a value
// that is not finite.
func NewIChart(x []float64) (IChart, error) {
	n := len(x)
	if n < 2 {
		return IChart{N: n}, ErrTooFew
	}
	sum, mr := 0.0, 0.0
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return IChart{N: n}, errors.New("spc: a value is not a finite number")
		}
		sum += v
		if i > 0 {
			mr += math.Abs(v - x[i-1])
		}
	}
	c := IChart{N: n, Mean: sum / float64(n), MRBar: mr / float64(n-1)}
	ss := 0.0
	for _, v := range x {
		d := v - c.Mean
		ss += d * d
	}
	c.SD = math.Sqrt(ss / float64(n-1))
	c.Sigma = c.MRBar / D2
	c.UCL = c.Mean + 3*c.Sigma
	c.LCL = c.Mean - 3*c.Sigma
	c.MRUCL = D4 * c.MRBar
	return c, nil
}

// ActionWidth returns TG-218's ΔA = β·√(σ² + (mean − target)²).
func ActionWidth(mean, sigma, target, beta float64) float64 {
	d := mean - target
	return beta * math.Sqrt(sigma*sigma+d*d)
}

// LowerActionLimit returns TG-218's lower action limit T − ΔA/2 for a
// process of this mean and standard deviation, with β = Beta and
// T = Target.
func LowerActionLimit(mean, sd float64) float64 {
	return Target - ActionWidth(mean, sd, Target, Beta)/2
}

// Signal is one Western Electric rule met at one point.
type Signal struct {
	// Index is the point's position in the series (0-based).
	Index int
	// Rule is the rule's number, 1 to 4 (see the package documentation).
	Rule int
	// Side is +1 above the centre line, −1 below.
	Side int
}

// RuleText describes each Western Electric rule by its number.
var RuleText = map[int]string{
	1: "one point beyond 3σ",
	2: "2 of 3 consecutive points beyond 2σ on one side",
	3: "4 of 5 consecutive points beyond 1σ on one side",
	4: "8 consecutive points on one side of the centre line",
}

// WesternElectric returns the signals of the four Western Electric rules
// on x around centre with sigma σ̂, in order of index then rule. With
// sigma 0 (no variation) rules 1 to 3 flag every point off the centre.
func WesternElectric(x []float64, centre, sigma float64) []Signal {
	var out []Signal
	// beyond reports whether x[i] is beyond k·σ on side s.
	beyond := func(i int, k float64, s int) bool {
		d := (x[i] - centre) * float64(s)
		return d > k*sigma
	}
	side := func(i int) int {
		switch {
		case x[i] > centre:
			return 1
		case x[i] < centre:
			return -1
		}
		return 0
	}
	// countBack counts the points among the last w ending at i that are
	// beyond k·σ on side s.
	countBack := func(i, w int, k float64, s int) int {
		c := 0
		for j := max(0, i-w+1); j <= i; j++ {
			if beyond(j, k, s) {
				c++
			}
		}
		return c
	}
	for i := range x {
		s := side(i)
		if s == 0 {
			continue
		}
		if beyond(i, 3, s) {
			out = append(out, Signal{i, 1, s})
		}
		if i >= 2 && beyond(i, 2, s) && countBack(i, 3, 2, s) >= 2 {
			out = append(out, Signal{i, 2, s})
		}
		if i >= 4 && beyond(i, 1, s) && countBack(i, 5, 1, s) >= 4 {
			out = append(out, Signal{i, 3, s})
		}
		if i >= 7 {
			run := true
			for j := i - 7; j <= i; j++ {
				if side(j) != s {
					run = false
					break
				}
			}
			if run {
				out = append(out, Signal{i, 4, s})
			}
		}
	}
	return out
}
