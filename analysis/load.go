package analysis

import (
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"sync"

	"voxgamma/dicomio"
	"voxgamma/gamma"
	"voxgamma/internal/fault"
	"voxgamma/noise"
	"voxgamma/result"
	"voxgamma/structure"
	"voxgamma/volume"
)

// Inputs names the files of one comparison.
type Inputs struct {
	// Reference is an RT Dose file or a folder holding one (or holding the
	// parts of one, summed: see ReferenceFiles); empty when
	// ReferencePoints or ReferenceFiles is given.
	Reference string
	// ReferenceFiles, when it holds two or more RT Dose files, are the
	// parts of the reference dose (its beams, fraction groups or
	// sessions): checked to belong together and summed (see
	// dicomio.ReadDoseSet). One file is as Reference.
	ReferenceFiles []string
	// ReferencePoints is a CSV of measured points (header
	// x_mm,y_mm,z_mm,dose_gy) used instead of Reference.
	ReferencePoints string
	// Evaluated is an RT Dose file or a folder holding one (or the parts
	// of one, summed).
	Evaluated string
	// EvaluatedFiles are the parts of the evaluated dose, as
	// ReferenceFiles.
	EvaluatedFiles []string
	// Structures is an RT Structure Set file; empty for none. When empty
	// and Reference is a folder, the folder's structure set (in the
	// reference's frame of reference) is used.
	Structures string
	// Plan is an RT Plan file; empty for none. When empty and Reference is
	// a folder, the folder's RT Plan that the reference dose names is used.
	// The plan is context for the reviewer: it changes no number.
	Plan string
	// AllowFrameMismatch lets doses and structures of different frames of
	// reference be compared (the user vouches that their coordinates agree).
	AllowFrameMismatch bool
	// NoStructures runs the comparison deliberately without a structure
	// set: none is looked for in the reference folder, Structures must be
	// empty, and per-ROI rules are not applicable.
	NoStructures bool
	// Seen, when not nil, is told of every file as it is about to be read
	// (dose and set nil) and once its header has been read: role is
	// "reference", "evaluated", "structures" or "reference points" for the
	// files compared, "" for the other files of a folder scanned. The
	// de-identification learns there what to remove from messages before
	// any message can name it.
	Seen func(role, path string, dose *dicomio.DoseInfo, set *structure.Set)
	// EvaluatedUncertainty is an RT Dose or MetaImage (.mha) of the
	// evaluated dose's per-voxel 1σ (absolute or relative); empty for none.
	EvaluatedUncertainty string
}

func (in Inputs) seen(role, path string, dose *dicomio.DoseInfo, set *structure.Set) {
	if in.Seen != nil && path != "" {
		in.Seen(role, path, dose, set)
	}
}

// Loaded is everything read for one comparison, checked for consistency.
type Loaded struct {
	// Reference is the reference grid; nil when the reference is points.
	Reference     *volume.Grid
	ReferenceInfo *dicomio.DoseInfo
	// Points are the scattered reference points; nil for a grid reference.
	Points    []gamma.Point
	Evaluated *volume.Grid
	// EvaluatedInfo describes the evaluated dose file.
	EvaluatedInfo *dicomio.DoseInfo
	// Structures is the structure set; nil when none was given.
	Structures *structure.Set
	// Plan is the RT Plan and PlanInfo its summary for the result; nil
	// when none was given or found.
	Plan     *dicomio.Plan
	PlanInfo *result.Plan
	// Inputs describes each file read, for the result.
	Inputs []result.Input
	// Warnings and Notes found while loading.
	Warnings, Notes []string
	// Paths lists every input file read, so that outputs can refuse to
	// overwrite them.
	Paths []string
	// DoseSums describes each dose summed from several files; ReferenceSet
	// and EvaluatedSet are those sets (nil for a dose read from one file).
	DoseSums                   []result.DoseSum
	ReferenceSet, EvaluatedSet *dicomio.DoseSet
	// DoseTypeMismatch says why the doses' DoseType values differ
	// (dicomio.DoseTypeMismatch), SwapEvidence why the files read as the
	// wrong way round (dicomio.SwapEvidence); "" when not. Prepare refuses
	// or warns, as the settings say.
	DoseTypeMismatch, SwapEvidence string

	// uncertainty is the evaluated dose's uncertainty map (nil for none)
	// and uncertaintyUnit the unit its file states.
	uncertainty     *volume.Grid
	uncertaintyUnit noise.MapUnit
}

