package batch

// Computing one case into its folder, for Run and the Watcher alike: its
// settings and their hash, the comparison and its outputs written into a
// temporary folder that is installed whole, and the case's status.

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime/debug"
	"sort"
	"strings"
	"time"

	"voxgamma/analysis"
	"voxgamma/deid"
	"voxgamma/job"
	"voxgamma/result"
)

// caseWork is one case resolved and ready to compute.
type caseWork struct {
	c            Case
	protocolName string
	settings     analysis.Settings
	settingsHash string
	outs         Outputs
	allowFM      bool
	watchKey     string
	// deid is the run's de-identification (nil: none); scope that of this
	// case, its inputs registered.
	deid  *deid.Run
	scope *deid.Scope
}

// caseScope opens the de-identification scope of the case, its input
// paths registered for their roles.
func (w caseWork) caseScope() *deid.Scope {
	s := w.deid.Scope()
	s.Path(w.c.Reference, "reference")
	s.Path(w.c.Evaluated, "evaluated")
	s.Path(w.c.Structures, "structures")
	return s
}

// scrub de-identifies a message of the case (unchanged without
// de-identification).
func (w caseWork) scrub(s string) string {
	if w.scope == nil {
		return s
	}
	return w.scope.Scrub(s)
}

// settingsFor resolves a protocol and the overrides into settings and
// their hash.
func settingsFor(name string, ov job.Overrides, outs Outputs, allowFM bool) (analysis.Settings, string, error) {
	p, err := job.LoadProtocol(name)
	if err != nil {
		return analysis.Settings{}, "", err
	}
	s, err := job.Settings(p, ov)
	if err != nil {
		return analysis.Settings{}, "", err
	}
	h, err := SettingsHash(p, s, outs, allowFM)
	if err != nil {
		return analysis.Settings{}, "", err
	}
	return s, h, nil
}

// caseMessage is err in one line for a case's status and the summary,
// which name the case already: without a leading "case <id>: ".
func caseMessage(id string, err error) string {
	return strings.TrimPrefix(oneLine(err.Error()), "case "+id+": ")
}

func round3(v float64) float64 { return float64(int64(v*1000+0.5)) / 1000 }

func oneLine(s string) string {
	return strings.Join(strings.Fields(strings.ReplaceAll(s, "\n", "; ")), " ")
}

func newStatus(w caseWork, inputs []InputHash, prev *Status) *Status {
	st := &Status{SchemaVersion: StatusSchemaVersion, ID: w.c.ID, Inputs: append([]InputHash{}, inputs...), Protocol: w.protocolName,
		SettingsSHA256: w.settingsHash, Runs: 1, Outputs: []string{}, WatchKey: w.watchKey}
	if inputs == nil {
		for _, in := range w.c.roleInputs() {
			if in[1] != "" {
				st.Inputs = append(st.Inputs, InputHash{Role: in[0], Path: in[1]})
			}
		}
	}
	if prev != nil {
		st.Runs = prev.Runs + 1
	}
	st.Finished = time.Now().UTC().Format(time.RFC3339)
	if w.scope != nil {
		// No paths (they name patients) and no dates: the role stands for
		// the path, and resume matches on content hashes.
		for i := range st.Inputs {
			st.Inputs[i].Path = st.Inputs[i].Role
		}
		st.Finished = ""
		st.Protocol = w.scope.Scrub(st.Protocol)
	}
	return st
}

// writeErrorCase installs a case folder holding only the status of a case
// that could not be evaluated.
func writeErrorCase(parent string, st *Status) error {
	tmp, err := newCaseTemp(parent, st.ID)
	if err != nil {
		return err
	}
	if err := writeStatus(tmp, st); err != nil {
		os.RemoveAll(tmp)
		return err
	}
	if err := installCase(parent, st.ID, tmp); err != nil {
		os.RemoveAll(tmp)
		return err
	}
	return nil
}

