package main

// Exit statuses (README "Exit status": 0 every rule met, 2 a rule not met,
// 1 could not evaluate, one line on stderr saying which), through a built
// binary so that the statuses are the process's own.

import (
	"bytes"
	"crypto/sha256"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"voxgamma/internal/fixture"
	"voxgamma/phantom"
)

// buildBinary builds the command into a temporary folder.
func buildBinary(t *testing.T) string {
	t.Helper()
	goTool, err := exec.LookPath("go")
	if err != nil {
		goTool = filepath.Join(runtime.GOROOT(), "bin", "go")
	}
	bin := filepath.Join(t.TempDir(), "voxgamma")
	cmd := exec.Command(goTool, "build", "-o", bin, ".")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// execBinary runs the built binary and returns its exit status and output.
func execBinary(t *testing.T, bin string, args ...string) invocation {
	t.Helper()
	var o, e bytes.Buffer
	cmd := exec.Command(bin, args...)
	cmd.Stdout, cmd.Stderr = &o, &e
	err := cmd.Run()
	code := 0
	var ee *exec.ExitError
	switch {
	case errors.As(err, &ee):
		code = ee.ExitCode()
	case err != nil:
		t.Fatalf("running %s: %v", bin, err)
	}
	return invocation{args: args, code: code, stdout: o.String(), stderr: e.String()}
}

func sha256File(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}

// TestExitStatusBinary runs the real binary: 0 on a case meeting every rule
// of TG-218, 2 on a case failing them, and 1 for every class of input or
// option the command cannot evaluate, each with exactly one line on stderr
// naming the cause and no output file left behind.
func TestExitStatusBinary(t *testing.T) {
	bin := buildBinary(t)
	// Flat 2 Gy reference; the default normalisation is the reference
	// maximum, so Γ = |k−1|/δ (TestCompareUniformScale): k = 1.02 gives
	// Γ = 0.667 everywhere (100 % pass: TG-218's limits met), k = 0.95 gives
	// Γ = 1.667 everywhere (0 %: not met): the uniform case of testdata,
	// its passing pair copied (a case below names the reference as an
	// output, which must leave it unchanged).
	pass := uniformPair(t, true)
	fail := uniformPair(t, false)

	t.Run("0 every rule met", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "r.json")
		r := execBinary(t, bin, "compare", "--reference", pass.ref, "--evaluated", pass.eval, "--no-structures", "--protocol", "tg218", "--json", out)
		if r.code != exitPass {
			t.Fatalf("want exit 0\n%s", r)
		}
		// One line on stderr gives the outcome (README, exit status).
		oneErrorLine(t, withoutWarnings(r), "verdict pass: 3 of 4 rule checks met, 1 not applicable (exit 0)")
		if res := readResultJSON(t, out); res.Verdict != "pass" {
			t.Errorf("verdict %q, want pass", res.Verdict)
		}
		if !strings.Contains(r.stdout, "verdict: pass") {
			t.Errorf("stdout does not give the verdict:\n%s", r.stdout)
		}
	})
	t.Run("2 a rule not met", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "r.json")
		r := execBinary(t, bin, "compare", "--reference", fail.ref, "--evaluated", fail.eval, "--protocol", "tg218", "--json", out)
		if r.code != exitRuleFail {
			t.Fatalf("want exit 2\n%s", r)
		}
		oneErrorLine(t, withoutWarnings(r), "verdict fail")
		res := readResultJSON(t, out)
		if res.Verdict != "fail" {
			t.Errorf("verdict %q, want fail", res.Verdict)
		}
		for _, o := range res.Rules {
			if o.Subject == "overall" && o.Met && !strings.Contains(o.Rule, "coverage") {
				t.Errorf("rule %q met with pass rate %v: every point has Γ = 1.667", o.Rule, jsonNum(o.Value))
			}
		}
	})

	// Inputs for the error cases.
	dir := t.TempDir()
	notDICOM := fixture.Path(t, "bad-input/text.dcm")
	rs := fixture.Path(t, "dicom/uniform/RS.dcm")
	badProtocol := filepath.Join(dir, "clinic-protocol.yaml")
	if err := os.WriteFile(badProtocol, []byte("name: clinic\ncriteria: {criteria: 3%/2mm, normalisation: global, threshold_percent: 10}\n"+
		"rules:\n  - {subject: overall, metric: pass_rate, op: \">=\", limit: 95, colour: red}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	otherEval := fixture.Path(t, "bad-input/evaluated_in_other_frame.dcm")
	missing := filepath.Join(dir, "no-such-dose.dcm")

	base := func(extra ...string) []string {
		return append([]string{"compare", "--reference", pass.ref, "--evaluated", pass.eval}, extra...)
	}
	cases := []struct {
		name  string
		args  []string // --json OUT is appended unless json is set
		json  string   // an explicit --json path (then no OUT)
		cause []string
	}{
		{"missing file", []string{"compare", "--reference", missing, "--evaluated", pass.eval}, "", []string{"no-such-dose.dcm"}},
		{"not DICOM", []string{"compare", "--reference", notDICOM, "--evaluated", pass.eval}, "", []string{"text.dcm"}},
		{"structure set as reference", []string{"compare", "--reference", rs, "--evaluated", pass.eval}, "", []string{"RS.dcm"}},
		{"criteria 3/2", base("--criteria", "3/2"), "", []string{"--criteria", "3/2"}},
		{"criteria 3%", base("--criteria", "3%"), "", []string{"--criteria", "3%"}},
		{"criteria -1%/2mm", base("--criteria", "-1%/2mm"), "", []string{"--criteria", "-1%/2mm"}},
		{"criteria 0%/2mm", base("--criteria", "0%/2mm"), "", []string{"--criteria", "0%/2mm"}},
		{"criteria 3%/0mm", base("--criteria", "3%/0mm"), "", []string{"--criteria", "3%/0mm"}},
		{"threshold 100", base("--threshold", "100"), "", []string{"threshold", "100"}},
		{"threshold -1", base("--threshold", "-1"), "", []string{"threshold", "-1"}},
		{"search 0", base("--search", "0"), "", []string{"--search", "0"}},
		{"norm-dose -1", base("--norm-dose", "-1"), "", []string{"--norm-dose", "-1"}},
		{"gamma-map extension", base("--gamma-map", "gamma.png"), "", []string{"--gamma-map", "gamma.png"}},
		{"protocol unknown field", base("--protocol", badProtocol), "", []string{"clinic-protocol.yaml", "colour"}},
		{"frames differ", []string{"compare", "--reference", pass.ref, "--evaluated", otherEval}, "", []string{"frame", "evaluated_in_other_frame.dcm"}},
	}
	for _, tc := range cases {
		t.Run("1 "+tc.name, func(t *testing.T) {
			out := t.TempDir()
			args := append(append([]string{}, tc.args...), "--json", filepath.Join(out, "r.json"))
			// A map output in the same folder, for the map option cases.
			for i, a := range args {
				if a == "gamma.png" {
					args[i] = filepath.Join(out, a)
				}
			}
			r := execBinary(t, bin, args...)
			if r.code != exitError {
				t.Fatalf("want exit 1\n%s", r)
			}
			oneErrorLine(t, r, tc.cause...)
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}

	t.Run("1 output folder missing", func(t *testing.T) {
		out := filepath.Join(t.TempDir(), "no-such-folder", "r.json")
		r := execBinary(t, bin, base("--json", out)...)
		if r.code != exitError {
			t.Fatalf("want exit 1\n%s", r)
		}
		oneErrorLine(t, r, out)
		if _, err := os.Stat(filepath.Dir(out)); !os.IsNotExist(err) {
			t.Errorf("the missing output folder was created (%v)", err)
		}
	})
	t.Run("1 output is an input", func(t *testing.T) {
		before := sha256File(t, pass.ref)
		r := execBinary(t, bin, base("--json", pass.ref)...)
		if r.code != exitError {
			t.Fatalf("want exit 1\n%s", r)
		}
		oneErrorLine(t, r, pass.ref, "input")
		if sha256File(t, pass.ref) != before {
			t.Errorf("the input %s was changed", pass.ref)
		}
	})
	t.Run("existing output, then --force", func(t *testing.T) {
		out := t.TempDir()
		p := filepath.Join(out, "r.json")
		if err := os.WriteFile(p, []byte("an earlier result\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		before := sha256File(t, p)
		r := execBinary(t, bin, base("--json", p)...)
		if r.code != exitError {
			t.Fatalf("want exit 1\n%s", r)
		}
		oneErrorLine(t, r, p, "--force")
		if sha256File(t, p) != before {
			t.Errorf("the existing output was changed without --force")
		}
		if names := testDirNames(t, out); len(names) != 1 {
			t.Errorf("files in the output folder: %v, want only r.json", names)
		}
		r = execBinary(t, bin, base("--json", p, "--force", "--no-structures")...)
		if r.code != exitPass {
			t.Fatalf("with --force: want exit 0\n%s", r)
		}
		if res := readResultJSON(t, p); res.Overall.Evaluated == 0 {
			t.Errorf("the forced output is not a result")
		}
	})
	t.Run("frames differ, allowed", func(t *testing.T) {
		p := filepath.Join(t.TempDir(), "r.json")
		r := execBinary(t, bin, "compare", "--reference", pass.ref, "--evaluated", otherEval, "--no-structures", "--allow-frame-mismatch", "--json", p)
		if r.code != exitPass {
			t.Fatalf("want exit 0 (k = 1.02: Γ = 0.667 everywhere)\n%s", r)
		}
		res := readResultJSON(t, p)
		found := false
		for _, w := range res.Warnings {
			found = found || strings.Contains(w, "different frames of reference")
		}
		if !found {
			t.Errorf("no warning about the frames of reference: %q", res.Warnings)
		}
		if !strings.Contains(r.stderr, "different frames of reference") {
			t.Errorf("the frame warning is not shown on stderr:\n%s", r)
		}
	})
}

// TestExitStatusInProcess: the same contract through run, for the
// statuses the binary test does not repeat with structures.
func TestExitStatusInProcess(t *testing.T) {
	pass := uniformPair(t, true)
	r := vgExit(t, exitPass, "compare", "--reference", pass.ref, "--evaluated", pass.eval, "--no-structures", "--quiet")
	// --quiet prints nothing but the one outcome line on stderr.
	if r.stdout != "" || r.stderr != "voxgamma: verdict pass: 3 of 4 rule checks met, 1 not applicable (exit 0)\n" {
		t.Errorf("a quiet pass printed stdout %q, stderr %q; want only the verdict line on stderr", r.stdout, r.stderr)
	}
	// No --reference: a usage error.
	r = vgExit(t, exitError, "compare", "--evaluated", pass.eval)
	oneErrorLine(t, r, "--reference")
	// An unknown option.
	r = vgExit(t, exitError, "compare", "--reference", pass.ref, "--evaluated", pass.eval, "--no-such-option")
	oneErrorLine(t, r, "--no-such-option")
}

// TestOutputNeverReplacesInputInFolder: outputs that would replace an input
// are refused, with --force too (compare's promise: "never over an input";
// README: an output path equal to an input is bad input, status 1). With
// --reference and --evaluated given as folders, the RT Dose files and the
// RT Structure Set chosen in them are inputs as much as files named
// directly.
func TestOutputNeverReplacesInputInFolder(t *testing.T) {
	for _, tc := range []struct{ flag, file string }{
		{"--json", "plan/RD_plan.dcm"}, {"--csv", "plan/RS_plan.dcm"}, {"--json", "mc/RD_mc.dcm"},
	} {
		t.Run(tc.flag+" "+tc.file, func(t *testing.T) {
			dir := t.TempDir()
			plan, mc := filepath.Join(dir, "plan"), filepath.Join(dir, "mc")
			for _, d := range []string{plan, mc} {
				if err := os.Mkdir(d, 0o755); err != nil {
					t.Fatal(err)
				}
			}
			ids := phantomIDs()
			writeTestDose(t, filepath.Join(plan, "RD_plan.dcm"), [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(2), ids)
			writeTestDose(t, filepath.Join(mc, "RD_mc.dcm"), [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), ids)
			writeTestStructures(t, filepath.Join(plan, "RS_plan.dcm"), ids, sphereROI(t, "PTV_1", "PTV", 1, phantom.Sphere{Radius: 5}, ids.FrameOfReferenceUID))
			path := filepath.Join(dir, filepath.FromSlash(tc.file))
			before := sha256File(t, path)
			r := vgRun(t, "compare", "--reference", plan, "--evaluated", mc, tc.flag, path, "--force", "--quiet")
			if r.code != exitError {
				t.Errorf("want exit 1 (the output is an input)\n%s", r)
			} else {
				oneErrorLine(t, r, path, "input")
			}
			if sha256File(t, path) != before {
				t.Errorf("the input %s was overwritten", path)
			}
		})
	}
}

// withoutWarnings returns r with the "warning: " lines of its stderr left
// out: warnings (such as the coarse evaluated grid's, which the 2 mm test
// grids at a 2 mm DTA draw) come before the outcome's line.
func withoutWarnings(r invocation) invocation {
	var keep []string
	for _, l := range strings.SplitAfter(r.stderr, "\n") {
		if !strings.HasPrefix(l, "warning: ") {
			keep = append(keep, l)
		}
	}
	r.stderr = strings.Join(keep, "")
	return r
}

// uniformPair returns the uniform case of testdata (a flat 2 Gy reference
// inside an evaluated dose k·2 Gy): k = 1.02, copied into a folder of the
// test, when pass; k = 0.95, read in place, when not.
func uniformPair(t *testing.T, pass bool) (p struct{ ref, eval string }) {
	t.Helper()
	if !pass {
		p.ref, p.eval = fixture.Path(t, "dicom/uniform/RD_reference.dcm"), fixture.Path(t, "dicom/uniform/RD_evaluated_fail.dcm")
		return p
	}
	c := fixture.Copy(t, t.TempDir(), "dicom/uniform/RD_reference.dcm", "dicom/uniform/RD_evaluated.dcm")
	p.ref, p.eval = c[0], c[1]
	return p
}