// ErrBadInput marks errors caused by the inputs (a file that cannot be read
// or that contradicts another): a pipeline's "could not evaluate".
var ErrBadInput = errors.New("bad input")

func badInput(format string, args ...any) error {
	return fmt.Errorf("%w: %s", ErrBadInput, fmt.Sprintf(format, args...))
}

// given returns the paths given for one dose: the files, or the one path.
func given(one string, files []string) []string {
	if len(files) > 0 {
		return files
	}
	if one != "" {
		return []string{one}
	}
	return nil
}

// Load reads and checks the inputs. Every error names the file at fault and
// matches ErrBadInput.
func Load(in Inputs) (*Loaded, error) {
	l := &Loaded{}
	refGiven, evalGiven := given(in.Reference, in.ReferenceFiles), given(in.Evaluated, in.EvaluatedFiles)
	if (len(refGiven) == 0) == (in.ReferencePoints == "") {
		return nil, badInput("give either a reference dose or reference points, not both and not neither")
	}
	if len(evalGiven) == 0 {
		return nil, badInput("no evaluated dose given")
	}
	if in.NoStructures && in.Structures != "" {
		return nil, badInput("a structure set (%s) was given with --no-structures: give one or the other", in.Structures)
	}

	for _, p := range refGiven {
		in.seen("reference", p, nil, nil)
	}
	in.seen("reference points", in.ReferencePoints, nil, nil)
	for _, p := range evalGiven {
		in.seen("evaluated", p, nil, nil)
	}
	in.seen("structures", in.Structures, nil, nil)
	in.seen("plan", in.Plan, nil, nil)
	in.seen("evaluated uncertainty", in.EvaluatedUncertainty, nil, nil)
	// Evaluated first: the reference points are in its coordinates. A
	// folder never yields a file given as the other dose, and when both
	// are folders the words of the files decide which is which.
	evalPaths, _, _, evalAccount, err := in.resolveDoses("evaluated", "evaluated dose", evalGiven, dicomio.ChooseOptions{Role: dicomio.EvaluatedRole,
		Exclude: filesOnly(refGiven), ExcludeRole: dicomio.ReferenceRole})
	if err != nil {
		return nil, err
	}
	// Both doses are read at once, the reference on its own goroutine:
	// decoding and hashing each file is single-threaded work. Everything
	// the reference's reading records goes into its own Loaded and joins
	// this one afterwards, in the order a sequential reading gives (the
	// evaluated dose's inputs and messages first); the errors come in that
	// order too.
	in.Seen = serialised(in.Seen)
	structuresPath := in.Structures
	planPath, planSource := in.Plan, "--plan"
	var (
		refPaths, refAccount []string
		folderRS, folderPlan string
		refErr               error
		ref                  *doseRead
	)
	if len(refGiven) > 0 {
		refPaths, folderRS, folderPlan, refAccount, refErr = in.resolveDoses("reference", "reference", refGiven, dicomio.ChooseOptions{Role: dicomio.ReferenceRole,
			Exclude: evalPaths, ExcludeRole: dicomio.EvaluatedRole})
		if refErr == nil {
			refErr = distinctDoses(refPaths, evalPaths)
		}
		if refErr == nil {
			ref = startDoseRead(in, "reference", "reference", refPaths)
		}
	}
	l.Notes = append(l.Notes, evalAccount...)
	if l.Evaluated, l.EvaluatedInfo, l.EvaluatedSet, err = l.loadDose(in, "evaluated", "evaluated dose", evalPaths); err != nil {
		ref.wait() // nothing reads on after Load returns; its error comes second
		return nil, err
	}

	if len(refGiven) > 0 {
		if refErr != nil {
			return nil, refErr
		}
		l.Notes = append(l.Notes, refAccount...)
		if planPath == "" && folderPlan != "" {
			planPath, planSource = folderPlan, "reference folder"
		}
		if err := ref.wait(); err != nil {
			return nil, err
		}
		l.join(ref.part)
		l.Reference, l.ReferenceInfo, l.ReferenceSet = ref.g, ref.info, ref.set
		if structuresPath == "" && !in.NoStructures {
			structuresPath = folderRS
		}
		if in.NoStructures && folderRS != "" {
			l.Notes = append(l.Notes, fmt.Sprintf("the structure set %s in the reference folder was not used (--no-structures)", folderRS))
		}
	} else {
		if l.Points, err = ReadPoints(in.ReferencePoints); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
		sum, err := fileSHA256(in.ReferencePoints)
		if err != nil {
			return nil, badInput("reading %s: %v", in.ReferencePoints, err)
		}
		l.Inputs = append(l.Inputs, result.Input{Role: "reference points", Path: in.ReferencePoints, SHA256: sum,
			Description: fmt.Sprintf("%d measured points, in the evaluated dose's coordinates", len(l.Points))})
		l.Paths = append(l.Paths, in.ReferencePoints)
	}

	if structuresPath != "" {
		in.seen("structures", structuresPath, nil, nil)
		if l.Structures, err = dicomio.ReadStructureSet(structuresPath); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
		in.seen("structures", structuresPath, nil, l.Structures)
		sum, err := fileSHA256(structuresPath)
		if err != nil {
			return nil, badInput("reading %s: %v", structuresPath, err)
		}
		s := l.Structures
		l.Inputs = append(l.Inputs, result.Input{Role: "structures", Path: structuresPath, SHA256: sum, Modality: "RTSTRUCT",
			SOPInstanceUID: s.SOPInstanceUID, FrameOfReferenceUID: s.FrameOfReferenceUID, PatientID: s.PatientID,
			PatientName: s.PatientName, Description: fmt.Sprintf("structure set %q, %d ROIs", s.Label, len(s.ROIs))})
		l.Paths = append(l.Paths, structuresPath)
	}

	if planPath != "" {
		if err := l.loadPlan(in, planPath, planSource); err != nil {
			return nil, err
		}
	}
	if err := l.checkPlanParts(); err != nil {
		return nil, err
	}
	if in.EvaluatedUncertainty != "" {
		if err := l.loadUncertainty(in, in.EvaluatedUncertainty); err != nil {
			return nil, err
		}
	}

	if l.Reference != nil {
		l.DoseTypeMismatch = dicomio.DoseTypeMismatch(l.ReferenceInfo, l.EvaluatedInfo)
		l.SwapEvidence = dicomio.SwapEvidence(l.ReferenceInfo, l.EvaluatedInfo)
		f := dicomio.CheckConsistency(l.ReferenceInfo, l.Reference, l.EvaluatedInfo, l.Evaluated, l.Structures, in.AllowFrameMismatch)
		l.Warnings = append(l.Warnings, f.Warnings...)
		if err := f.Err(); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
	} else {
		if l.Structures != nil {
			return nil, badInput("structures cannot be used with reference points: per-ROI results need a reference grid")
		}
		if l.EvaluatedInfo.Relative() {
			l.Warnings = append(l.Warnings, fmt.Sprintf("the evaluated dose %s is RELATIVE while the reference points are in Gy", strings.Join(evalPaths, ", ")))
		}
	}
	return l, nil
}

