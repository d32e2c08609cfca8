package batch

// Handling one case: a settled folder's files grouped into cases, each
// checked for completeness and consistency, then compared once, or moved
// aside with the reason.

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"voxgamma/analysis"
	"voxgamma/dicomio"
	"voxgamma/internal/atomicfile"
	"voxgamma/internal/fault"
	"voxgamma/job"
)

// watchCase is a group of files that may be a case.
type watchCase struct {
	key, unit string
	files     []*watchFile // DICOM doses and structure sets
	broken    []*watchFile
	whole     string // the subfolder to move aside (subfolder layout)
}

// handleUnit reads the headers of a settled folder, forms its cases and
// processes each. waiting is true when a case is not complete yet.
func (w *Watcher) handleUnit(ctx context.Context, unit string, paths []string) (done []WatchedCase, waiting bool, err error) {
	sc := w.scope(unit, paths)
	if sc != nil {
		sc.Activate()
		defer sc.Close()
	}
	var files []*watchFile
	for _, p := range paths {
		f := w.classify(p)
		if sc != nil {
			sc.Dose(f.dose)
			sc.Structures(f.set)
			if f.plan != nil {
				sc.Dose(analysis.PlanSeen(f.plan))
			}
			sc.UID(f.frame)
		}
		files = append(files, f)
	}
	var cases []*watchCase
	if unit == "." {
		groups := map[string]*watchCase{}
		planOf := map[string]string{} // plan SOP instance → frame of the doses naming it
		for _, f := range files {
			if f.kind == kindDose && f.dose.ReferencedRTPlanUID != "" {
				planOf[f.dose.ReferencedRTPlanUID] = f.frame
			}
		}
		for _, f := range files {
			frame := f.frame
			switch f.kind {
			case kindBroken:
				stem := strings.TrimSuffix(f.name, filepath.Ext(f.name))
				cases = append(cases, &watchCase{key: w.brokenKey(stem), unit: unit, broken: []*watchFile{f}})
				continue
			case kindPlan:
				// A plan goes with the doses that name it (the Frame of
				// Reference module is optional in an RT Plan).
				if fr, ok := planOf[f.plan.SOPInstanceUID]; ok {
					frame = fr
				}
			case kindDose, kindStruct:
			default:
				continue
			}
			g := groups[frame]
			if g == nil {
				g = &watchCase{key: w.flatKey(frame), unit: unit}
				groups[frame] = g
			}
			g.files = append(g.files, f)
		}
		for _, g := range groups {
			cases = append(cases, g)
		}
	} else {
		c := &watchCase{key: w.subfolderKey(unit), unit: unit, whole: filepath.Join(w.dir, unit)}
		for _, f := range files {
			switch f.kind {
			case kindBroken:
				c.broken = append(c.broken, f)
			case kindDose, kindStruct, kindPlan:
				c.files = append(c.files, f)
			}
		}
		if len(c.files)+len(c.broken) > 0 {
			cases = append(cases, c)
		}
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].key < cases[j].key })
	for _, c := range cases {
		wc, wait, err := w.handleCase(ctx, c)
		if err != nil {
			return done, waiting, err
		}
		waiting = waiting || wait
		if wc != nil {
			done = append(done, *wc)
		}
	}
	return done, waiting, nil
}

// quickPrint fingerprints files by relative path, size and modification
// time: it recognises a case already handled without reading its files.
func quickPrint(files []*watchFile) string {
	h := sha256.New()
	for _, f := range files {
		fmt.Fprintf(h, "%s\x00%d\x00%d\n", f.rel, f.size, f.mtime.UnixNano())
	}
	return hex.EncodeToString(h.Sum(nil))
}

