package dicomio

// The common grid of a dose set's parts and their voxel-by-voxel sum.

import (
	"errors"
	"fmt"
	"hash/fnv"
	"math"
	"path/filepath"
	"strconv"
	"strings"

	"voxgamma/volume"
)

// extent returns, for a header geometry, the patient-coordinate range of
// its voxel centres per patient axis, and the spacing along each patient
// axis (the smallest gap between neighbouring samples), whether it is
// uniform, and the coordinate of one voxel centre (the lattice anchor).
func extent(g *doseGeometry) (lo, hi, spacing [3]float64, uniform [3]bool) {
	for p := 0; p < 3; p++ {
		lo[p], hi[p] = math.Inf(1), math.Inf(-1)
	}
	for a := 0; a < 3; a++ {
		off := g.offsets[a]
		// The patient axis index axis a runs along (directions are
		// axis-aligned: one component is ±1).
		p, sign := 0, 1.0
		for q := 0; q < 3; q++ {
			if math.Abs(g.direction[a][q]) > 0.5 {
				p, sign = q, math.Copysign(1, g.direction[a][q])
			}
		}
		for _, o := range []float64{off[0], off[len(off)-1]} {
			c := g.origin[p] + sign*o
			lo[p], hi[p] = math.Min(lo[p], c), math.Max(hi[p], c)
		}
		minGap, maxGap := math.Inf(1), 0.0
		for n := 1; n < len(off); n++ {
			d := math.Abs(off[n] - off[n-1])
			minGap, maxGap = math.Min(minGap, d), math.Max(maxGap, d)
		}
		if len(off) == 1 {
			minGap, maxGap = math.Inf(1), math.Inf(1)
		}
		spacing[p] = minGap
		uniform[p] = maxGap-minGap <= 1e-6*math.Max(1, maxGap)
	}
	return lo, hi, spacing, uniform
}

// maxSumVoxels bounds the common grid of a resampled sum: 8 bytes per voxel
// are accumulated, besides the grid itself.
const maxSumVoxels = 400_000_000

// grid decides how the parts are put on one grid: as they are when they
// share one, else on a common grid that covers them all, with the finest
// spacing found along each patient axis, aligned to the voxel centres of the
// part that has it (so parts on that lattice are sampled exactly at their
// own voxels).
func (s *DoseSet) grid() {
	s.SameGrid = true
	for _, g := range s.geos[1:] {
		if !geometryEqual(s.geos[0], g) {
			s.SameGrid = false
			break
		}
	}
	if s.SameGrid {
		d := s.geos[0].dims
		if len(s.Parts) > 1 {
			s.Method = fmt.Sprintf("summed voxel by voxel: all %d files have the same %d×%d×%d grid (no interpolation)", len(s.Parts), d[0], d[1], d[2])
		}
		return
	}
	var lo, hi, step, anchor [3]float64
	var from [3]int
	for p := 0; p < 3; p++ {
		lo[p], hi[p], step[p] = math.Inf(1), math.Inf(-1), math.Inf(1)
	}
	for i, g := range s.geos {
		l, h, sp, _ := extent(g)
		for p := 0; p < 3; p++ {
			lo[p], hi[p] = math.Min(lo[p], l[p]), math.Max(hi[p], h[p])
			if sp[p] < step[p]-1e-9 {
				step[p], anchor[p], from[p] = sp[p], l[p], i
			}
		}
	}
	for p := 0; p < 3; p++ {
		if math.IsInf(step[p], 1) {
			// Every part has a single sample along this axis: they
			// lie on one plane (or differ along it: then a common
			// grid has a sample at each position; 1 mm apart at most).
			step[p], anchor[p] = 1, lo[p]
			if hi[p] > lo[p] {
				step[p] = math.Min(1, hi[p]-lo[p])
			}
		}
		// The first lattice point at or below lo, the last at or above hi.
		below := math.Ceil((anchor[p]-lo[p])/step[p] - 1e-9)
		start := anchor[p] - below*step[p]
		n := int(math.Floor((hi[p]-start)/step[p]+1e-9)) + 1
		if start+float64(n-1)*step[p] < hi[p]-volume.InsideTolerance {
			n++
		}
		s.common.dims[p], s.common.origin[p], s.common.spacing[p] = n, start, step[p]
	}
	var parts []string
	for i, g := range s.geos {
		_, _, sp, _ := extent(g)
		parts = append(parts, fmt.Sprintf("%s %d×%d×%d at %s mm", filepath.Base(s.Parts[i].Path), g.dims[0], g.dims[1], g.dims[2], spacingText(sp)))
	}
	c := s.common
	alignedTo := map[string]bool{}
	var names []string
	for p := 0; p < 3; p++ {
		if n := filepath.Base(s.Parts[from[p]].Path); !alignedTo[n] {
			alignedTo[n] = true
			names = append(names, n)
		}
	}
	s.Method = fmt.Sprintf("resampled: the %d files are on different grids (%s); each was interpolated trilinearly onto a common %d×%d×%d grid of %s mm spacing covering all of them (patient axes, the finest spacing of each axis, aligned to the voxel centres of %s), taking 0 Gy outside each file's own grid",
		len(s.Parts), strings.Join(parts, "; "), c.dims[0], c.dims[1], c.dims[2], spacingText(c.spacing), strings.Join(names, " and "))
	s.Warnings = append(s.Warnings, "the doses summed were on different grids and were "+s.Method)
}

