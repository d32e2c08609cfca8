package roi

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"voxgamma/internal/reftool"
	"voxgamma/phantom"
)

// numpyPython returns a Python 3 interpreter that imports numpy, or fails
// (CI) or skips the test.
func numpyPython(t *testing.T) string {
	t.Helper()
	return reftool.Python(t, "apt-get install python3-numpy", "numpy")
}

// numpyScript computes, from doses and volumes, the weighted D_x by the
// definition stated in the package documentation (sort by decreasing dose,
// cumulative volume, the smallest rank whose cumulative volume reaches
// x·total to within 1e-9 of the total), the volume-weighted mean dose, and
// V_d (volume with dose ≥ d).
const numpyScript = `
import sys
import numpy as np
raw = np.fromfile(sys.argv[1], dtype='<f8')
n = raw.size // 2
d, w = raw[:n], raw[n:]
order = np.argsort(-d, kind='stable')
ds, ws = d[order], w[order]
cum = np.cumsum(ws)
total = cum[-1]
for p in sys.argv[2].split(','):
    p = float(p)
    m = int(np.searchsorted(cum, p / 100 * total - 1e-9 * total, side='left'))
    m = min(m, n - 1)
    print('D', p, repr(float(ds[m])))
print('mean', repr(float(np.average(d, weights=w))))
for v in sys.argv[3].split(','):
    v = float(v)
    print('V', v, repr(float(w[d >= v].sum())))
print('total', repr(float(total)))
`

// TestDVHAgainstNumpy compares D_x, the mean and V_d with the same
// definitions computed by numpy on the same voxel data: a rasterised sphere
// under an invented Gaussian dose (partial-volume weights) and 200 000
// random voxels; the sphere's D98, D95, D50, D2, mean, volume and V_d also
// as RegionSummary's radix selection computes them.
func TestDVHAgainstNumpy(t *testing.T) {
	py := numpyPython(t)
	dir := t.TempDir()
	script := filepath.Join(dir, "dvh.py")
	if err := os.WriteFile(script, []byte(numpyScript), 0o644); err != nil {
		t.Fatal(err)
	}

	sph := phantom.Sphere{Centre: [3]float64{1.1, -0.4, 0.3}, Radius: 12}
	roi := mustROI(t, sph, phantom.ROISpec{Name: "sphere", PlaneSpacing: 2})
	g := boxGrid(t, [3]float64{-12, -12, -12}, [3]float64{12, 12, 12}, [3]float64{1.5, 1.5, 1.5}, [3]float64{0.2, 0.5, 0.7})
	if err := phantom.Fill(g, phantom.Gaussian([3]float64{4, 0, 0}, 9, 70)); err != nil {
		t.Fatal(err)
	}
	reg := mustRasterise(t, g, &roi, Options{})
	var d1, w1 []float64
	for n, f := range reg.Cover.All() {
		d1 = append(d1, float64(g.Data[n]))
		w1 = append(w1, float64(f)*reg.Sizes().Volume(int(n))/1000)
	}
	d2, w2 := randomDVHInput(200_000, 11)

	pcts := []float64{0, 1, 2, 5, 10, 25, 50, 75, 90, 95, 98, 99, 100}
	levels := []float64{5, 10, 20, 30, 40, 50, 60}
	for _, c := range []struct {
		name string
		d, w []float64
	}{{"rasterised sphere", d1, w1}, {"random voxels", d2, w2}} {
		h, err := NewDVH(c.name, c.d, c.w)
		if err != nil {
			t.Fatal(err)
		}
		// The region's summary by radix selection (RegionSummary's way
		// for regions of 2¹⁶ voxels or more) is held to numpy's values too.
		var sum *Metrics
		if c.name == "rasterised sphere" {
			s, err := radixSummary(g, reg, levels, 0)
			if err != nil {
				t.Fatal(err)
			}
			sum = &s.Metrics
		}
		var buf bytes.Buffer
		if err := binary.Write(&buf, binary.LittleEndian, c.d); err != nil {
			t.Fatal(err)
		}
		if err := binary.Write(&buf, binary.LittleEndian, c.w); err != nil {
			t.Fatal(err)
		}
		data := filepath.Join(dir, "voxels.bin")
		if err := os.WriteFile(data, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		out, err := exec.Command(py, script, data, joinFloats(pcts), joinFloats(levels)).CombinedOutput()
		if err != nil {
			t.Fatalf("%s: numpy script: %v\n%s", c.name, err, out)
		}
		checked := 0
		for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
			f := strings.Fields(line)
			val, err := strconv.ParseFloat(f[len(f)-1], 64)
			if err != nil {
				t.Fatalf("%s: numpy output %q", c.name, line)
			}
			var got float64
			var what string
			tol := 0.0
			switch f[0] {
			case "D":
				p, _ := strconv.ParseFloat(f[1], 64)
				got, what = h.DPercent(p), "D"+f[1]+"%"
			case "V":
				v, _ := strconv.ParseFloat(f[1], 64)
				got, _ = h.V(v)
				what, tol = "V"+f[1]+"Gy", 1e-9*h.TotalCC // summation order differs
			case "mean":
				got, what, tol = h.Mean, "Dmean", 1e-9*h.Max
			case "total":
				got, what, tol = h.TotalCC, "volume", 1e-9*h.TotalCC
			default:
				t.Fatalf("%s: numpy output %q", c.name, line)
			}
			if math.Abs(got-val) > tol {
				t.Errorf("%s: %s = %.17g, numpy %.17g", c.name, what, got, val)
			}
			if sum != nil {
				if s, ok := summaryValue(sum, f[0], f[1], levels); ok && math.Abs(s-val) > tol {
					t.Errorf("%s: summary's %s = %.17g, numpy %.17g", c.name, what, s, val)
				}
			}
			checked++
		}
		if checked != len(pcts)+len(levels)+2 {
			t.Errorf("%s: %d values compared, want %d", c.name, checked, len(pcts)+len(levels)+2)
		}
	}
}

// summaryValue returns the value of m that a line of numpyScript's output
// gives (kind "D", "V", "mean" or "total", at arg), if m has it.
func summaryValue(m *Metrics, kind, arg string, levels []float64) (float64, bool) {
	x, _ := strconv.ParseFloat(arg, 64)
	switch kind {
	case "D":
		v, ok := map[float64]float64{98: m.D98, 95: m.D95, 50: m.D50, 2: m.D2}[x]
		return v, ok
	case "V":
		for i, l := range levels {
			if l == x {
				return m.V[i].CC, true
			}
		}
	case "mean":
		return m.Mean, true
	case "total":
		return m.VolumeCC, true
	}
	return 0, false
}

func joinFloats(v []float64) string {
	s := make([]string, len(v))
	for i, x := range v {
		s[i] = fmt.Sprint(x)
	}
	return strings.Join(s, ",")
}
