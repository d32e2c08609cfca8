// Package reftool finds, for tests, the external references voxgamma is
// checked against: Debian's python3 with pydicom and numpy, dcmtk, dicom3tools
// and chromium. It applies the project's rule when one is missing: the test
// fails when the environment variable CI is set (CI installs them all), and
// is skipped elsewhere with the command that installs it.
package reftool

import (
	"fmt"
	"os"
	"os/exec"
	"strings"
	"sync"
	"testing"
)

// Missing fails the test on CI and skips it elsewhere, saying what is
// missing, why, and how to install it.
func Missing(t testing.TB, what string, err error, install string) {
	t.Helper()
	msg := fmt.Sprintf("%s is not available (%v); install it with: %s", what, err, install)
	if os.Getenv("CI") != "" {
		t.Fatal("CI must provide it: " + msg)
	}
	t.Skip(msg)
}

// Program returns the path of an external program, or fails or skips the
// test (see Missing).
func Program(t testing.TB, name, install string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		Missing(t, name, err, install)
	}
	return p
}

var pythons sync.Map // modules → python

type python struct {
	once sync.Once
	path string
	err  error
}

// Python returns a python3 that imports every one of modules: the first
// python3 on PATH, else Debian's /usr/bin/python3 (Debian's python3-*
// packages install for that interpreter, which may not be the first on the
// PATH). Without one it fails or skips the test (see Missing).
func Python(t testing.TB, install string, modules ...string) string {
	t.Helper()
	key := strings.Join(modules, ",")
	v, _ := pythons.LoadOrStore(key, &python{})
	py := v.(*python)
	py.once.Do(func() {
		var cands []string
		if p, err := exec.LookPath("python3"); err == nil {
			cands = append(cands, p)
		}
		cands = append(cands, "/usr/bin/python3")
		py.err = fmt.Errorf("no python3 found")
		check := "import sys" // python3 alone: any interpreter that starts
		if key != "" {
			check = "import " + key
		}
		for _, c := range cands {
			out, err := exec.Command(c, "-c", check).CombinedOutput()
			if err == nil {
				py.path, py.err = c, nil
				return
			}
			py.err = fmt.Errorf("%s: %v: %s", c, err, strings.TrimSpace(string(out)))
		}
	})
	if py.err != nil {
		what := "python3"
		if len(modules) > 0 {
			what += " with " + strings.Join(modules, " and ")
		}
		Missing(t, what, py.err, install)
	}
	return py.path
}