// filesOnly returns the paths that name something other than a folder (a
// folder given for one dose excludes nothing from the other's).
func filesOnly(paths []string) []string {
	var out []string
	for _, p := range paths {
		if st, err := os.Stat(p); p != "" && err == nil && !st.IsDir() {
			out = append(out, p)
		}
	}
	return out
}

// loadUncertainty reads the evaluated dose's uncertainty map and records it
// as an input. An RT Dose must share the evaluated dose's frame of
// reference; a MetaImage carries none and is taken to be in the evaluated
// dose's coordinates.
func (l *Loaded) loadUncertainty(in Inputs, path string) error {
	g, unit, info, err := readUncertaintyMap(path)
	if err != nil {
		return err
	}
	in.seen("evaluated uncertainty", path, info, nil)
	allowFrameMismatch := in.AllowFrameMismatch
	sum, err := fileSHA256(path)
	if err != nil {
		return badInput("reading %s: %v", path, err)
	}
	ri := result.Input{Role: "evaluated uncertainty", Path: path, SHA256: sum}
	max, _ := g.Max()
	ri.Grid = GridInfo(g, float64(max))
	if info != nil {
		ri.Modality, ri.SOPInstanceUID, ri.FrameOfReferenceUID = "RTDOSE", info.SOPInstanceUID, info.FrameOfReferenceUID
		ri.PatientID, ri.PatientName, ri.DoseUnits, ri.DoseType = info.PatientID, info.PatientName, info.DoseUnits, info.DoseType
		if e := l.EvaluatedInfo.FrameOfReferenceUID; !allowFrameMismatch && info.FrameOfReferenceUID != "" && e != "" && info.FrameOfReferenceUID != e {
			return badInput("the uncertainty map %s is in frame of reference %s, the evaluated dose in %s", path, info.FrameOfReferenceUID, e)
		}
		ri.Description = "per-voxel 1σ of the evaluated dose, " + info.UnitLabel()
	} else {
		ri.Modality, ri.Description = "MetaImage", "per-voxel 1σ of the evaluated dose, in the evaluated dose's coordinates"
	}
	l.Inputs = append(l.Inputs, ri)
	l.Paths = append(l.Paths, path)
	l.uncertainty, l.uncertaintyUnit = g, unit
	return nil
}

