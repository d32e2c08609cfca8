package dicomio

import (
	"errors"
	"fmt"
	"hash/fnv"
	"math"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom/pkg/tag"

	"voxgamma/volume"
)

// The keywords of the reference tags the messages of dose sets name.
func init() {
	for t, n := range map[tag.Tag]string{
		tagReferencedBeamSequence:   "ReferencedBeamSequence",
		tagReferencedBeamNumber:     "ReferencedBeamNumber",
		tagReferencedFractionGroupS: "ReferencedFractionGroupSequence",
		tagReferencedFractionGroupN: "ReferencedFractionGroupNumber",
	} {
		if _, ok := tagNames[t]; !ok {
			tagNames[t] = n
		}
	}
}

// Doses in parts. Planning systems export one RT Dose per beam, Monte Carlo
// engines one per beam or arc, a plan of several fraction groups one per
// group. PS3.3 C.8.8.3 defines the DoseSummationType (3004,000A) of such
// parts: BEAM, "dose calculated for entire delivery of one or more Beams
// within RT Plan"; FRACTION, "... of a single Fraction Group within RT
// Plan"; BEAM_SESSION and FRACTION_SESSION, the same for "a single session
// ("fraction")". The dose of the whole is the voxel-by-voxel sum of its
// parts (dose is additive), on one grid.

// summableTypes are the DoseSummationTypes a [DoseSet] sums, with what
// tells two parts apart: a beam (BEAM, BEAM_SESSION), a fraction group
// (FRACTION), nothing the file says (FRACTION_SESSION: the sessions of one
// fraction group carry no session number; only their identity and values
// tell a copy).
var summableTypes = map[string]string{"BEAM": "beam", "BEAM_SESSION": "beam", "FRACTION": "fraction group", "FRACTION_SESSION": "session"}

// perSessionTypes are the DoseSummationTypes of a dose of one session
// (fraction) rather than of the whole course (PS3.3 C.8.8.3).
var perSessionTypes = map[string]bool{"BEAM_SESSION": true, "FRACTION_SESSION": true, "BRACHY_SESSION": true, "CONTROL_POINT": true}

// PerSession reports whether a DoseSummationType is that of a dose of a
// single session (fraction): BEAM_SESSION, FRACTION_SESSION,
// BRACHY_SESSION or CONTROL_POINT (PS3.3 C.8.8.3). The others (PLAN, BEAM,
// FRACTION, ...) are doses of the whole course of what they cover.
func PerSession(summationType string) bool { return perSessionTypes[summationType] }

// DoseSetError is the error of a set of RT Dose files that cannot be summed
// into one dose. It matches [ErrInvalid].
type DoseSetError struct {
	// Path is the file at fault ("" when the set as a whole is).
	Path string
	// MissingBeams lists the beams of the RT Plan that no file of the set
	// holds (see [DoseSet.CheckPlanBeams]); nil for other faults.
	MissingBeams []int
	msg          string
}

func (e *DoseSetError) Error() string { return e.msg }

// Unwrap makes a DoseSetError match ErrInvalid.
func (e *DoseSetError) Unwrap() error { return ErrInvalid }

func setErr(path, format string, args ...any) error {
	return &DoseSetError{Path: path, msg: fmt.Sprintf(format, args...)}
}

// DoseSet is a set of RT Dose files that together make one dose: the beams
// of a plan, its fraction groups, or sessions. [ReadDoseSet] reads and
// checks their headers; [DoseSet.Sum] sums them.
type DoseSet struct {
	// Parts are the files in the order they are summed: by the first beam
	// (or fraction group) they name, then SOPInstanceUID, then path, so
	// that the sum does not depend on the order they were given in.
	Parts []DoseFile
	// SummationType is the parts' common DoseSummationType.
	SummationType string
	// Beams are the beam numbers the parts name (BEAM, BEAM_SESSION),
	// ascending; FractionGroups the fraction groups they name, ascending.
	Beams, FractionGroups []int
	// PlanUID is the RT Plan every part references; "" when none does.
	PlanUID string
	// SameGrid is true when every part has the same grid: the sum is then
	// taken voxel by voxel, with no interpolation. Otherwise the parts are
	// resampled onto the common grid described by Method.
	SameGrid bool
	// Method says in words how the parts are put on one grid.
	Method string
	// Warnings and Notes are for the user: a resampling, what could not
	// be checked.
	Warnings, Notes []string

	geos   []*doseGeometry
	common struct {
		dims    [3]int
		origin  [3]float64
		spacing [3]float64
	}
}