// contentPrint fingerprints a case by the content of its files alone: the
// SHA-256 of each, sorted. A case is the same case whatever its files and
// folder are called or when they were copied, so resume never depends on
// paths (which de-identified records do not hold).
func contentPrint(files []*watchFile) string {
	sums := make([]string, 0, len(files))
	for _, f := range files {
		sums = append(sums, f.sha)
	}
	sort.Strings(sums)
	h := sha256.New()
	fmt.Fprintf(h, "voxgamma-watch-case/2\n")
	for _, x := range sums {
		fmt.Fprintf(h, "%s\n", x)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// handleCase checks one case and processes it when complete: it returns
// the finished case (nil when it waits or was done before), whether it
// waits, and an error for a failure to be tried again later.
func (w *Watcher) handleCase(ctx context.Context, c *watchCase) (*WatchedCase, bool, error) {
	fault.Point(fault.WatchCase)
	all := append(append([]*watchFile{}, c.files...), c.broken...)
	sort.Slice(all, func(i, j int) bool { return all[i].rel < all[j].rel })
	quick := w.printKey(quickPrint(all))
	if k, ok := w.quick[quick]; ok && w.state.Cases[k] != nil {
		return nil, false, nil
	}
	scrub := func(msg string) string { return w.scrub(c.unit, msg) }
	if len(c.broken) > 0 {
		var why []string
		for _, f := range c.broken {
			why = append(why, f.rel+": "+f.reason)
		}
		return w.moveAside(c, all, quick, "", scrub(strings.Join(why, "; ")))
	}
	for _, f := range all {
		w.reads++
		sum, err := FileSHA256(f.path)
		if err != nil {
			return nil, false, fmt.Errorf("case %s: %w", c.key, err)
		}
		f.sha = sum
	}
	full := contentPrint(all)
	if e := w.state.Cases[full]; e != nil {
		w.quick[quick] = full
		w.log.Info("case already processed (same files)", "case", c.key, "as", e.Key, "verdict", e.Verdict)
		return nil, false, nil
	}

	// The same content under two names is one file: the first name (in
	// path order) is used, the others are noted.
	bySHA := map[string][]*watchFile{}
	var order []string
	for _, f := range all {
		if bySHA[f.sha] == nil {
			order = append(order, f.sha)
		}
		bySHA[f.sha] = append(bySHA[f.sha], f)
	}
	var refs, evals, sets, plans []*watchFile
	var notes []string
	for _, sum := range order {
		same := bySHA[sum]
		f := same[0]
		for _, d := range same[1:] {
			notes = append(notes, fmt.Sprintf("%s has the same content as %s: used once", d.rel, f.rel))
		}
		if f.kind == kindStruct {
			sets = append(sets, f)
			continue
		}
		if f.kind == kindPlan {
			plans = append(plans, f)
			continue
		}
		isRef, isEval := false, false
		for _, d := range same {
			isRef = isRef || anyMatch(w.refRules, d)
			isEval = isEval || anyMatch(w.evalRules, d)
		}
		switch {
		case isRef && isEval:
			var names []string
			for _, d := range same {
				names = append(names, d.rel)
			}
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%s matches both the reference and the evaluated rules: cannot tell which dose it is", strings.Join(names, " = "))))
		case isRef:
			refs = append(refs, f)
		case isEval:
			evals = append(evals, f)
		default:
			notes = append(notes, fmt.Sprintf("%s matches neither the reference nor the evaluated rules: ignored", f.rel))
		}
	}
	names := func(fs []*watchFile) string {
		var n []string
		for _, f := range fs {
			n = append(n, f.rel)
		}
		return strings.Join(n, ", ")
	}
	switch {
	case len(refs) > 1 && !partsOfOne(refs):
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d reference doses (%s): one case needs exactly one (put each case in its own subfolder)", len(refs), names(refs))))
	case len(evals) > 1 && !partsOfOne(evals):
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d evaluated doses (%s): one case needs exactly one (put each case in its own subfolder)", len(evals), names(evals))))
	case len(sets) > 1:
		return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("%d structure sets (%s): one case needs at most one", len(sets), names(sets))))
	}
	var missing []string
	if len(refs) == 0 {
		missing = append(missing, "a reference dose")
	}
	if len(evals) == 0 {
		missing = append(missing, "an evaluated dose")
	}
	if len(sets) == 0 && w.opt.RequireStructures {
		missing = append(missing, "a structure set")
	}
	plan := casePlan(plans, refs, &notes)
	if plan != nil && len(missing) == 0 {
		// Beam doses arriving one by one: a set that lacks a treatment
		// beam of the plan waits for it (any other fault is the
		// comparison's to report).
		for _, r := range []struct {
			role  string
			files []*watchFile
		}{{"the reference", refs}, {"the evaluated dose", evals}} {
			if len(r.files) < 2 {
				continue
			}
			var paths []string
			for _, f := range r.files {
				paths = append(paths, f.path)
			}
			set, err := dicomio.ReadDoseSet(paths)
			if err != nil {
				continue
			}
			var se *dicomio.DoseSetError
			if _, err := set.CheckPlan(plan.plan); errors.As(err, &se) && len(se.MissingBeams) > 0 {
				missing = append(missing, fmt.Sprintf("beams %s of %s (RT Plan %s)", dicomio.FormatNumbers(se.MissingBeams), r.role, plan.rel))
			}
		}
	}
	if len(missing) > 0 {
		msg := "waits for " + strings.Join(missing, " and ")
		if w.waitLogged[c.key] != quick {
			w.waitLogged[c.key] = quick
			w.log.Info("case incomplete", "case", c.key, "folder", w.unitName(c.unit), "status", msg, "files", scrub(names(all)))
		}
		return nil, true, nil
	}
	ref, eval := refs[0], evals[0]
	if sc := w.scope(c.unit, nil); sc != nil {
		// The files' roles stand for their names from here on.
		for _, f := range refs {
			sc.Path(f.path, "reference")
			sc.Text(f.rel, "reference")
		}
		for _, f := range evals {
			sc.Path(f.path, "evaluated")
			sc.Text(f.rel, "evaluated")
		}
		if len(sets) == 1 {
			sc.Path(sets[0].path, "structures")
			sc.Text(sets[0].rel, "structures")
		}
		if plan != nil {
			sc.Path(plan.path, "plan")
			sc.Text(plan.rel, "plan")
		}
	}
	if !w.opt.AllowFrameMismatch {
		if ref.frame != eval.frame {
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("the reference dose %s (frame of reference %s) and the evaluated dose %s (%s) are in different frames of reference",
				ref.rel, orNone(ref.frame), eval.rel, orNone(eval.frame))))
		}
		if len(sets) == 1 && sets[0].frame != ref.frame {
			return w.moveAside(c, all, quick, full, scrub(fmt.Sprintf("the structure set %s (frame of reference %s) is not in the reference dose %s's frame of reference (%s)",
				sets[0].rel, orNone(sets[0].frame), ref.rel, orNone(ref.frame))))
		}
	}
	cs := Case{ID: c.key}
	var inputs []InputHash
	for _, r := range []struct {
		role  string
		files []*watchFile
		one   *string
		all   *[]string
	}{{"reference", refs, &cs.Reference, &cs.ReferenceFiles}, {"evaluated", evals, &cs.Evaluated, &cs.EvaluatedFiles}} {
		// Several doses of one role are the parts of the dose (beams,
		// fraction groups), summed: the comparison checks that they
		// belong together.
		for _, f := range r.files {
			inputs = append(inputs, InputHash{Role: r.role, Path: f.path, SHA256: f.sha})
			*r.all = append(*r.all, f.path)
		}
		if len(r.files) == 1 {
			*r.one, *r.all = r.files[0].path, nil
		}
	}
	if len(sets) == 1 && !w.settings.Choices.NoStructures {
		cs.Structures = sets[0].path
		inputs = append(inputs, InputHash{Role: "structures", Path: sets[0].path, SHA256: sets[0].sha})
	}
	if plan != nil {
		cs.Plan = plan.path
		inputs = append(inputs, InputHash{Role: "plan", Path: plan.path, SHA256: plan.sha})
	}
	final := filepath.Join(w.out, c.key)
	// Finished before the state was saved (a stop in between, even a
	// kill, or a record that failed): found by content in whichever folder
	// holds it, recorded, and reported now with its verdict.
	if dir, ok := w.finished[full]; ok {
		if prev, err := ReadStatus(dir); err == nil && prev.WatchKey == full && prev.SettingsSHA256 == w.settingsHash && prev.Verdict != VerdictError {
			if w.opt.Record != nil {
				if _, err := recordCase(ctx, w.opt.Record, cs, dir); err != nil {
					return nil, false, err
				}
			}
			w.record(full, quick, c, all, prev.Verdict, "", dir, "")
			if err := w.saveState(); err != nil {
				return nil, false, err
			}
			w.log.Info("case finished", "case", c.key, "verdict", prev.Verdict, "seconds", round3(prev.Seconds), "output", dir,
				"note", "computed earlier (before the watcher stopped, or before a record that failed); recorded now")
			return &WatchedCase{Key: c.key, Verdict: prev.Verdict, Output: dir, Seconds: prev.Seconds}, false, nil
		}
	}
	prev, _ := ReadStatus(final)
	for _, n := range notes {
		w.log.Info("case note", "case", c.key, "note", scrub(n))
	}
	need, err := EstimateCase(cs)
	if err != nil {
		return w.moveAside(c, all, quick, full, scrub(caseMessage(c.key, err)))
	}
	if need > w.budget {
		return w.moveAside(c, all, quick, full, fmt.Sprintf("needs about %s of memory (estimated from its dose grids), more than the memory budget of %s: raise --max-memory (or run it on a larger machine) and put the files back",
			job.FormatBytes(need), job.FormatBytes(w.budget)))
	}
	w.log.Info("case started", "case", c.key, "reference", scrub(ref.rel), "evaluated", scrub(eval.rel), "structures", scrub(cs.Structures),
		"memory_estimate", job.FormatBytes(need))
	work := caseWork{c: cs, protocolName: w.protocolName, settings: w.settings, settingsHash: w.settingsHash,
		outs: w.opt.Outputs, allowFM: w.opt.AllowFrameMismatch, watchKey: full, deid: w.deid, scope: w.scope(c.unit, nil)}
	st, caseErr, err := compute(ctx, w.out, work, inputs, prev)
	if err != nil {
		return nil, false, errors.New(scrub(err.Error()))
	}
	if caseErr != nil && (errors.Is(caseErr, analysis.ErrBadInput) || errors.Is(caseErr, dicomio.ErrInvalid) ||
		errors.Is(caseErr, dicomio.ErrUnsupported) || errors.Is(caseErr, dicomio.ErrNotDICOM)) {
		wc, wait, err := w.moveAside(c, all, quick, full, scrub(caseMessage(c.key, caseErr)))
		if wc != nil {
			wc.Output, wc.Seconds = final, st.Seconds
		}
		return wc, wait, err
	}
	if caseErr != nil {
		// Not the inputs' fault (an output that could not be written, an
		// internal error): the results folder says so; try again later.
		return nil, false, fmt.Errorf("case %s: %s", c.key, scrub(caseErr.Error()))
	}
	w.finished[full] = final
	if w.opt.Record != nil {
		if _, err := recordCase(ctx, w.opt.Record, cs, final); err != nil {
			return nil, false, fmt.Errorf("%w (the results are in %s; it is recorded at a later poll)", err, final)
		}
	}
	w.record(full, quick, c, all, st.Verdict, "", final, "")
	if err := w.saveState(); err != nil {
		return nil, false, err
	}
	w.log.Info("case finished", "case", c.key, "verdict", st.Verdict, "seconds", round3(st.Seconds), "output", final)
	return &WatchedCase{Key: c.key, Verdict: st.Verdict, Output: final, Seconds: st.Seconds}, false, nil
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