func spacingText(sp [3]float64) string {
	parts := make([]string, 3)
	for i, v := range sp {
		if math.IsInf(v, 1) {
			parts[i] = "-"
			continue
		}
		parts[i] = strconv.FormatFloat(math.Round(v*1e6)/1e6, 'f', -1, 64)
	}
	return strings.Join(parts, " × ")
}

// Voxels returns the number of voxels of the summed grid.
func (s *DoseSet) Voxels() int64 {
	d := s.geos[0].dims
	if !s.SameGrid {
		d = s.common.dims
	}
	return int64(d[0]) * int64(d[1]) * int64(d[2])
}

// Sum reads every part's dose values and sums them (see [DoseSet.Method]).
// visit, when not nil, is called with each part's own grid as it is read.
// It returns the summed grid and a DoseInfo describing the sum: the parts'
// common identifiers, units, type and summation type, the grid summed, the
// union of their beams, and SummedFrom. Two parts holding identical dose
// values on the same grid (the same beam exported twice under new UIDs) are
// refused.
func (s *DoseSet) Sum(visit func(part int, g *volume.Grid)) (*volume.Grid, *DoseInfo, error) {
	if !s.SameGrid && s.Voxels() > maxSumVoxels {
		c := s.common.dims
		return nil, nil, setErr("", "the doses to sum are on different grids whose common grid would be %d×%d×%d voxels, more than the %d allowed: resample them onto one grid first", c[0], c[1], c[2], maxSumVoxels)
	}
	var out *volume.Grid
	var acc []float64
	type print struct {
		sum  uint64
		path string
	}
	var prints []print
	for i, part := range s.Parts {
		g, _, err := ReadDose(part.Path)
		if err != nil {
			return nil, nil, err
		}
		if g.Dims() != s.geos[i].dims {
			return nil, nil, setErr(part.Path, "%s changed while it was being read", pathLabel(part.Path))
		}
		h := fnv.New64a()
		var buf [4]byte
		for _, v := range g.Data {
			b := math.Float32bits(v)
			buf[0], buf[1], buf[2], buf[3] = byte(b), byte(b>>8), byte(b>>16), byte(b>>24)
			h.Write(buf[:])
		}
		sum := h.Sum64()
		for _, pr := range prints {
			if pr.sum == sum && geometryEqual(s.geos[i], s.geos[indexOf(s.Parts, pr.path)]) && sameData(pr.path, g) {
				return nil, nil, setErr(part.Path, "%s and %s hold identical dose values on the same grid: the same part exported twice? Summing would count it twice", pathLabel(pr.path), pathLabel(part.Path))
			}
		}
		prints = append(prints, print{sum, part.Path})
		if visit != nil {
			visit(i, g)
		}
		if out == nil {
			if s.SameGrid {
				out = g.EmptyLike()
			} else {
				out, err = volume.NewUniform(s.common.dims, s.common.origin, s.common.spacing, volume.Identity)
				if err != nil {
					return nil, nil, setErr("", "the common grid of the doses to sum: %v", err)
				}
			}
			acc = make([]float64, out.Len())
		}
		src := g
		if !s.SameGrid {
			src, err = g.ResampleOnto(out, 0)
			if err != nil && !errors.Is(err, volume.ErrNoOverlap) {
				return nil, nil, err
			}
		}
		for n, v := range src.Data {
			acc[n] += float64(v)
		}
	}
	for n, v := range acc {
		out.Data[n] = float32(v)
	}
	return out, s.info(out), nil
}

