package dicomio

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"voxgamma/structure"
)

// DoseFile is an RT Dose file found by [ScanFolder], with its header
// (dose values not decoded).
type DoseFile struct {
	Path string
	Info *DoseInfo
}

// StructureFile is an RT Structure Set file found by [ScanFolder].
type StructureFile struct {
	Path string
	Set  *structure.Set
}

// PlanFile is an RT Plan file found by [ScanFolder].
type PlanFile struct {
	Path string
	Plan *Plan
}

// Ignored is a file [ScanFolder] or [Folder.Choose] set aside, and why.
type Ignored struct {
	Path   string
	Reason string
}

// Folder is what [ScanFolder] found in a directory.
type Folder struct {
	Dir           string
	Doses         []DoseFile
	StructureSets []StructureFile
	// Plans are the readable RT Plan files.
	Plans []PlanFile
	// Ignored lists the files that are not usable RT Dose, RT Structure
	// Set or RT Plan files: not DICOM, another modality, unreadable.
	Ignored []Ignored
}

// ScanFolder reads every file in dir (not its subdirectories) and sorts
// them by Modality (0008,0060): RTDOSE headers, RTSTRUCT and RTPLAN files
// are read; everything else is listed in Ignored with the reason. It fails only
// when dir cannot be listed.
func ScanFolder(dir string) (*Folder, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("scanning %s: %w", dir, err)
	}
	fo := &Folder{Dir: dir}
	for _, e := range entries {
		path := filepath.Join(dir, e.Name())
		if e.IsDir() {
			fo.Ignored = append(fo.Ignored, Ignored{path, "directory (subfolders are not searched)"})
			continue
		}
		fo.scanFile(path)
	}
	return fo, nil
}

func (fo *Folder) scanFile(path string) {
	f, err := openFile(path)
	if err != nil {
		reason := err.Error()
		if errors.Is(err, ErrNotDICOM) {
			reason = "not a DICOM file"
		}
		fo.Ignored = append(fo.Ignored, Ignored{path, reason})
		return
	}
	defer f.close()
	switch m := f.ds.str(tagModality); m {
	case "RTDOSE":
		var info *DoseInfo
		err := guard(func() error {
			var err error
			info, _, err = f.doseHeader()
			return err
		})
		if err != nil {
			fo.Ignored = append(fo.Ignored, Ignored{path, "unreadable RT Dose: " + err.Error()})
			return
		}
		fo.Doses = append(fo.Doses, DoseFile{path, info})
	case "RTSTRUCT":
		var set *structure.Set
		err := guard(func() error {
			var err error
			set, err = f.structureSet()
			return err
		})
		if err != nil {
			fo.Ignored = append(fo.Ignored, Ignored{path, "unreadable RT Structure Set: " + err.Error()})
			return
		}
		set.Path = path
		fo.StructureSets = append(fo.StructureSets, StructureFile{path, set})
	case "RTPLAN":
		var p *Plan
		err := guard(func() error {
			var err error
			p, err = f.ds.plan()
			return err
		})
		if err != nil {
			fo.Ignored = append(fo.Ignored, Ignored{path, "unreadable RT Plan: " + err.Error()})
			return
		}
		p.Path = path
		fo.Plans = append(fo.Plans, PlanFile{path, p})
	case "":
		fo.Ignored = append(fo.Ignored, Ignored{path, "DICOM file without Modality (0008,0060)"})
	default:
		fo.Ignored = append(fo.Ignored, Ignored{path, "Modality " + m + " (not RTDOSE, RTSTRUCT or RTPLAN)"})
	}
}

// Choice is what [Folder.Choose] picked, and an account of it.
type Choice struct {
	// Dose is the dose chosen; when the folder holds the parts of a dose
	// rather than a whole (see Doses), the first of them.
	Dose DoseFile
	// Doses are the doses to sum when the folder holds several doses that
	// are parts of one (DoseSummationType BEAM, FRACTION, ... and no
	// whole-plan dose), in file-name order; nil when one dose was chosen.
	// Whether they belong together is checked by [ReadDoseSet].
	Doses []DoseFile
	// StructureSet is the structure set in the dose's frame of reference;
	// nil when the folder holds none.
	StructureSet *StructureFile
	// Plan is the RT Plan the dose was computed for (see [Folder.Choose]);
	// nil when the folder holds none that fits.
	Plan *PlanFile
	// Account says in one line each what was chosen, what was ignored and
	// why ("ignored rtdose_beam2.dcm: DoseSummationType BEAM"), and warns
	// about a choice that deserves a look.
	Account []string
}