// sameFile reports whether two paths name one file.
func sameFile(a, b string) bool {
	sa, errA := os.Stat(a)
	sb, errB := os.Stat(b)
	return errA == nil && errB == nil && os.SameFile(sa, sb)
}

// resolveDoses returns the RT Dose files given for one dose (label names
// it in messages): the files themselves, or what a folder holds: the plan
// dose chosen in it, or the parts of the dose when it holds those and no
// whole (see dicomio.Folder.ChooseFor), with the structure set and the RT
// Plan chosen with it ("" when none) and the account of the choice. Every
// file of a folder is reported to Seen (role "" but for the chosen ones,
// which get seenRole).
func (in Inputs) resolveDoses(seenRole, label string, paths []string, opt dicomio.ChooseOptions) (doses []string, structures, plan string, account []string, err error) {
	if len(paths) > 1 {
		for _, p := range paths {
			st, err := os.Stat(p)
			if err != nil {
				return nil, "", "", nil, badInput("%v", err)
			}
			if st.IsDir() {
				return nil, "", "", nil, badInput("the %s is given as %d paths and %s is a folder: give one folder, or the RT Dose files to sum", label, len(paths), p)
			}
		}
		return paths, "", "", nil, nil
	}
	path := paths[0]
	st, err := os.Stat(path)
	if err != nil {
		return nil, "", "", nil, badInput("%v", err)
	}
	if !st.IsDir() {
		return []string{path}, "", "", nil, nil
	}
	folder, err := dicomio.ScanFolder(path)
	if err != nil {
		return nil, "", "", nil, fmt.Errorf("%w: %w", ErrBadInput, err)
	}
	for _, d := range folder.Doses {
		in.seen("", d.Path, d.Info, nil)
	}
	for _, s := range folder.StructureSets {
		in.seen("", s.Path, nil, s.Set)
	}
	for _, p := range folder.Plans {
		in.seen("", p.Path, PlanSeen(p.Plan), nil)
	}
	for _, ig := range folder.Ignored {
		in.seen("", ig.Path, nil, nil)
	}
	choice, err := folder.ChooseFor(opt)
	if err != nil {
		return nil, "", "", nil, fmt.Errorf("%w: folder %s (for the %s): %w", ErrBadInput, path, opt.Role, err)
	}
	if choice.StructureSet != nil {
		structures = choice.StructureSet.Path
		in.seen("structures", structures, nil, choice.StructureSet.Set)
	}
	chosen := []dicomio.DoseFile{choice.Dose}
	if len(choice.Doses) > 1 {
		chosen = choice.Doses
	}
	for _, d := range chosen {
		in.seen(seenRole, d.Path, d.Info, nil)
		doses = append(doses, d.Path)
	}
	if choice.Plan != nil {
		plan = choice.Plan.Path
		in.seen("plan", plan, PlanSeen(choice.Plan.Plan), nil)
	}
	return doses, structures, plan, choice.Account, nil
}

