package spc

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os/exec"
	"slices"
	"strings"
	"testing"

	"voxgamma/internal/reftool"
)

// TestIChartNIST checks the individuals chart against the worked example of
// the NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.2
// "Individuals Control Charts": the flow rates of the first 10 batches of a
// new process, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1,
// for which the handbook gives Xbar = 50.81, MRbar = 1.8778,
// UCL = 55.8041 and LCL = 45.8159 (the example's table and the limits
// below it, quoted to the digits printed there).
func TestIChartNIST(t *testing.T) {
	flow := []float64{49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	c, err := NewIChart(flow)
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range []struct {
		name      string
		got, want float64
		tol       float64 // half a unit of the last digit printed
	}{
		{"Xbar", c.Mean, 50.81, 0.005},
		{"MRbar", c.MRBar, 1.8778, 0.00005},
		{"UCL", c.UCL, 55.8041, 0.00005},
		{"LCL", c.LCL, 45.8159, 0.00005},
	} {
		if math.Abs(q.got-q.want) > q.tol {
			t.Errorf("%s = %.6f, NIST/SEMATECH 6.3.2.2 gives %g", q.name, q.got, q.want)
		}
	}
	// The handbook's moving ranges, in its table: 2.0 2.3 1.4 3.5 3.4 1.4
	// 0.2 1.2 1.5 (sum 16.9 over 9 ranges).
	if math.Abs(c.MRBar*9-16.9) > 1e-9 {
		t.Errorf("sum of moving ranges %.12g, the handbook's table sums to 16.9", c.MRBar*9)
	}
	// "The process is in control": no point beyond the limits (rule 1).
	for _, s := range WesternElectric(flow, c.Mean, c.Sigma) {
		if s.Rule == 1 {
			t.Errorf("point %d flagged beyond 3σ; the handbook finds the process in control", s.Index+1)
		}
	}
}

// TestIChartNumpy compares the chart's statistics of 2,000 random values
// with numpy's: mean, mean absolute first difference, sample standard
// deviation (ddof=1).
func TestIChartNumpy(t *testing.T) {
	py := reftool.Python(t, "apt-get install python3-numpy", "numpy")
	r := rand.New(rand.NewPCG(7, 11))
	x := make([]float64, 2000)
	for i := range x {
		x[i] = 97 + 2*r.NormFloat64()
	}
	in, _ := json.Marshal(x)
	cmd := exec.Command(py, "-c", `
import json, sys, numpy as np
x = np.array(json.load(sys.stdin))
print(json.dumps([float(x.mean()), float(np.abs(np.diff(x)).mean()), float(x.std(ddof=1))]))`)
	cmd.Stdin = strings.NewReader(string(in))
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("numpy: %v", err)
	}
	var want [3]float64
	if err := json.Unmarshal(out, &want); err != nil {
		t.Fatal(err)
	}
	c, err := NewIChart(x)
	if err != nil {
		t.Fatal(err)
	}
	for i, got := range []float64{c.Mean, c.MRBar, c.SD} {
		if math.Abs(got-want[i]) > 1e-9*math.Max(1, math.Abs(want[i])) {
			t.Errorf("statistic %d: %.15g, numpy %.15g", i, got, want[i])
		}
	}
	if math.Abs(c.UCL-(c.Mean+3*c.MRBar/1.128)) > 1e-12 || math.Abs(c.LCL-(c.Mean-3*c.MRBar/1.128)) > 1e-12 {
		t.Errorf("limits %g, %g are not x̄ ± 3·mR̄/1.128", c.LCL, c.UCL)
	}
}

func TestIChartTooFew(t *testing.T) {
	for _, x := range [][]float64{nil, {98}} {
		if _, err := NewIChart(x); err != ErrTooFew {
			t.Errorf("%v: error %v, want ErrTooFew", x, err)
		}
	}
	if _, err := NewIChart([]float64{1, math.NaN()}); err == nil {
		t.Error("a NaN value was accepted")
	}
}

