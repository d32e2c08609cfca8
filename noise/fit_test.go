package noise

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"voxgamma/internal/reftool"
)

// The filter's least-squares fits against scipy's Savitzky–Golay
// coefficients (scipy.signal.savgol_coeffs, an implementation of
// Savitzky and Golay, Anal Chem 36 (1964) 1627, with pos for the windows
// a line's end clips): with no range weights and the window rule made
// to accept every window, the estimate at each sample of a line is the
// dot product of the coefficients of the widest window (quadratic for
// half-widths up to 6, quartic for 8 from half-width 4 on) with the
// samples it covers, and its variance is Σcⱼ²vⱼ (independent samples of
// variance vⱼ).
func TestFitsMatchScipy(t *testing.T) {
	py := reftool.Python(t, "apt-get install python3-scipy python3-numpy", "numpy", "scipy")
	const n = 40
	r := rand.New(rand.NewPCG(3, 4))
	y, v := make([]float64, n), make([]float64, n)
	for i := range y {
		y[i] = 50 + 10*math.Sin(float64(i)/5) + 2*r.NormFloat64()
		v[i] = 0.5 + r.Float64()
	}
	type fitCase struct {
		Order, Half int
	}
	cases := []fitCase{{2, 6}, {4, 8}}
	type window struct {
		Lo, Len, Pos, Order int
	}
	var windows []window
	for _, c := range cases {
		for i := 0; i < n; i++ {
			lo, hi := max(0, i-c.Half), min(n-1, i+c.Half)
			windows = append(windows, window{lo, hi - lo + 1, i - lo, c.Order})
		}
	}
	dir := t.TempDir()
	in, _ := json.Marshal(windows)
	if err := os.WriteFile(filepath.Join(dir, "in.json"), in, 0o644); err != nil {
		t.Fatal(err)
	}
	script := filepath.Join(dir, "coeffs.py")
	if err := os.WriteFile(script, []byte(`import json, sys
from scipy.signal import savgol_coeffs
ws = json.load(open(sys.argv[1]))
print(json.dumps([list(savgol_coeffs(w["Len"], w["Order"], pos=w["Pos"], use="dot")) for w in ws]))
`), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(py, script, filepath.Join(dir, "in.json")).Output()
	if err != nil {
		t.Fatalf("scipy: %v", err)
	}
	var coeffs [][]float64
	if err := json.Unmarshal(out, &coeffs); err != nil || len(coeffs) != len(windows) {
		t.Fatalf("scipy's answer %q: %v", out, err)
	}
	k := 0
	for _, c := range cases {
		ln := line{y: y, v: v, t: make([]float64, n), guide: make([]float64, n), scale: make([]float64, n),
			threshold2: math.Inf(1), chiZ: 0, maxHalf: c.Half, scales: halfWidths(c.Half)}
		if c.Order == 4 {
			ln.quarticFrom = 4
		}
		for i := range ln.t {
			ln.t[i] = float64(i)
		}
		for i := 0; i < n; i++ {
			w := windows[k]
			cf := coeffs[k]
			k++
			want, wantVar := 0.0, 0.0
			for j, c := range cf {
				want += c * y[w.Lo+j]
				wantVar += c * c * v[w.Lo+j]
			}
			got, gotVar, width := ln.at(i)
			if width != w.Len || math.Abs(got-want) > 1e-9*math.Abs(want) || math.Abs(gotVar-wantVar) > 1e-9*wantVar {
				t.Errorf("order %d, sample %d: estimate %.12g (variance %.12g, %d samples), scipy %.12g (%.12g, %d samples)",
					c.Order, i, got, gotVar, width, want, wantVar, w.Len)
			}
		}
	}
}