// loadPlan reads the RT Plan, lists it among the inputs and checks it
// against the reference dose: a plan of another patient, frame of
// reference or a plan the reference dose does not name is a warning.
func (l *Loaded) loadPlan(in Inputs, path, source string) error {
	p, err := dicomio.ReadPlan(path)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrBadInput, err)
	}
	in.seen("plan", path, PlanSeen(p), nil)
	sum, err := fileSHA256(path)
	if err != nil {
		return badInput("reading %s: %v", path, err)
	}
	l.Plan = p
	l.PlanInfo = PlanInfo(p, source, l.ReferenceInfo)
	desc := fmt.Sprintf("RT Plan %q", p.Label)
	if p.Name != "" && p.Name != p.Label {
		desc += fmt.Sprintf(" (%s)", p.Name)
	}
	l.Inputs = append(l.Inputs, result.Input{Role: "plan", Path: path, SHA256: sum, Modality: "RTPLAN",
		SOPInstanceUID: p.SOPInstanceUID, FrameOfReferenceUID: p.FrameOfReferenceUID, PatientID: p.PatientID,
		PatientName: p.PatientName, Description: desc})
	l.Paths = append(l.Paths, path)
	for _, n := range p.Notes {
		l.Notes = append(l.Notes, fmt.Sprintf("%s: %s", path, n))
	}
	if ref := l.ReferenceInfo; ref != nil {
		switch {
		case ref.ReferencedRTPlanUID != "" && ref.ReferencedRTPlanUID != p.SOPInstanceUID:
			l.Warnings = append(l.Warnings, fmt.Sprintf("the reference dose was computed for plan %s, not for the plan %s (%s): the plan shown may not be the plan checked",
				ref.ReferencedRTPlanUID, path, orNone(p.SOPInstanceUID)))
		}
		if p.FrameOfReferenceUID != "" && ref.FrameOfReferenceUID != "" && p.FrameOfReferenceUID != ref.FrameOfReferenceUID {
			l.Warnings = append(l.Warnings, fmt.Sprintf("the plan %s is in frame of reference %s, the reference dose in %s", path, p.FrameOfReferenceUID, ref.FrameOfReferenceUID))
		}
		if p.PatientID != "" && ref.PatientID != "" && p.PatientID != ref.PatientID {
			l.Warnings = append(l.Warnings, fmt.Sprintf("the plan %s is for patient ID %s, the reference dose for %s", path, p.PatientID, ref.PatientID))
		}
	}
	return nil
}

// PlanSeen is what an RT Plan identifies, in the form Inputs.Seen takes
// (a dose header): the patient, study and frame of reference identifiers,
// the plan's instance and series UIDs, and its label and name as the free
// text a de-identification removes (as it removes a dose's series
// description and comment).
func PlanSeen(p *dicomio.Plan) *dicomio.DoseInfo {
	return &dicomio.DoseInfo{Identifiers: p.Identifiers, SOPInstanceUID: p.SOPInstanceUID, SeriesInstanceUID: p.SeriesInstanceUID,
		SeriesDescription: p.Label, DoseComment: p.Name}
}

func orNone(s string) string {
	if s == "" {
		return "no SOPInstanceUID"
	}
	return s
}

