package dicomio

import (
	"fmt"
	"math"
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
