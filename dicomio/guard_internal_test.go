package dicomio

import (
	"errors"
	"strings"
	"testing"
)

// A panic inside decoding becomes an ErrInvalid error.
func TestGuardRecoversPanic(t *testing.T) {
	err := guard(func() error {
		var m map[string]int
		m["x"]++ // assignment to a nil map panics
		return nil
	})
	if err == nil || !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "malformed file") {
		t.Fatalf("guard returned %v", err)
	}
	if err := guard(func() error { return nil }); err != nil {
		t.Fatalf("guard of a clean run returned %v", err)
	}
}

// formatDS keeps values within 16 characters and exact when they fit;
// formatDSAtLeast never rounds down.
func TestFormatDS(t *testing.T) {
	for _, v := range []float64{0, -761.87, 2.5, 1e-6, 189.43125, 0.1 + 0.2, 1.0 / 3, -123456.789012345, 1.5e-300} {
		s, err := formatDS(v)
		if err != nil || len(s) > 16 {
			t.Errorf("formatDS(%v) = %q, %v", v, s, err)
		}
	}
	for _, c := range []struct {
		v    float64
		want string
	}{{-761.87, "-761.87"}, {2.5, "2.5"}, {189.43125, "189.43125"}, {0, "0"}} {
		if s, _ := formatDS(c.v); s != c.want {
			t.Errorf("formatDS(%v) = %q, want %q", c.v, s, c.want)
		}
	}
	for _, v := range []float64{1.0 / 3 / 65535, 7.123456789012345e-05, 3.0518043793392844e-05, 1} {
		s, x, err := formatDSAtLeast(v)
		if err != nil || len(s) > 16 || x < v || (x-v)/v > 1e-9 {
			t.Errorf("formatDSAtLeast(%v) = %q (%v), %v", v, s, x, err)
		}
	}
}