// PlanInfo summarises an RT Plan for the result. ref, when not nil, is the
// reference dose, whose ReferencedRTPlanSequence says whether it belongs to
// this plan.
func PlanInfo(p *dicomio.Plan, source string, ref *dicomio.DoseInfo) *result.Plan {
	out := &result.Plan{
		Source: source, SOPInstanceUID: p.SOPInstanceUID,
		Label: p.Label, Name: p.Name, Description: p.Description, Intent: p.Intent, ApprovalStatus: p.ApprovalStatus,
		Prescriptions: []result.PlanPrescription{}, FractionGroups: []result.PlanFractionGroup{}, Beams: []result.PlanBeam{},
	}
	if rx, ok := p.PrescriptionGy(); ok {
		out.PrescriptionGy = &rx
	}
	for _, d := range p.Prescriptions() {
		out.Prescriptions = append(out.Prescriptions, result.PlanPrescription{Description: d.Description, DoseGy: *d.TargetPrescriptionGy, ROINumber: d.ReferencedROINumber})
	}
	total, stated := 0, false
	groupOf := map[int]*dicomio.FractionGroup{}
	for i := range p.FractionGroups {
		g := &p.FractionGroups[i]
		fg := result.PlanFractionGroup{Number: g.Number, Beams: []int{}}
		if g.FractionsPlanned > 0 {
			n := g.FractionsPlanned
			fg.FractionsPlanned = &n
			total += n
			stated = true
		}
		for _, b := range g.Beams {
			fg.Beams = append(fg.Beams, b.BeamNumber)
			if groupOf[b.BeamNumber] == nil {
				groupOf[b.BeamNumber] = g
			}
		}
		out.FractionGroups = append(out.FractionGroups, fg)
	}
	if stated {
		out.FractionsPlanned = &total
	}
	for _, b := range p.Beams {
		pb := result.PlanBeam{Number: b.Number, Name: b.Name, Type: b.Type, RadiationType: b.RadiationType,
			DeliveryType: b.DeliveryType, Machine: b.MachineName, EnergyNominal: b.NominalEnergy, GantryDeg: b.GantryAngleDeg,
			MetersetUnit: b.DosimeterUnit}
		if g := groupOf[b.Number]; g != nil {
			pb.FractionGroup = g.Number
			if ms, ok := g.Meterset(b.Number); ok {
				pb.Meterset = &ms
			}
		}
		out.Beams = append(out.Beams, pb)
	}
	switch {
	case ref == nil || ref.ReferencedRTPlanUID == "":
		out.ReferenceDose = "names no plan"
	case ref.ReferencedRTPlanUID == p.SOPInstanceUID:
		out.ReferenceDose = "names this plan"
	default:
		out.ReferenceDose = "names another plan"
	}
	return out
}

// readDose reads the dose given for role ("reference", "evaluated dose"),
// refusing a map of disagreement (DoseType ERROR: a gamma or difference
// map) in either role. Seen learns of the file as seenRole before it is
// read and with its header after.
func (in Inputs) readDose(path, role, seenRole string) (*volume.Grid, *dicomio.DoseInfo, error) {
	in.seen(seenRole, path, nil, nil)
	g, info, err := dicomio.ReadDose(path)
	if err != nil {
		return nil, nil, fmt.Errorf("%w: %w", ErrBadInput, err)
	}
	in.seen(seenRole, path, info, nil)
	if why := info.DisagreementMap(); why != "" {
		return nil, nil, badInput("%s %s: %s; give a dose as the %s", role, path, why, role)
	}
	return g, info, nil
}

func (l *Loaded) addDoseInput(role, path string, info *dicomio.DoseInfo, g *volume.Grid) error {
	sum, err := fileSHA256(path)
	if err != nil {
		return badInput("reading %s: %v", path, err)
	}
	max, _ := g.Max()
	l.Inputs = append(l.Inputs, result.Input{
		Role: role, Path: path, SHA256: sum, Modality: "RTDOSE",
		SOPInstanceUID: info.SOPInstanceUID, FrameOfReferenceUID: info.FrameOfReferenceUID,
		PatientID: info.PatientID, PatientName: info.PatientName,
		DoseUnits: info.DoseUnits, DoseType: info.DoseType, DoseSummationType: info.DoseSummationType,
		Grid:        GridInfo(g, float64(max)),
		Description: strings.TrimSpace(strings.Join([]string{info.Manufacturer, info.ManufacturerModelName, info.SeriesDescription}, " ")),
	})
	for _, n := range info.Notes {
		l.Notes = append(l.Notes, fmt.Sprintf("%s: %s", path, n))
	}
	l.Paths = append(l.Paths, path)
	return nil
}