// pathLabel names a file in messages.
func pathLabel(p string) string { return p }

// ReadDoseSet reads the headers of RT Dose files (not their values) and
// checks that they can be summed into one dose:
//
//   - none is a map of differences (DoseType ERROR);
//   - all have the same DoseSummationType, one of BEAM, BEAM_SESSION,
//     FRACTION and FRACTION_SESSION (a PLAN dose is the whole already;
//     summing two would count the plan twice);
//   - the same DoseUnits, DoseType, FrameOfReferenceUID (present),
//     PatientID and referenced RT Plan (all the same one, or none at all);
//   - no file twice (the same SOPInstanceUID), and each beam (BEAM,
//     BEAM_SESSION) or fraction group (FRACTION) in one file only, every
//     file naming the beams or group it holds;
//   - the grid the sum needs fits in memory limits.
//
// Every refusal is a [DoseSetError] naming the file at fault. One path
// gives a set of one. Whether the beams are all those of the plan is
// checked against the RT Plan by [DoseSet.CheckPlanBeams].
func ReadDoseSet(paths []string) (*DoseSet, error) {
	if len(paths) == 0 {
		return nil, setErr("", "no RT Dose file to sum")
	}
	s := &DoseSet{}
	for _, p := range paths {
		f, err := openFile(p)
		if err != nil {
			return nil, fmt.Errorf("reading %s: %w", p, err)
		}
		var info *DoseInfo
		var geo *doseGeometry
		err = guard(func() error {
			var err error
			info, geo, err = f.doseHeader()
			return err
		})
		f.close()
		if err != nil {
			return nil, fmt.Errorf("reading %s: %w", p, err)
		}
		s.Parts = append(s.Parts, DoseFile{Path: p, Info: info})
		s.geos = append(s.geos, geo)
	}
	if err := s.check(); err != nil {
		return nil, err
	}
	s.order()
	s.grid()
	return s, nil
}

// firstKey is the number a part sorts by: its first beam, else its
// fraction group.
func firstKey(d *DoseInfo) int {
	if len(d.ReferencedBeamNumbers) > 0 {
		return d.ReferencedBeamNumbers[0]
	}
	return d.ReferencedFractionGroupNumber
}

// order sorts the parts (and their geometries) canonically.
func (s *DoseSet) order() {
	idx := make([]int, len(s.Parts))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool {
		x, y := s.Parts[idx[a]], s.Parts[idx[b]]
		if kx, ky := firstKey(x.Info), firstKey(y.Info); kx != ky {
			return kx < ky
		}
		if x.Info.SOPInstanceUID != y.Info.SOPInstanceUID {
			return x.Info.SOPInstanceUID < y.Info.SOPInstanceUID
		}
		return x.Path < y.Path
	})
	parts := make([]DoseFile, len(idx))
	geos := make([]*doseGeometry, len(idx))
	for i, j := range idx {
		parts[i], geos[i] = s.Parts[j], s.geos[j]
	}
	s.Parts, s.geos = parts, geos
}