// Report returns the account as text, one line each.
func (c *Choice) Report() string { return strings.Join(c.Account, "\n") + "\n" }

// summationRank orders DoseSummationTypes by preference: the plan dose
// first, then other whole-treatment doses, then partial ones.
func summationRank(t string) int {
	switch t {
	case "PLAN":
		return 0
	case "MULTI_PLAN", "BRACHY":
		return 1
	}
	return 2
}

func summationLabel(t string) string {
	if t == "" {
		return "DoseSummationType missing"
	}
	return "DoseSummationType " + t
}

// Role is the part a dose plays in a comparison, for [Folder.ChooseFor].
type Role int

// The roles.
const (
	// AnyRole: no preference between the planning system's dose and an
	// independent one.
	AnyRole Role = iota
	// ReferenceRole: the planning system's dose is preferred.
	ReferenceRole
	// EvaluatedRole: an independent dose is preferred.
	EvaluatedRole
)

func (r Role) String() string {
	switch r {
	case ReferenceRole:
		return "reference"
	case EvaluatedRole:
		return "evaluated dose"
	}
	return "dose"
}

// ChooseOptions tune [Folder.ChooseFor].
type ChooseOptions struct {
	// Role breaks a tie between doses of the same rank: the one dose whose
	// words say it is the planning system's (for ReferenceRole) or an
	// independent dose (for EvaluatedRole), see [DoseOrigin].
	Role Role
	// Exclude lists files not to choose: the file given for the other role
	// (a dose compared with itself means nothing). Paths are compared
	// after symbolic links are resolved.
	Exclude []string
	// ExcludeRole names the role of the excluded files, for the account.
	ExcludeRole Role
}

// Choose is ChooseFor with no role and nothing excluded.
func (fo *Folder) Choose() (*Choice, error) { return fo.ChooseFor(ChooseOptions{}) }