// TestActionLimit checks TG-218's action limit T − ΔA/2 with
// ΔA = β√(σ² + (x̄ − T)²), β = 6, T = 100 (from memory; see the package
// documentation) on cases worked by hand:
//
//   - x̄ = 98, σ = 1.5: √(2.25 + 4) = 2.5, ΔA = 15, limit 92.5;
//   - a process on target (x̄ = T) reduces to the 3σ limit T − 3σ;
//   - a process without spread (σ = 0) to T − 3|x̄ − T|;
//
// and against its origin: the interval T ± ΔA/2 is the one whose capability
// index C_pm = (USL − LSL)/(6√(σ² + (μ − T)²)) (Chan, Cheng and Spiring
// 1988) is exactly 1.
func TestActionLimit(t *testing.T) {
	near := func(what string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > 1e-12 {
			t.Errorf("%s = %.15g, want %.15g", what, got, want)
		}
	}
	near("x̄ 98, σ 1.5", LowerActionLimit(98, 1.5), 92.5)
	near("ΔA for x̄ 98, σ 1.5", ActionWidth(98, 1.5, Target, Beta), 15)
	near("on target", LowerActionLimit(100, 1.2), 100-3*1.2)
	near("no spread", LowerActionLimit(97, 0), 100-3*3)
	for _, p := range [][2]float64{{99.1, 0.7}, {95, 3}, {100, 0.01}} {
		mu, sd := p[0], p[1]
		half := ActionWidth(mu, sd, Target, Beta) / 2
		usl, lsl := Target+half, Target-half
		cpm := (usl - lsl) / (6 * math.Sqrt(sd*sd+(mu-Target)*(mu-Target)))
		near("C_pm of T ± ΔA/2", cpm, 1)
		near("lower limit", LowerActionLimit(mu, sd), lsl)
	}
}

// TestWesternElectric checks each rule on series built for it, around
// centre 0 with σ 1, the flags read off the rules' wording (see the package
// documentation): each series has exactly the signals listed.
func TestWesternElectric(t *testing.T) {
	for _, c := range []struct {
		name string
		x    []float64
		want []Signal
	}{
		{"in control", []float64{0.5, -0.5, 1.5, -1.5, 0.2, -0.3, 0.4, -2.5, 0.1}, nil},
		{"rule 1 both sides", []float64{0.1, 3.2, -0.1, -3.01, 0.3}, []Signal{{1, 1, 1}, {3, 1, -1}}},
		// Points 2 and 4 (0-based) are beyond 2σ above with point 3 between:
		// 2 of 3 completes at point 4; point 2 is only 1 of its three.
		{"rule 2", []float64{0.1, -0.2, 2.5, 0.3, 2.2, 0.1}, []Signal{{4, 2, 1}}},
		// Beyond 2σ on opposite sides: no rule 2.
		{"rule 2 sides differ", []float64{0, 0, 2.5, -2.5, 0}, nil},
		// Four of five beyond 1σ below, completed at point 5; point 6 is
		// within 1σ, so it completes nothing although the window holds 4.
		{"rule 3", []float64{0.3, -1.5, -1.2, 0.4, -1.8, -1.1, -0.5}, []Signal{{5, 3, -1}}},
		// Eight consecutive above: flagged at the 8th and the 9th.
		{"rule 4", []float64{-0.1, 0.2, 0.3, 0.1, 0.5, 0.4, 0.2, 0.6, 0.3, 0.1, -0.4},
			[]Signal{{8, 4, 1}, {9, 4, 1}}},
		// Seven then a point on the line: no run of eight.
		{"rule 4 broken by the centre", []float64{0.2, 0.3, 0.1, 0.5, 0.4, 0.2, 0.6, 0, 0.3}, nil},
	} {
		got := WesternElectric(c.x, 0, 1)
		if !slices.Equal(got, c.want) {
			t.Errorf("%s: signals %v, want %v", c.name, got, c.want)
		}
	}
}