// sameData reports whether the file at path (read again) holds exactly the
// values of g: the check behind a matching hash.
func sameData(path string, g *volume.Grid) bool {
	h, _, err := ReadDose(path)
	if err != nil || h.Len() != g.Len() {
		return false
	}
	for n, v := range h.Data {
		if math.Float32bits(v) != math.Float32bits(g.Data[n]) {
			return false
		}
	}
	return true
}

func indexOf(parts []DoseFile, path string) int {
	for i, p := range parts {
		if p.Path == path {
			return i
		}
	}
	return 0
}

// info describes the summed dose.
func (s *DoseSet) info(g *volume.Grid) *DoseInfo {
	first := s.Parts[0].Info
	in := &DoseInfo{
		Identifiers:       first.Identifiers,
		Path:              s.Parts[0].Path,
		TransferSyntaxUID: first.TransferSyntaxUID,
		SOPClassUID:       first.SOPClassUID,
		DoseUnits:         first.DoseUnits,
		DoseType:          first.DoseType,
		DoseSummationType: first.DoseSummationType,
		BitsAllocated:     first.BitsAllocated,
		BitsStored:        first.BitsStored,
	}
	joined := func(get func(*DoseInfo) string) string {
		var vals []string
		seen := map[string]bool{}
		for _, p := range s.Parts {
			if v := get(p.Info); v != "" && !seen[v] {
				seen[v] = true
				vals = append(vals, v)
			}
		}
		return strings.Join(vals, "; ")
	}
	in.SeriesInstanceUID = joined(func(d *DoseInfo) string { return d.SeriesInstanceUID })
	if strings.Contains(in.SeriesInstanceUID, ";") {
		in.SeriesInstanceUID = ""
	}
	in.SeriesDescription = joined(func(d *DoseInfo) string { return d.SeriesDescription })
	in.Manufacturer = joined(func(d *DoseInfo) string { return d.Manufacturer })
	in.ManufacturerModelName = joined(func(d *DoseInfo) string { return d.ManufacturerModelName })
	in.DoseComment = joined(func(d *DoseInfo) string { return d.DoseComment })
	if len(s.FractionGroups) == 1 {
		in.ReferencedFractionGroupNumber = s.FractionGroups[0]
	}
	in.ReferencedBeamNumbers = append([]int(nil), s.Beams...)
	if len(s.Beams) == 1 {
		in.ReferencedBeamNumber = s.Beams[0]
	}
	d := g.Dims()
	in.Rows, in.Columns, in.NumberOfFrames = d[1], d[0], d[2]
	in.ImagePositionPatient = g.Origin()
	dir := g.Direction()
	copy(in.ImageOrientationPatient[:3], dir[0][:])
	copy(in.ImageOrientationPatient[3:], dir[1][:])
	sx, _ := g.Spacing(0)
	sy, _ := g.Spacing(1)
	in.PixelSpacing = [2]float64{sy, sx}
	in.GridFrameOffsetVector = append([]float64(nil), g.Offsets(2)...)
	for _, p := range s.Parts {
		in.SummedFrom = append(in.SummedFrom, p.Path)
		for _, n := range p.Info.Notes {
			in.Notes = append(in.Notes, fmt.Sprintf("%s: %s", filepath.Base(p.Path), n))
		}
	}
	return in
}

// SumLabel describes a summed dose in a few words for messages, e.g.
// "the sum of 3 BEAM doses (beams 1, 2, 3)".
func (d *DoseInfo) SumLabel() string {
	if len(d.SummedFrom) < 2 {
		return ""
	}
	what := ""
	switch summableTypes[d.DoseSummationType] {
	case "beam":
		what = " (beams " + FormatNumbers(d.ReferencedBeamNumbers) + ")"
	}
	t := d.DoseSummationType
	return fmt.Sprintf("the sum of %d %s doses%s", len(d.SummedFrom), t, what)
}