// ChooseFor picks the dose to compare and the structure set that goes with
// it. Maps of disagreement (DoseType ERROR: gamma and difference maps, see
// [DoseInfo.DisagreementMap]) and the files in opt.Exclude are set aside.
// Of the rest it takes the RT Dose with DoseSummationType PLAN (else a
// single MULTI_PLAN or BRACHY dose, else a single dose of another kind, with
// a warning); when several doses share the best rank, the one whose words
// fit opt.Role (and only it) is taken, else it returns an error asking for a
// file. The structure set is the one whose frame of reference is the
// dose's; when several are, it returns an error asking for a file. The plan
// is the RT Plan whose SOPInstanceUID the dose's ReferencedRTPlanSequence
// names; when the dose names none, the folder's only RT Plan if its frame
// of reference (when it states one) is the dose's. A plan is context, never
// a reason to refuse the folder: when none fits, the account says why.
func (fo *Folder) ChooseFor(opt ChooseOptions) (*Choice, error) {
	name := func(p string) string {
		if r, err := filepath.Rel(fo.Dir, p); err == nil {
			return r
		}
		return p
	}
	var ignored []string
	for _, ig := range fo.Ignored {
		ignored = append(ignored, fmt.Sprintf("ignored %s: %s", name(ig.Path), ig.Reason))
	}
	excluded := map[string]bool{}
	for _, p := range opt.Exclude {
		if p != "" {
			excluded[sameFile(p)] = true
		}
	}
	var doses []DoseFile
	var setAside []string
	for _, d := range fo.Doses {
		switch {
		case excluded[sameFile(d.Path)]:
			setAside = append(setAside, fmt.Sprintf("ignored %s: given as the %s", name(d.Path), opt.ExcludeRole))
		case d.Info.DisagreementMap() != "":
			setAside = append(setAside, fmt.Sprintf("ignored %s: %s", name(d.Path), d.Info.DisagreementMap()))
		default:
			doses = append(doses, d)
		}
	}
	if len(doses) == 0 {
		msg := fmt.Sprintf("no usable RT Dose file in %s", fo.Dir)
		if all := append(setAside, ignored...); len(all) > 0 {
			msg += "; " + strings.Join(all, "; ")
		}
		return nil, errors.New(msg)
	}
	best := 3
	for _, d := range doses {
		best = min(best, summationRank(d.Info.DoseSummationType))
	}
	var cands []DoseFile
	var others []DoseFile
	for _, d := range doses {
		if summationRank(d.Info.DoseSummationType) == best {
			cands = append(cands, d)
		} else {
			others = append(others, d)
		}
	}
	var byRole string
	if len(cands) > 1 && opt.Role != AnyRole {
		want := OriginPlanning
		if opt.Role == EvaluatedRole {
			want = OriginIndependent
		}
		var fit, rest []DoseFile
		var why string
		for _, d := range cands {
			if o := DoseOrigin(d.Info); o.Kind() == want {
				fit = append(fit, d)
				why = strings.Join(append(o.Planning, o.Independent...), ", ")
			} else {
				rest = append(rest, d)
			}
		}
		if len(fit) > 0 && len(rest) > 0 {
			kind := "the planning system's dose"
			if want == OriginIndependent {
				kind = "an independent dose"
			}
			chosen := name(fit[0].Path)
			if len(fit) > 1 {
				var names []string
				for _, d := range fit {
					names = append(names, name(d.Path))
				}
				sort.Strings(names)
				chosen = strings.Join(names, ", ")
				kind += "s"
			}
			byRole = fmt.Sprintf("chose %s as the %s among %d doses of the same kind: it reads as %s (%s)", chosen, opt.Role, len(cands), kind, why)
			if len(fit) > 1 {
				byRole = fmt.Sprintf("chose %s as the %s among %d doses of the same kind: they read as %s (%s)", chosen, opt.Role, len(cands), kind, why)
			}
			cands = fit
			others = append(others, rest...)
		}
	}
	if len(cands) > 1 && best == 2 {
		// The parts of a dose (beams, fraction groups, sessions) and no
		// whole: they are summed, once ReadDoseSet has checked that they
		// belong together.
		sort.Slice(cands, func(i, j int) bool { return cands[i].Path < cands[j].Path })
		c := &Choice{Dose: cands[0], Doses: cands}
		var names []string
		for _, d := range cands {
			names = append(names, fmt.Sprintf("%s (%s)", name(d.Path), summationLabel(d.Info.DoseSummationType)))
		}
		c.Account = append(c.Account, fmt.Sprintf("chose %d doses to sum, the folder holding no whole-plan dose: %s", len(cands), strings.Join(names, ", ")))
		if byRole != "" {
			c.Account = append(c.Account, byRole)
		}
		for _, o := range others {
			c.Account = append(c.Account, fmt.Sprintf("ignored %s: %s, not read as the %s", name(o.Path), summationLabel(o.Info.DoseSummationType), opt.Role))
		}
		c.Account = append(c.Account, setAside...)
		if err := c.chooseStructures(fo, name); err != nil {
			return nil, err
		}
		c.choosePlan(fo, name)
		c.Account = append(c.Account, ignored...)
		return c, nil
	}
	if len(cands) > 1 {
		var names []string
		for _, d := range cands {
			names = append(names, fmt.Sprintf("%s (%s)", name(d.Path), summationLabel(d.Info.DoseSummationType)))
		}
		sort.Strings(names)
		return nil, fmt.Errorf("%d RT Dose files in %s could be the plan dose: %s; name the file to use", len(cands), fo.Dir, strings.Join(names, ", "))
	}
	d := cands[0]
	c := &Choice{Dose: d}
	in := d.Info
	c.Account = append(c.Account, fmt.Sprintf("chose dose %s: %s, DoseUnits %s, %d×%d×%d grid, frame of reference %s",
		name(d.Path), summationLabel(in.DoseSummationType), in.DoseUnits, in.Columns, in.Rows, in.NumberOfFrames, orNone(in.FrameOfReferenceUID)))
	if byRole != "" {
		c.Account = append(c.Account, byRole)
	}
	if best == 2 {
		c.Account = append(c.Account, fmt.Sprintf("warning: %s is not a whole-plan dose (%s): comparing a beam, fraction-group or session dose with a plan dose is a classic mistake",
			name(d.Path), summationLabel(in.DoseSummationType)))
	}
	for _, o := range others {
		if byRole != "" && summationRank(o.Info.DoseSummationType) == best {
			c.Account = append(c.Account, fmt.Sprintf("ignored %s: %s, not read as the %s", name(o.Path), summationLabel(o.Info.DoseSummationType), opt.Role))
			continue
		}
		c.Account = append(c.Account, fmt.Sprintf("ignored %s: %s", name(o.Path), summationLabel(o.Info.DoseSummationType)))
	}
	c.Account = append(c.Account, setAside...)
	if err := c.chooseStructures(fo, name); err != nil {
		return nil, err
	}
	c.choosePlan(fo, name)
	c.Account = append(c.Account, ignored...)
	return c, nil
}

