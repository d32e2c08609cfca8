package main

// Bad input through the built binary (docs/bad-input.md): the exit status
// and the one line on stderr are the process's own.

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"testing"
)

// ---------------------------------------------------------------------------
// The exit status of the process itself.

// TestBadInputBinary: a handful of the classes above through the built
// binary, so that exit status 1 and the one line on stderr are the
// process's own (README "Exit status").
func TestBadInputBinary(t *testing.T) {
	bin := buildBinary(t)
	f := newBadFixture(t)
	cut := corpus(t, "truncated_in_PixelData.dcm")
	nanScale := corpus(t, "DoseGridScaling_NaN.dcm")
	far := corpus(t, "evaluated_grid_elsewhere.dcm")
	rsNaN := corpus(t, "NaN_coordinate.dcm")
	for _, tc := range []struct {
		name  string
		args  []string
		cause []string
	}{
		{"truncated_in_pixel_data", compareArgs(cut, f.eval, ""), []string{cut, "PixelData (7FE0,0010): claims"}},
		{"DoseGridScaling_NaN", compareArgs(nanScale, f.eval, ""), []string{nanScale, "DoseGridScaling (3004,000E): is NaN"}},
		{"structures_NaN_coordinate", compareArgs(f.ref, f.eval, rsNaN), []string{rsNaN, "ContourData (3006,0050)", "NaN"}},
		{"no_point_above_threshold", compareArgs(f.ref, f.eval, f.rs, "--norm-dose", "100", "--accept-norm-dose"), []string{"nothing was evaluated"}},
		{"grids_do_not_overlap", compareArgs(f.ref, far, ""), []string{"covers none of the reference high-dose region"}},
		{"threshold_150", compareArgs(f.ref, f.eval, "", "--threshold", "150"), []string{"--threshold 150"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := t.TempDir()
			r := execBinary(t, bin, withOutputs(tc.args, out)...)
			if r.code != exitError {
				t.Fatalf("exit %d, want 1\n%s", r.code, r)
			}
			oneErrorLine(t, r, tc.cause...)
			if names := testDirNames(t, out); len(names) != 0 {
				t.Errorf("files left in the output folder: %v", names)
			}
		})
	}
	t.Run("unwritable_folder", func(t *testing.T) {
		// A folder without write permission. Root ignores permission bits
		// (capabilities(7), CAP_DAC_OVERRIDE), so as root the binary runs
		// as nobody (65534), with the inputs and the binary readable by
		// all.
		base := t.TempDir()
		for _, d := range []string{filepath.Dir(base), base} {
			if err := os.Chmod(d, 0o755); err != nil {
				t.Fatal(err)
			}
		}
		in := filepath.Join(base, "in")
		out := filepath.Join(base, "out")
		for _, d := range []string{in, out} {
			if err := os.Mkdir(d, 0o755); err != nil {
				t.Fatal(err)
			}
		}
		for name, b := range map[string][]byte{"ref.dcm": f.refBytes, "eval.dcm": f.evalBytes} {
			if err := os.WriteFile(filepath.Join(in, name), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		binCopy := filepath.Join(base, "voxgamma")
		if err := os.WriteFile(binCopy, mustReadFile(t, bin), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.Chmod(out, 0o555); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { os.Chmod(out, 0o755) })
		p := filepath.Join(out, "r.json")
		cmd := exec.Command(binCopy, "compare", "--reference", filepath.Join(in, "ref.dcm"), "--evaluated", filepath.Join(in, "eval.dcm"), "--json", p)
		if os.Geteuid() == 0 {
			cmd.SysProcAttr = &syscall.SysProcAttr{Credential: &syscall.Credential{Uid: 65534, Gid: 65534}}
		}
		var o, e bytes.Buffer
		cmd.Stdout, cmd.Stderr = &o, &e
		err := cmd.Run()
		if cmd.ProcessState == nil {
			t.Fatalf("running %s: %v", binCopy, err)
		}
		r := invocation{args: cmd.Args[1:], code: cmd.ProcessState.ExitCode(), stdout: o.String(), stderr: e.String()}
		if r.code != exitError {
			t.Fatalf("exit %d (%v), want 1\n%s", r.code, err, r)
		}
		oneErrorLine(t, r, "output "+p, "directory "+out+" is not writable")
		if names := testDirNames(t, out); len(names) != 0 {
			t.Errorf("files left in the output folder: %v", names)
		}
	})
}