// compute runs the comparison of w into a new temporary folder under
// parent, writes its outputs and status there and installs the folder as
// parent/<id>. A comparison that fails, or panics, makes a case folder
// with the error in its status. It returns the status; an error only when
// the folder could not be made or installed, or the context was cancelled
// (nothing is installed then). caseErr is the comparison's error, if any.
func compute(ctx context.Context, parent string, w caseWork, inputs []InputHash, prev *Status) (st *Status, caseErr, err error) {
	c := w.c
	tmp, err := newCaseTemp(parent, c.ID)
	if err != nil {
		return nil, nil, err
	}
	installed := false
	defer func() {
		if !installed {
			os.RemoveAll(tmp)
		}
	}()
	t0 := time.Now()
	outs := job.Outputs{JSON: filepath.Join(tmp, ResultJSON), CSV: filepath.Join(tmp, ResultCSV), ResultsTo: w.outs.ResultsTo, ResultsAET: w.outs.ResultsAET}
	if w.outs.GammaMap {
		outs.GammaMap = filepath.Join(tmp, GammaMapFile)
	}
	if w.outs.DifferenceMap {
		outs.DifferenceMap = filepath.Join(tmp, DifferenceFile)
	}
	if w.outs.Report {
		outs.Report = filepath.Join(tmp, ReportFile)
	}
	if w.outs.ReportPDF {
		outs.ReportPDF = filepath.Join(tmp, ReportPDFFile)
	}
	res, cerr := protect(func() (*result.Result, error) {
		if err := outs.Check(c.inputPaths(), false); err != nil {
			return nil, err
		}
		s := w.settings
		s.Choices.NoStructures = s.Choices.NoStructures || c.NoStructures
		in := analysis.Inputs{Reference: c.Reference, ReferenceFiles: c.ReferenceFiles,
			Evaluated: c.Evaluated, EvaluatedFiles: c.EvaluatedFiles, Structures: c.Structures, Plan: c.Plan,
			AllowFrameMismatch: w.allowFM, NoStructures: s.Choices.NoStructures}
		if w.scope != nil {
			in.Seen = w.scope.Seen
		}
		out, err := job.Compare(ctx, in, s)
		if err != nil {
			return nil, err
		}
		if err := job.Write(outs, out, w.scope); err != nil {
			return nil, err
		}
		return out.Result, nil
	})
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	st = newStatus(w, inputs, prev)
	st.Seconds = time.Since(t0).Seconds()
	if cerr != nil {
		st.Verdict, st.ExitClass, st.Error = VerdictError, ExitError, w.scrub(caseMessage(c.ID, cerr))
		// Leave no partial outputs beside the status of a failed case.
		if entries, err := os.ReadDir(tmp); err == nil {
			for _, e := range entries {
				os.RemoveAll(filepath.Join(tmp, e.Name()))
			}
		}
	} else {
		st.Summary = Figures(res)
		st.Verdict, st.ExitClass = VerdictFail, ExitRuleFail
		if res.Verdict == "pass" {
			st.Verdict, st.ExitClass = VerdictPass, ExitPass
		}
		for _, p := range outs.List() {
			st.Outputs = append(st.Outputs, filepath.Base(p))
		}
		sort.Strings(st.Outputs)
	}
	if err := writeStatus(tmp, st); err != nil {
		return nil, cerr, fmt.Errorf("case %s: %w", c.ID, err)
	}
	if err := installCase(parent, c.ID, tmp); err != nil {
		return nil, cerr, err
	}
	installed = true
	return st, cerr, nil
}

// protect runs f, turning a panic into an error (with the stack, for a
// report).
func protect(f func() (*result.Result, error)) (r *result.Result, err error) {
	defer func() {
		if p := recover(); p != nil {
			stack := string(debug.Stack())
			if i := strings.Index(stack, "\n"); i > 0 {
				stack = stack[i+1:]
			}
			lines := strings.Split(stack, "\n")
			if len(lines) > 12 {
				lines = lines[:12]
			}
			r, err = nil, fmt.Errorf("internal error: %v (please report it; at %s)", p, strings.Join(strings.Fields(strings.Join(lines, " ")), " "))
		}
	}()
	return f()
}
