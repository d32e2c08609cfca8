package result

import (
	"math"
	"strconv"
)

// FormatPercent writes a percentage (a pass rate, a coverage) with the given
// number of decimals, rounded down: the one rule every output follows, so
// that a value never rises across a limit by rounding and never reads 100
// unless it is exactly 100 (1086 of 1087 is "99.9"; 1999 of 2000 is "99.9"
// with one decimal and "99.95" with two; 14 failing points of a million
// read "99.99", never "100.00"). NaN gives "n/a".
func FormatPercent(v float64, decimals int) string {
	if math.IsNaN(v) {
		return "n/a"
	}
	if decimals < 0 {
		decimals = 0
	}
	scale := math.Pow(10, float64(decimals))
	// The tiny relative term absorbs representation error in values such as
	// 100·57/100 = 56.99999999999999, which must read 57.0; it is far below
	// one part in the 10^9 points a grid could hold.
	f := math.Floor(v*scale + 1e-9*math.Max(1, math.Abs(v*scale)))
	if v < 100 && f >= 100*scale {
		f = 100*scale - 1 // below 100 never reads as 100
	}
	return strconv.FormatFloat(f/scale, 'f', decimals, 64)
}

// FormatPassRate is FormatPercent with one decimal for a pass rate given as
// a pointer (nil: "n/a"), as the tables show it.
func FormatPassRate(v *float64) string {
	if v == nil {
		return "n/a"
	}
	return FormatPercent(*v, 1)
}