// loadDose reads the dose of one role ("reference", "evaluated"; label
// names it in messages) from one file, or sums several (see
// dicomio.ReadDoseSet), listing every file among the inputs.
func (l *Loaded) loadDose(in Inputs, role, label string, paths []string) (*volume.Grid, *dicomio.DoseInfo, *dicomio.DoseSet, error) {
	if len(paths) == 1 {
		g, info, err := in.readDose(paths[0], label, role)
		if err != nil {
			return nil, nil, nil, err
		}
		if err := l.addDoseInput(role, paths[0], info, g); err != nil {
			return nil, nil, nil, err
		}
		return g, info, nil, nil
	}
	for _, p := range paths {
		in.seen(role, p, nil, nil)
	}
	set, err := dicomio.ReadDoseSet(paths)
	if err != nil {
		return nil, nil, nil, badInput("the %s given as %d RT Dose files to sum: %v", label, len(paths), err)
	}
	for _, part := range set.Parts {
		in.seen(role, part.Path, part.Info, nil)
	}
	var inputErr error
	g, info, err := set.Sum(func(i int, pg *volume.Grid) {
		part := set.Parts[i]
		if err := l.addDoseInput(role, part.Path, part.Info, pg); err != nil && inputErr == nil {
			inputErr = err
		}
		inp := &l.Inputs[len(l.Inputs)-1]
		inp.Part = i + 1
		inp.Description = strings.TrimSpace(fmt.Sprintf("part %d of %d of the %s (%s%s) %s", i+1, len(set.Parts), label,
			part.Info.DoseSummationType, partWhich(part.Info), inp.Description))
	})
	if inputErr != nil {
		return nil, nil, nil, inputErr
	}
	if err != nil {
		var se *dicomio.DoseSetError
		if errors.As(err, &se) {
			return nil, nil, nil, badInput("the %s given as %d RT Dose files to sum: %v", label, len(paths), err)
		}
		return nil, nil, nil, fmt.Errorf("%w: %w", ErrBadInput, err)
	}
	max, _ := g.Max()
	sum := result.DoseSum{Role: role, Parts: len(set.Parts), SummationType: set.SummationType,
		Beams: set.Beams, FractionGroups: set.FractionGroups, Resampled: !set.SameGrid, Method: set.Method,
		PlanCheck: "not checked: no RT Plan", Grid: GridInfo(g, float64(max))}
	l.DoseSums = append(l.DoseSums, sum)
	l.Notes = append(l.Notes, fmt.Sprintf("the %s is %s: %s", label, info.SumLabel(), set.Method))
	for _, n := range set.Notes {
		l.Notes = append(l.Notes, fmt.Sprintf("the %s: %s", label, n))
	}
	for _, w := range set.Warnings {
		l.Warnings = append(l.Warnings, fmt.Sprintf("the %s: %s", label, w))
	}
	return g, info, set, nil
}

// doseRead is a dose being read on its own goroutine (startDoseRead).
type doseRead struct {
	done chan struct{}
	// part receives what reading the dose records (inputs, notes,
	// warnings, paths, sums); the caller joins it to its Loaded.
	part *Loaded
	g    *volume.Grid
	info *dicomio.DoseInfo
	set  *dicomio.DoseSet
	err  error
}

// startDoseRead starts reading the dose of one role from paths (see
// loadDose). in.Seen must be safe for concurrent use (serialised).
func startDoseRead(in Inputs, role, label string, paths []string) *doseRead {
	r := &doseRead{done: make(chan struct{}), part: &Loaded{}}
	go func() {
		defer close(r.done)
		defer func() {
			// A panic here cannot reach the command's own recovery, which
			// runs on another goroutine: it ends as the same kind of
			// message (dicomio already turns a malformed file's decoding
			// faults into errors of that file).
			if v := recover(); v != nil {
				r.err = fmt.Errorf("internal error reading the %s %s: %v", label, strings.Join(paths, ", "), v)
			}
		}()
		fault.Point(fault.ReferenceReader)
		r.g, r.info, r.set, r.err = r.part.loadDose(in, role, label, paths)
	}()
	return r
}

// wait waits for the reading to end and returns its error; on a nil
// doseRead it returns nil at once.
func (r *doseRead) wait() error {
	if r == nil {
		return nil
	}
	<-r.done
	return r.err
}

// join appends what another reading recorded to l, after l's own.
func (l *Loaded) join(o *Loaded) {
	l.Inputs = append(l.Inputs, o.Inputs...)
	l.Warnings = append(l.Warnings, o.Warnings...)
	l.Notes = append(l.Notes, o.Notes...)
	l.Paths = append(l.Paths, o.Paths...)
	l.DoseSums = append(l.DoseSums, o.DoseSums...)
}

