package analysis

// FuzzParsePoints fuzzes the reader of a detector array's measured points
// (CSV, header x_mm,y_mm,z_mm,dose_gy; load.go):
//
//	go test -run '^$' -fuzz FuzzParsePoints -fuzztime 60s ./analysis/
//
// Whatever the bytes: no panic; an error names the file; accepted points
// have finite positions and finite, non-negative doses (a measured dose
// in Gy), and round-trip: written back in the same format (shortest
// decimal form, strconv 'g' -1) they parse to the same points, bit for
// bit, in the same order.

import (
	"bytes"
	"math"
	"strconv"
	"strings"
	"testing"

	"voxgamma/gamma"
)

func FuzzParsePoints(f *testing.F) {
	for _, s := range []string{
		"x_mm,y_mm,z_mm,dose_gy\n1,2,3,4.5\n-1.5, 0, 2e1, 0\n",
		"\ufeffX_MM, Y_MM ,z_mm,Dose_Gy\r\n0,0,0,1\r\n\r\n10,-10,5.25,2.125\r\n",
		"x_mm,y_mm,z_mm,dose_gy\n\"1\",\"2\",\"3\",\"4\"\n",
		"x_mm,y_mm,z_mm,dose_gy\n1,2,3\n",
		"x_mm,y_mm,z_mm,dose_gy\n1,2,NaN,4\n",
		"x_mm,y_mm,z_mm,dose_gy\n1,2,3,-4\n",
		"x_mm,y_mm,z_mm,dose_gy\n1,2,3,1e400\n",
		"x_mm,y_mm,z_mm,dose_gy\n",
		"x,y,z,d\n1,2,3,4\n",
		"",
	} {
		f.Add([]byte(s))
	}
	const name = "detectors.csv"
	f.Fuzz(func(t *testing.T, data []byte) {
		pts, err := ParsePoints(bytes.NewReader(data), name)
		if err != nil {
			if !strings.HasPrefix(err.Error(), name) {
				t.Errorf("error %q does not start with the file name", err)
			}
			return
		}
		if len(pts) == 0 {
			t.Fatal("no error and no point")
		}
		for i, p := range pts {
			for _, v := range []float64{p.Pos[0], p.Pos[1], p.Pos[2], p.Dose} {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("point %d %+v: not finite", i, p)
				}
			}
			if p.Dose < 0 {
				t.Fatalf("point %d %+v: negative dose", i, p)
			}
		}
		back, err := ParsePoints(strings.NewReader(formatPoints(pts)), name)
		if err != nil {
			t.Fatalf("points %v written back do not parse: %v", pts, err)
		}
		if len(back) != len(pts) {
			t.Fatalf("%d points written back parse to %d", len(pts), len(back))
		}
		for i := range pts {
			if !samePoint(pts[i], back[i]) {
				t.Fatalf("point %d: %+v written back parses to %+v", i, pts[i], back[i])
			}
		}
	})
}

func formatPoints(pts []gamma.Point) string {
	var b strings.Builder
	b.WriteString(strings.Join(PointsHeader, ",") + "\n")
	for _, p := range pts {
		for i, v := range []float64{p.Pos[0], p.Pos[1], p.Pos[2], p.Dose} {
			if i > 0 {
				b.WriteByte(',')
			}
			b.WriteString(strconv.FormatFloat(v, 'g', -1, 64))
		}
		b.WriteByte('\n')
	}
	return b.String()
}

func samePoint(a, b gamma.Point) bool {
	for i := 0; i < 3; i++ {
		if math.Float64bits(a.Pos[i]) != math.Float64bits(b.Pos[i]) {
			return false
		}
	}
	return math.Float64bits(a.Dose) == math.Float64bits(b.Dose)
}
