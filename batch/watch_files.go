package batch

// Telling files apart: what each file of the watched folder is (its header,
// read once per size and modification time), which dose is the reference
// and which the evaluated one, doses that are parts of one, and a case's
// RT Plan.

import (
	"errors"
	"fmt"
	"path"
	"path/filepath"
	"strings"
	"time"

	"voxgamma/dicomio"
	"voxgamma/structure"
)

// DefaultReferenceMatch and DefaultEvaluatedMatch are the rules that tell a
// reference dose from an evaluated one when none are given (file names,
// case-insensitive; see [WatchOptions]).
var (
	// DefaultReferenceMatch: names starting "ref" or "RD_plan", ending
	// "_ref.dcm" or containing "reference".
	DefaultReferenceMatch = []string{"ref*", "*_ref.dcm", "*reference*", "rd_plan*"}
	// DefaultEvaluatedMatch: names starting "eval" or "RD_mc", ending
	// "_eval.dcm" or containing "evaluated" or "recalc".
	DefaultEvaluatedMatch = []string{"eval*", "*_eval.dcm", "*evaluated*", "*recalc*", "rd_mc*"}
)

// matchRule is one reference or evaluated rule.
type matchRule struct {
	field, glob string
}

func parseRules(flag string, rules []string) ([]matchRule, error) {
	var out []matchRule
	for _, r := range rules {
		m := matchRule{field: "name", glob: strings.ToLower(strings.TrimSpace(r))}
		for _, f := range []string{"series", "manufacturer", "comment"} {
			if rest, ok := strings.CutPrefix(m.glob, f+":"); ok {
				m.field, m.glob = f, rest
			}
		}
		if _, err := path.Match(m.glob, ""); err != nil || m.glob == "" {
			return nil, fmt.Errorf("%s %q: not a valid glob", flag, r)
		}
		out = append(out, m)
	}
	return out, nil
}

func (m matchRule) matches(f *watchFile) bool {
	v := f.name
	switch m.field {
	case "series":
		v = f.dose.SeriesDescription
	case "manufacturer":
		v = f.dose.Manufacturer
	case "comment":
		v = f.dose.DoseComment
	}
	ok, _ := path.Match(m.glob, strings.ToLower(v))
	return ok
}

func anyMatch(rules []matchRule, f *watchFile) bool {
	for _, r := range rules {
		if r.matches(f) {
			return true
		}
	}
	return false
}

// File kinds.
const (
	kindOther  = iota // not DICOM, or another modality: ignored
	kindDose          // RT Dose
	kindStruct        // RT Structure Set
	kindBroken        // an RT Dose or RT Structure Set that cannot be read
	kindPlan          // RT Plan
)

// watchFile is one file of the watched folder with what its header says.
type watchFile struct {
	path, rel, name string
	size            int64
	mtime           time.Time
	kind            int
	reason          string
	dose            *dicomio.DoseInfo
	set             *structure.Set
	plan            *dicomio.Plan
	frame           string
	sha             string
}

// classify reads a file's header (once per size and modification time).
func (w *Watcher) classify(p string) *watchFile {
	o := w.obs[p]
	if o != nil && o.header != nil {
		return o.header
	}
	f := &watchFile{path: p, rel: w.rel(p), name: filepath.Base(p)}
	if o != nil {
		f.size, f.mtime = o.size, o.mtime
	}
	w.reads++
	info, err := dicomio.ReadDoseInfo(p)
	switch {
	case err == nil && info.DisagreementMap() != "":
		// A gamma or difference map (its own, or any DoseType ERROR) is
		// never a dose of a case.
		f.kind, f.reason = kindOther, info.DisagreementMap()
	case err == nil:
		f.kind, f.dose, f.frame = kindDose, info, info.FrameOfReferenceUID
	case errors.Is(err, dicomio.ErrNotDICOM):
		f.kind, f.reason = kindOther, "not a DICOM file"
	default:
		var me *dicomio.ModalityError
		switch {
		case !errors.As(err, &me):
			f.kind, f.reason = kindBroken, "unreadable RT Dose: "+err.Error()
		case me.Got == "RTSTRUCT":
			set, err := dicomio.ReadStructureSet(p)
			if err != nil {
				f.kind, f.reason = kindBroken, "unreadable RT Structure Set: "+err.Error()
			} else {
				f.kind, f.frame, f.set = kindStruct, set.FrameOfReferenceUID, set
			}
		case me.Got == "RTPLAN":
			// The case's RT Plan: its beams, fractions and prescription
			// (an unreadable one is set aside: a plan is context unless an
			// option asks for its figures, which then says it is missing).
			plan, err := dicomio.ReadPlan(p)
			if err != nil {
				f.kind, f.reason = kindOther, "unreadable RT Plan: "+err.Error()
			} else {
				f.kind, f.frame, f.plan = kindPlan, plan.FrameOfReferenceUID, plan
			}
		case me.Got == "":
			f.kind, f.reason = kindOther, "DICOM file without a Modality"
		default:
			f.kind, f.reason = kindOther, "modality "+me.Got
		}
	}
	if o != nil {
		o.header = f
	}
	return f
}

// casePlan picks a case's RT Plan: its only one, or of several the one the
// reference dose names (a note says when none can be told).
func casePlan(plans, refs []*watchFile, notes *[]string) *watchFile {
	switch {
	case len(plans) == 1:
		return plans[0]
	case len(plans) == 0:
		return nil
	}
	var named []*watchFile
	for _, p := range plans {
		for _, r := range refs {
			if r.dose.ReferencedRTPlanUID != "" && r.dose.ReferencedRTPlanUID == p.plan.SOPInstanceUID {
				named = append(named, p)
				break
			}
		}
	}
	if len(named) == 1 {
		return named[0]
	}
	*notes = append(*notes, fmt.Sprintf("%d RT Plans and the reference dose names none of them (or several): no plan used", len(plans)))
	return nil
}

// partsOfOne reports whether several doses of one role are all parts of a
// dose (DoseSummationType BEAM, FRACTION or their sessions), to be summed,
// rather than whole doses of which a case takes one.
func partsOfOne(fs []*watchFile) bool {
	for _, f := range fs {
		switch f.dose.DoseSummationType {
		case "BEAM", "BEAM_SESSION", "FRACTION", "FRACTION_SESSION":
		default:
			return false
		}
	}
	return true
}