// check applies the rules of ReadDoseSet to the headers.
func (s *DoseSet) check() error {
	first := s.Parts[0]
	s.SummationType = first.Info.DoseSummationType
	s.PlanUID = first.Info.ReferencedRTPlanUID
	if len(s.Parts) == 1 {
		s.collect()
		return nil
	}
	for _, p := range s.Parts {
		if why := p.Info.DisagreementMap(); why != "" {
			return setErr(p.Path, "%s: %s, not a dose to sum", pathLabel(p.Path), why)
		}
	}
	for _, p := range s.Parts {
		if p.Info.DoseSummationType == "" {
			return setErr(p.Path, "%s: %s is missing: cannot tell whether it is one part of the plan's dose (a beam, a fraction group) or a whole-plan dose that must not be added to others",
				pathLabel(p.Path), tagString(tagDoseSummationType))
		}
	}
	differ := func(what string, get func(*DoseInfo) string, why string) error {
		want := get(first.Info)
		for _, p := range s.Parts[1:] {
			if got := get(p.Info); got != want {
				return setErr(p.Path, "the doses to sum differ in %s: %s has %s, %s has %s: %s",
					what, pathLabel(p.Path), orNone(got), pathLabel(first.Path), orNone(want), why)
			}
		}
		return nil
	}
	if err := differ(tagString(tagDoseSummationType), func(d *DoseInfo) string { return d.DoseSummationType },
		"a dose is summed from parts of one kind (all beams, or all fraction groups, of one plan)"); err != nil {
		return err
	}
	if _, ok := summableTypes[s.SummationType]; !ok {
		why := "it is not a part of a plan's dose"
		switch s.SummationType {
		case "PLAN", "MULTI_PLAN", "PLAN_OVERVIEW":
			why = "each is a whole plan's dose already: summing them would count the plan more than once"
		case "CONTROL_POINT":
			why = "control-point doses carry no reference this tool checks for a missing or repeated control point; sum them into beam doses first"
		case "BRACHY", "BRACHY_SESSION":
			why = "brachytherapy application setups are not read"
		}
		return setErr(first.Path, "%d RT Dose files given as one dose have %s %s (%s and others): %s; voxgamma sums BEAM, BEAM_SESSION, FRACTION and FRACTION_SESSION doses",
			len(s.Parts), tagString(tagDoseSummationType), s.SummationType, pathLabel(first.Path), why)
	}
	if err := differ(tagString(tagDoseUnits), func(d *DoseInfo) string { return d.DoseUnits },
		"an absolute and a relative dose cannot be added"); err != nil {
		return err
	}
	if err := differ(tagString(tagDoseType), func(d *DoseInfo) string { return d.DoseType },
		"a physical and an effective dose differ by a model and cannot be added"); err != nil {
		return err
	}
	for _, p := range s.Parts {
		if p.Info.FrameOfReferenceUID == "" {
			return setErr(p.Path, "%s: %s is missing: cannot check that it is in the same coordinates as the other doses of the set", pathLabel(p.Path), tagString(tagFrameOfReferenceUID))
		}
	}
	if err := differ(tagString(tagFrameOfReferenceUID), func(d *DoseInfo) string { return d.FrameOfReferenceUID },
		"doses in different coordinate systems cannot be added"); err != nil {
		return err
	}
	if err := differ("PatientID (0010,0020)", func(d *DoseInfo) string { return d.PatientID },
		"doses of different patients are never added"); err != nil {
		return err
	}
	if err := differ("the RT Plan they reference ("+tagString(tagReferencedRTPlanSequence)+")", func(d *DoseInfo) string { return d.ReferencedRTPlanUID },
		"parts of different plans (or of a plan and of none) do not make one plan's dose"); err != nil {
		return err
	}
	seenSOP := map[string]string{}
	for _, p := range s.Parts {
		uid := p.Info.SOPInstanceUID
		if uid == "" {
			continue
		}
		if other, dup := seenSOP[uid]; dup {
			return setErr(p.Path, "%s and %s are the same dose (%s %s): it would be counted twice", pathLabel(other), pathLabel(p.Path), tagString(tagSOPInstanceUID), uid)
		}
		seenSOP[uid] = p.Path
	}
	switch summableTypes[s.SummationType] {
	case "beam":
		owner := map[int]string{}
		for _, p := range s.Parts {
			if len(p.Info.ReferencedBeamNumbers) == 0 {
				return setErr(p.Path, "%s: a %s dose that names no beam (%s in %s): the set cannot be checked for a missing or repeated beam",
					pathLabel(p.Path), s.SummationType, tagString(tagReferencedBeamNumber), tagString(tagReferencedRTPlanSequence))
			}
			for _, b := range p.Info.ReferencedBeamNumbers {
				if other, dup := owner[b]; dup {
					if other == p.Path {
						return setErr(p.Path, "%s names beam %d twice (%s)", pathLabel(p.Path), b, tagString(tagReferencedBeamNumber))
					}
					return setErr(p.Path, "beam %d twice: %s and %s both hold it (%s): summing would count it twice", b, pathLabel(other), pathLabel(p.Path), tagString(tagReferencedBeamNumber))
				}
				owner[b] = p.Path
			}
		}
	case "fraction group":
		owner := map[int]string{}
		for _, p := range s.Parts {
			g := p.Info.ReferencedFractionGroupNumber
			if g == 0 {
				return setErr(p.Path, "%s: a FRACTION dose that names no fraction group (%s): the set cannot be checked for a missing or repeated group",
					pathLabel(p.Path), tagString(tagReferencedFractionGroupN))
			}
			if other, dup := owner[g]; dup {
				return setErr(p.Path, "fraction group %d twice: %s and %s both hold it (%s): summing would count it twice", g, pathLabel(other), pathLabel(p.Path), tagString(tagReferencedFractionGroupN))
			}
			owner[g] = p.Path
		}
	case "session":
		s.Notes = append(s.Notes, fmt.Sprintf("%d FRACTION_SESSION doses summed: each is one session, and nothing in the files numbers the sessions, so a session exported twice is found only by its identity or identical values", len(s.Parts)))
	}
	s.collect()
	return nil
}

