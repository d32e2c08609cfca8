package dicomio

import (
	"fmt"
	"math"
)

// DoseGeometry is the grid an RT Dose header describes, without its
// values: what a description of a file needs, at the cost of the header
// alone whatever the grid's size.
type DoseGeometry struct {
	// Dims are the samples along the index axes i (columns), j (rows), k
	// (frames).
	Dims [3]int
	// Origin is the centre of the first voxel sent (ImagePositionPatient).
	Origin [3]float64
	// Direction holds the unit patient-space direction of each index axis.
	Direction [3][3]float64
	// Offsets are the positions of the samples along each index axis, mm
	// from the origin (frames as GridFrameOffsetVector gives them).
	Offsets [3][]float64
}

// ReadDoseHeader reads and checks an RT Dose file's header as [ReadDose]
// does, and returns the grid geometry it describes, without reading the
// dose values (only their length is checked).
func ReadDoseHeader(path string) (*DoseInfo, *DoseGeometry, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.close()
	var info *DoseInfo
	var geo *doseGeometry
	err = guard(func() error {
		var err error
		info, geo, err = f.doseHeader()
		return err
	})
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return info, &DoseGeometry{Dims: geo.dims, Origin: geo.origin, Direction: geo.direction, Offsets: geo.offsets}, nil
}

// Spacing returns the mean distance between neighbouring samples along
// index axis a (0 for a single sample) and whether they are evenly spaced
// (to 1e-4 mm).
func (g *DoseGeometry) Spacing(a int) (float64, bool) {
	o := g.Offsets[a]
	if len(o) < 2 {
		return 0, true
	}
	mean := math.Abs(o[len(o)-1]-o[0]) / float64(len(o)-1)
	for i := 1; i < len(o); i++ {
		if math.Abs(math.Abs(o[i]-o[i-1])-mean) > 1e-4 {
			return mean, false
		}
	}
	return mean, true
}

// Bounds returns the lowest and highest patient coordinates (mm) of the
// voxel centres.
func (g *DoseGeometry) Bounds() (lo, hi [3]float64) {
	for c := 0; c < 3; c++ {
		lo[c], hi[c] = math.Inf(1), math.Inf(-1)
	}
	for corner := 0; corner < 8; corner++ {
		var p [3]float64 = g.Origin
		for a := 0; a < 3; a++ {
			o := g.Offsets[a]
			if len(o) == 0 {
				continue
			}
			t := o[0]
			if corner>>a&1 == 1 {
				t = o[len(o)-1]
			}
			for c := 0; c < 3; c++ {
				p[c] += t * g.Direction[a][c]
			}
		}
		for c := 0; c < 3; c++ {
			lo[c], hi[c] = math.Min(lo[c], p[c]), math.Max(hi[c], p[c])
		}
	}
	return lo, hi
}