// chooseStructures picks the structure set in the chosen dose's frame of
// reference.
func (c *Choice) chooseStructures(fo *Folder, name func(string) string) error {
	in := c.Dose.Info
	var match []StructureFile
	var mismatch []string
	for _, s := range fo.StructureSets {
		if in.FrameOfReferenceUID != "" && setInFrame(s.Set, in.FrameOfReferenceUID) {
			match = append(match, s)
		} else {
			mismatch = append(mismatch, fmt.Sprintf("ignored %s: frame of reference %s is not the dose's %s",
				name(s.Path), orNone(s.Set.FrameOfReferenceUID), orNone(in.FrameOfReferenceUID)))
		}
	}
	switch {
	case len(match) > 1:
		var names []string
		for _, s := range match {
			names = append(names, name(s.Path))
		}
		sort.Strings(names)
		return fmt.Errorf("%d RT Structure Set files in %s share the dose's frame of reference: %s; name the file to use", len(match), fo.Dir, strings.Join(names, ", "))
	case len(match) == 1:
		s := match[0]
		c.StructureSet = &s
		c.Account = append(c.Account, fmt.Sprintf("chose structure set %s: label %q, %d ROIs, same frame of reference as the dose", name(s.Path), s.Set.Label, len(s.Set.ROIs)))
	case len(fo.StructureSets) > 0:
		c.Account = append(c.Account, "no RT Structure Set in the dose's frame of reference")
	default:
		c.Account = append(c.Account, "no RT Structure Set in the folder")
	}
	c.Account = append(c.Account, mismatch...)
	return nil
}

// sameFile returns path made absolute with symbolic links resolved, for
// telling whether two names are one file.
func sameFile(path string) string {
	a, err := filepath.Abs(path)
	if err != nil {
		return path
	}
	if r, err := filepath.EvalSymlinks(a); err == nil {
		return r
	}
	return a
}

// choosePlan picks the RT Plan of the chosen dose (see [Folder.ChooseFor]).
func (c *Choice) choosePlan(fo *Folder, name func(string) string) {
	in := c.Dose.Info
	want := in.ReferencedRTPlanUID
	var pick *PlanFile
	var other []string
	for i := range fo.Plans {
		p := &fo.Plans[i]
		switch {
		case want != "" && p.Plan.SOPInstanceUID == want:
			pick = p
		case want != "":
			other = append(other, fmt.Sprintf("ignored %s: the dose was computed for plan %s, not this plan's %s", name(p.Path), want, orNone(p.Plan.SOPInstanceUID)))
		case len(fo.Plans) > 1:
			other = append(other, fmt.Sprintf("ignored %s: the dose names no plan and the folder holds %d RT Plans", name(p.Path), len(fo.Plans)))
		case p.Plan.FrameOfReferenceUID != "" && p.Plan.FrameOfReferenceUID != in.FrameOfReferenceUID:
			other = append(other, fmt.Sprintf("ignored %s: frame of reference %s is not the dose's %s", name(p.Path), p.Plan.FrameOfReferenceUID, orNone(in.FrameOfReferenceUID)))
		default:
			pick = p
		}
	}
	switch {
	case pick != nil && want != "":
		c.Account = append(c.Account, fmt.Sprintf("chose plan %s: label %q, the plan the dose names", name(pick.Path), pick.Plan.Label))
	case pick != nil:
		c.Account = append(c.Account, fmt.Sprintf("chose plan %s: label %q, the folder's only RT Plan (the dose names no plan)", name(pick.Path), pick.Plan.Label))
	case want != "" && len(fo.Plans) > 0:
		c.Account = append(c.Account, fmt.Sprintf("no RT Plan in the folder is the dose's plan %s", want))
	}
	c.Plan = pick
	c.Account = append(c.Account, other...)
}

// setInFrame reports whether the set, or any of its ROIs, is in frame uid.
func setInFrame(s *structure.Set, uid string) bool {
	if s.FrameOfReferenceUID == uid {
		return true
	}
	for _, r := range s.ROIs {
		if r.FrameOfReferenceUID == uid {
			return true
		}
	}
	return false
}

func orNone(s string) string {
	if s == "" {
		return "(none given)"
	}
	return s
}