// collect fills Beams and FractionGroups from the parts.
func (s *DoseSet) collect() {
	beams, groups := map[int]bool{}, map[int]bool{}
	for _, p := range s.Parts {
		for _, b := range p.Info.ReferencedBeamNumbers {
			beams[b] = true
		}
		if g := p.Info.ReferencedFractionGroupNumber; g > 0 {
			groups[g] = true
		}
	}
	s.Beams, s.FractionGroups = sortedKeys(beams), sortedKeys(groups)
}

func sortedKeys(m map[int]bool) []int {
	out := []int{}
	for k := range m {
		out = append(out, k)
	}
	sort.Ints(out)
	return out
}

// FormatNumbers writes numbers as "1, 2, 3" ("none" when empty).
func FormatNumbers(ns []int) string {
	if len(ns) == 0 {
		return "none"
	}
	parts := make([]string, len(ns))
	for i, n := range ns {
		parts[i] = strconv.Itoa(n)
	}
	return strings.Join(parts, ", ")
}

// geometryEqual reports whether two header geometries describe the same
// grid (voxel centres within 1e-6 mm, as volume.Grid.SameGeometry).
func geometryEqual(a, b *doseGeometry) bool {
	if a.dims != b.dims || a.direction != b.direction {
		return false
	}
	for i := 0; i < 3; i++ {
		if math.Abs(a.origin[i]-b.origin[i]) > volume.InsideTolerance {
			return false
		}
		for n := range a.offsets[i] {
			if math.Abs(a.offsets[i][n]-b.offsets[i][n]) > volume.InsideTolerance {
				return false
			}
		}
	}
	return true
}

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

// PlanCheck is what [DoseSet.CheckPlan] found.
type PlanCheck struct {
	// Complete is true when the parts hold every part of what the plan
	// delivers: every treatment beam of the plan (BEAM), of one fraction
	// group (BEAM_SESSION: one session of it), or every fraction group
	// (FRACTION).
	Complete bool
	// SummationType is the DoseSummationType the sum stands for once
	// checked: PLAN for every beam or fraction group of the plan,
	// FRACTION for every beam of one of several fraction groups,
	// FRACTION_SESSION for one session of every beam of a group; the
	// parts' own type otherwise.
	SummationType string
	// FractionGroup is the fraction group the sum is of, 0 when the whole
	// plan's or not known.
	FractionGroup int
	// Text says in words what was checked, for the result.
	Text string
	// Warnings are for the user (a plan the parts do not name).
	Warnings []string
}

