package dicomio

import (
	"path/filepath"
	"testing"

	"voxgamma/volume"
)

// TestReadDoseHeaderGeometry: the geometry read from the header alone
// gives the same dimensions, spacing and extent as the grid decoded by
// ReadDose, for grids head-first and feet-first prone (flipped axes) and
// with irregular frame offsets (PS3.3 C.8.8.3.2).
func TestReadDoseHeaderGeometry(t *testing.T) {
	dir := t.TempDir()
	cases := []struct {
		name      string
		direction [3][3]float64
		frames    []float64
	}{
		{"hfs", volume.Identity, []float64{0, 2, 4, 6}},
		{"ffp irregular", [3][3]float64{{1, 0, 0}, {0, -1, 0}, {0, 0, -1}}, []float64{0, 2, 5, 9}},
	}
	for _, c := range cases {
		g, err := volume.New([3]int{5, 3, 4}, [3]float64{-4, 2, 10}, c.direction, [3][]float64{{0, 2, 4, 6, 8}, {0, 2.5, 5}, c.frames})
		if err != nil {
			t.Fatal(err)
		}
		for i := range g.Data {
			g.Data[i] = float32(i%7) / 7
		}
		p := filepath.Join(dir, c.name+".dcm")
		if _, err := WriteDose(p, g, PhantomIdentifiers("PHANTOM^HEAD", "VG-DEMO-001"), DoseOptions("test")); err != nil {
			t.Fatal(err)
		}
		grid, _, err := ReadDose(p)
		if err != nil {
			t.Fatal(err)
		}
		_, geo, err := ReadDoseHeader(p)
		if err != nil {
			t.Fatal(err)
		}
		if geo.Dims != grid.Dims() {
			t.Errorf("%s: dims %v, grid %v", c.name, geo.Dims, grid.Dims())
		}
		lo, hi := geo.Bounds()
		glo, ghi := grid.Bounds()
		for a := 0; a < 3; a++ {
			s, u := geo.Spacing(a)
			gs, gu := grid.Spacing(a)
			if abs(s-gs) > 1e-9 || u != gu || abs(lo[a]-glo[a]) > 1e-9 || abs(hi[a]-ghi[a]) > 1e-9 {
				t.Errorf("%s axis %d: spacing %g %v, bounds %g…%g; grid %g %v, %g…%g", c.name, a, s, u, lo[a], hi[a], gs, gu, glo[a], ghi[a])
			}
		}
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}
