package result

import (
	"math"
	"testing"
)

// TestFormatPercent checks the display rule of the README ("rounded down to
// the digits shown, never 100 unless every point passed") on exact
// fractions; the expected strings are the decimal expansions truncated by
// hand (common practice for pass rates, no source).
func TestFormatPercent(t *testing.T) {
	for _, tc := range []struct {
		v    float64
		dec  int
		want string
	}{
		{100 * 1086.0 / 1087, 1, "99.9"},
		{100 * 1999.0 / 2000, 1, "99.9"}, // 99.95: never rounded up to 100.0
		{100 * 1999.0 / 2000, 2, "99.95"},
		{100, 1, "100.0"},
		{100, 2, "100.00"},
		{100 * 29.0 / 29, 1, "100.0"},
		{100 * 1899.0 / 2000, 1, "94.9"}, // 94.95: not shown as meeting 95.0
		{100 * 57.0 / 100, 1, "57.0"},    // 56.99999999999999 in binary
		{100 * 999986.0 / 1000000, 2, "99.99"},
		{100 * 999999999.0 / 1000000000, 2, "99.99"},
		{100 * 999999999.0 / 1000000000, 0, "99"},
		{100 * 994.0 / 1000, 1, "99.4"},
		{100 * 9949.0 / 10000, 2, "99.49"},
		{0, 1, "0.0"},
		{math.NaN(), 1, "n/a"},
	} {
		if got := FormatPercent(tc.v, tc.dec); got != tc.want {
			t.Errorf("FormatPercent(%v, %d) = %s, want %s", tc.v, tc.dec, got, tc.want)
		}
	}
	if got := FormatPassRate(nil); got != "n/a" {
		t.Errorf("FormatPassRate(nil) = %s", got)
	}
}