// serialised returns seen made safe for concurrent use (one call at a
// time), or nil for nil.
func serialised(seen func(role, path string, dose *dicomio.DoseInfo, set *structure.Set)) func(role, path string, dose *dicomio.DoseInfo, set *structure.Set) {
	if seen == nil {
		return nil
	}
	var mu sync.Mutex
	return func(role, path string, dose *dicomio.DoseInfo, set *structure.Set) {
		mu.Lock()
		defer mu.Unlock()
		seen(role, path, dose, set)
	}
}

// distinctDoses refuses a file given (or chosen in a folder) as both the
// reference and the evaluated dose.
func distinctDoses(refPaths, evalPaths []string) error {
	for _, r := range refPaths {
		for _, e := range evalPaths {
			if r == e || sameFile(r, e) {
				return badInput("%s is both the reference and the evaluated dose", r)
			}
		}
	}
	return nil
}

// partWhich names the beams or fraction group a part holds, e.g.
// ", beam 2".
func partWhich(d *dicomio.DoseInfo) string {
	switch {
	case len(d.ReferencedBeamNumbers) == 1:
		return fmt.Sprintf(", beam %d", d.ReferencedBeamNumbers[0])
	case len(d.ReferencedBeamNumbers) > 1:
		return ", beams " + dicomio.FormatNumbers(d.ReferencedBeamNumbers)
	case d.ReferencedFractionGroupNumber > 0:
		return fmt.Sprintf(", fraction group %d", d.ReferencedFractionGroupNumber)
	}
	return ""
}

// GridInfo describes a grid's geometry for the result.
func GridInfo(g *volume.Grid, maxDose float64) *result.GridInfo {
	gi := &result.GridInfo{Dims: g.Dims(), OriginMM: g.Origin(), Direction: g.Direction(), UniformFrames: true, MaxDoseGy: maxDose}
	for a := 0; a < 3; a++ {
		s, uniform := g.Spacing(a)
		gi.SpacingMM[a] = s
		if a == 2 && !uniform {
			gi.UniformFrames = false
		}
	}
	return gi
}

func fileSHA256(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", err
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// PointsHeader is the header line a reference-points CSV must start with.
var PointsHeader = []string{"x_mm", "y_mm", "z_mm", "dose_gy"}

// ReadPoints reads scattered reference points from a CSV file whose header
// is x_mm,y_mm,z_mm,dose_gy: one point per row, positions in mm in the
// evaluated grid's patient coordinates, dose in Gy. Every malformed row is an
// error naming the file and line.
func ReadPoints(path string) ([]gamma.Point, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.Close()
	return ParsePoints(f, path)
}

// ParsePoints reads reference points in ReadPoints's format from r; name
// is used in errors.
func ParsePoints(r io.Reader, name string) ([]gamma.Point, error) {
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	header, err := cr.Read()
	if err == io.EOF {
		return nil, fmt.Errorf("%s: empty file, want the header %s", name, strings.Join(PointsHeader, ","))
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	if len(header) > 0 {
		header[0] = strings.TrimPrefix(header[0], "\ufeff")
	}
	if len(header) != 4 {
		return nil, fmt.Errorf("%s: header %q, want %s", name, strings.Join(header, ","), strings.Join(PointsHeader, ","))
	}
	for i, h := range header {
		if strings.TrimSpace(strings.ToLower(h)) != PointsHeader[i] {
			return nil, fmt.Errorf("%s: header %q, want %s", name, strings.Join(header, ","), strings.Join(PointsHeader, ","))
		}
	}
	var pts []gamma.Point
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			// A csv.ParseError carries its own line number.
			return nil, fmt.Errorf("%s: %w", name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			continue
		}
		if len(rec) != 4 {
			return nil, fmt.Errorf("%s line %d: %d fields, want 4 (x_mm,y_mm,z_mm,dose_gy)", name, line, len(rec))
		}
		var v [4]float64
		for i, s := range rec {
			x, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
			if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
				return nil, fmt.Errorf("%s line %d: %s %q is not a finite number", name, line, PointsHeader[i], s)
			}
			v[i] = x
		}
		if v[3] < 0 {
			return nil, fmt.Errorf("%s line %d: negative dose %g Gy", name, line, v[3])
		}
		pts = append(pts, gamma.Point{Pos: [3]float64{v[0], v[1], v[2]}, Dose: v[3]})
	}
	if len(pts) == 0 {
		return nil, fmt.Errorf("%s: no points after the header", name)
	}
	return pts, nil
}