// moveAside moves a broken case's files (its whole subfolder in the
// subfolder layout) into Dir/.failed/<key>/ with an error.txt saying why,
// and records the case.
func (w *Watcher) moveAside(c *watchCase, files []*watchFile, quick, full, why string) (*WatchedCase, bool, error) {
	failed := filepath.Join(w.dir, FailedDir)
	if err := os.MkdirAll(failed, 0o755); err != nil {
		return nil, false, fmt.Errorf("case %s: creating %s: %w", c.key, failed, err)
	}
	dest := filepath.Join(failed, c.key)
	for n := 2; ; n++ {
		if _, err := os.Lstat(dest); os.IsNotExist(err) {
			break
		}
		dest = filepath.Join(failed, fmt.Sprintf("%s-%d", c.key, n))
	}
	if c.whole != "" {
		if err := os.Rename(c.whole, dest); err != nil {
			return nil, false, fmt.Errorf("case %s: moving %s to %s: %s", c.key, w.unitName(c.unit), dest, w.scrub(c.unit, err.Error()))
		}
	} else {
		if err := os.Mkdir(dest, 0o755); err != nil {
			return nil, false, fmt.Errorf("case %s: %w", c.key, err)
		}
		for _, f := range files {
			if err := os.Rename(f.path, filepath.Join(dest, f.name)); err != nil {
				return nil, false, fmt.Errorf("case %s: moving a file to %s: %s", c.key, dest, w.scrub(c.unit, err.Error()))
			}
		}
	}
	var b strings.Builder
	when := " " + time.Now().UTC().Format(time.RFC3339)
	if w.deid != nil {
		when = ""
	}
	fmt.Fprintf(&b, "voxgamma watch could not evaluate case %s (moved here%s).\n\nerror: %s\n\nfiles:\n", c.key, when, why)
	for _, f := range files {
		fmt.Fprintf(&b, "  %s (%d bytes)\n", w.scrub(c.unit, f.rel), f.size)
	}
	b.WriteString("\nFix the files and put them back into the watched folder (as a new subfolder) to have the case processed.\n")
	if err := atomicfile.WriteBytes(filepath.Join(dest, "error.txt"), []byte(b.String())); err != nil {
		return nil, false, fmt.Errorf("case %s: %w", c.key, err)
	}
	w.record(full, quick, c, files, VerdictError, why, "", dest)
	if err := w.saveState(); err != nil {
		return nil, false, err
	}
	w.log.Warn("case moved aside", "case", c.key, "verdict", VerdictError, "error", why, "moved_to", dest)
	return &WatchedCase{Key: c.key, Verdict: VerdictError, Error: why, MovedTo: dest}, false, nil
}