// CheckPlan checks the parts against the RT Plan's beam list or fraction
// groups: a part holding a beam (or fraction group) the plan does not
// define is refused naming the file, and a treatment beam (or fraction
// group) of the plan that no part holds is refused naming it (a
// [DoseSetError] with MissingBeams). Beams whose TreatmentDeliveryType is
// SETUP or a portal film need not be there. Parts that name another plan
// are checked by number, with a warning. FRACTION_SESSION parts carry no
// beam or session number: only their count is compared with the plan's
// number of fractions, in words.
func (s *DoseSet) CheckPlan(p *Plan) (*PlanCheck, error) {
	c := &PlanCheck{SummationType: s.SummationType}
	label := fmt.Sprintf("RT Plan %q", p.Label)
	if s.PlanUID != "" && p.SOPInstanceUID != "" && s.PlanUID != p.SOPInstanceUID {
		c.Warnings = append(c.Warnings, fmt.Sprintf("the doses summed were computed for plan %s, not for %s (%s): their beams are checked against it by number",
			s.PlanUID, label, p.SOPInstanceUID))
	}
	groupOf := map[int]int{}
	for _, g := range p.FractionGroups {
		for _, b := range g.Beams {
			if _, ok := groupOf[b.BeamNumber]; !ok {
				groupOf[b.BeamNumber] = g.Number
			}
		}
	}
	beamName := func(n int) string {
		if b := p.Beam(n); b != nil && b.Name != "" {
			return fmt.Sprintf("beam %d %q", n, b.Name)
		}
		return fmt.Sprintf("beam %d", n)
	}
	switch summableTypes[s.SummationType] {
	case "beam":
		// Every beam named must be the plan's.
		for _, part := range s.Parts {
			for _, b := range part.Info.ReferencedBeamNumbers {
				if p.Beam(b) == nil {
					var defined []int
					for _, pb := range p.Beams {
						defined = append(defined, pb.Number)
					}
					sort.Ints(defined)
					return nil, setErr(part.Path, "%s holds beam %d, which %s does not define (beams %s)", pathLabel(part.Path), b, label, FormatNumbers(defined))
				}
			}
		}
		// Which beams the sum must hold: the plan's treatment beams, of
		// the one fraction group the parts name when they all name the
		// same one and the plan has several.
		group := 0
		if len(s.FractionGroups) == 1 && len(p.FractionGroups) > 1 {
			group = s.FractionGroups[0]
		}
		have := map[int]bool{}
		for _, b := range s.Beams {
			have[b] = true
		}
		var missing []int
		var names []string
		for _, b := range p.Beams {
			if !b.IsTreatment() {
				continue
			}
			if g, ok := groupOf[b.Number]; len(p.FractionGroups) > 0 && (!ok || group != 0 && g != group) {
				continue // delivered by no fraction group, or by another
			}
			if !have[b.Number] {
				missing = append(missing, b.Number)
				names = append(names, beamName(b.Number))
			}
		}
		if len(missing) > 0 {
			what := "the plan"
			if group != 0 {
				what = fmt.Sprintf("fraction group %d", group)
			}
			return nil, &DoseSetError{MissingBeams: missing, msg: fmt.Sprintf("%s of %s %s no dose among the %d files summed (beams %s): the sum is not the dose of %s",
				strings.Join(names, ", "), label, map[bool]string{true: "have", false: "has"}[len(missing) > 1], len(s.Parts), FormatNumbers(s.Beams), what)}
		}
		c.Complete = true
		switch {
		case group != 0 && s.SummationType == "BEAM":
			c.SummationType, c.FractionGroup = "FRACTION", group
		case s.SummationType == "BEAM":
			c.SummationType = "PLAN"
		case s.SummationType == "BEAM_SESSION" && (group != 0 || len(p.FractionGroups) == 1):
			c.SummationType, c.FractionGroup = "FRACTION_SESSION", group
			if group == 0 {
				c.FractionGroup = p.FractionGroups[0].Number
			}
		}
		c.Text = fmt.Sprintf("every treatment beam of %s (beams %s)", label, FormatNumbers(s.Beams))
		if group != 0 {
			c.Text = fmt.Sprintf("every treatment beam of fraction group %d of %s (beams %s)", group, label, FormatNumbers(s.Beams))
		}
	case "fraction group":
		defined := map[int]bool{}
		for _, g := range p.FractionGroups {
			defined[g.Number] = true
		}
		for _, part := range s.Parts {
			if g := part.Info.ReferencedFractionGroupNumber; !defined[g] {
				return nil, setErr(part.Path, "%s holds fraction group %d, which %s does not define", pathLabel(part.Path), g, label)
			}
		}
		have := map[int]bool{}
		for _, g := range s.FractionGroups {
			have[g] = true
		}
		var missing []string
		for _, g := range p.FractionGroups {
			if !have[g.Number] {
				missing = append(missing, strconv.Itoa(g.Number))
			}
		}
		if len(missing) > 0 {
			return nil, setErr("", "fraction group %s of %s has no dose among the %d files summed: the sum is not the plan's dose", strings.Join(missing, ", "), label, len(s.Parts))
		}
		c.Complete, c.SummationType = true, "PLAN"
		c.Text = fmt.Sprintf("every fraction group of %s (%s)", label, FormatNumbers(s.FractionGroups))
	default:
		planned := 0
		for _, g := range p.FractionGroups {
			if len(s.FractionGroups) == 0 || g.Number == s.FractionGroups[0] {
				planned += g.FractionsPlanned
			}
		}
		c.Text = fmt.Sprintf("not checked: single sessions carry no number; %d sessions summed, %s plans %d fractions", len(s.Parts), label, planned)
	}
	return c, nil
}
