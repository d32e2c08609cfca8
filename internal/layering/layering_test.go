package layering

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"testing"
)

const module = "voxgamma"

// root is the repository's root, from this file's place in it.
func root(t *testing.T) string {
	t.Helper()
	_, file, _, ok := runtime.Caller(0)
	if !ok {
		t.Fatal("no caller information")
	}
	return filepath.Join(filepath.Dir(file), "..", "..")
}

// imports returns, for every package of the module, the packages of the
// module its non-test files import (paths without the module prefix), as
// `go list` reports them.
func imports(t *testing.T, dir string) map[string][]string {
	t.Helper()
	goTool, err := exec.LookPath("go")
	if err != nil {
		goTool = filepath.Join(runtime.GOROOT(), "bin", "go")
	}
	cmd := exec.Command(goTool, "list", "-json", "./...")
	cmd.Dir = dir
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("go list: %v", err)
	}
	g := map[string][]string{}
	dec := json.NewDecoder(bytes.NewReader(out))
	for dec.More() {
		var p struct {
			ImportPath string
			Imports    []string
		}
		if err := dec.Decode(&p); err != nil {
			t.Fatal(err)
		}
		name := strings.TrimPrefix(p.ImportPath, module+"/")
		g[name] = []string{}
		for _, imp := range p.Imports {
			if rest, ok := strings.CutPrefix(imp, module+"/"); ok {
				g[name] = append(g[name], rest)
			}
		}
	}
	return g
}

// line is one line of the picture: a package and what it imports (→) or
// what imports it (←).
type line struct {
	block, n int
	pkg      string
	arrow    string
	others   []string
}

// picture reads the lines of the code blocks of DEVELOPERS.md's "Data
// flow" section.
func picture(t *testing.T, path string) []line {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var out []line
	in, section, block := false, false, 0
	sc := bufio.NewScanner(bytes.NewReader(data))
	for n := 1; sc.Scan(); n++ {
		s := sc.Text()
		switch {
		case strings.HasPrefix(s, "## "):
			section = s == "## Data flow"
			continue
		case !section:
			continue
		case strings.HasPrefix(s, "```"):
			if in = !in; in {
				block++
			}
			continue
		case !in || strings.TrimSpace(s) == "":
			continue
		}
		arrow := "→"
		if !strings.Contains(s, arrow) {
			arrow = "←"
		}
		lhs, rhs, ok := strings.Cut(s, arrow)
		if !ok || len(strings.Fields(lhs)) != 1 {
			t.Fatalf("%s:%d: %q is not PACKAGE → IMPORTS or PACKAGE ← IMPORTERS", path, n, s)
		}
		l := line{block: block, n: n, pkg: strings.TrimSpace(lhs), arrow: arrow}
		if f := strings.Fields(rhs); !(len(f) == 1 && f[0] == "(none)") {
			l.others = f
		}
		out = append(out, l)
	}
	if len(out) == 0 {
		t.Fatalf("%s: no data-flow lines in a code block under \"## Data flow\"", path)
	}
	return out
}

// TestDataFlowPicture: DEVELOPERS.md's picture is the import graph, edge
// for edge, every package of the module has its line, and within each
// block no package imports one on an earlier line (data flows one way,
// down the page).
func TestDataFlowPicture(t *testing.T) {
	dir := root(t)
	path := filepath.Join(dir, "DEVELOPERS.md")
	lines := picture(t, path)
	g := imports(t, dir)

	documented := map[[2]string]int{} // edge → line
	seen := map[string]int{}
	for _, l := range lines {
		if prev, ok := seen[l.pkg+l.arrow]; ok {
			t.Errorf("DEVELOPERS.md:%d: %s has a line already (line %d)", l.n, l.pkg, prev)
		}
		seen[l.pkg+l.arrow] = l.n
		if _, ok := g[l.pkg]; !ok {
			t.Errorf("DEVELOPERS.md:%d: no package %s in the module", l.n, l.pkg)
		}
		for _, o := range l.others {
			e := [2]string{l.pkg, o}
			if l.arrow == "←" {
				e = [2]string{o, l.pkg}
			}
			documented[e] = l.n
		}
	}
	var problems []string
	var names []string
	for p := range g {
		names = append(names, p)
	}
	sort.Strings(names)
	for _, p := range names {
		if _, ok := seen[p+"→"]; !ok {
			if _, ok := seen[p+"←"]; !ok {
				problems = append(problems, fmt.Sprintf("package %s has no line", p))
			}
		}
		for _, imp := range g[p] {
			if _, ok := documented[[2]string{p, imp}]; !ok {
				problems = append(problems, fmt.Sprintf("%s imports %s, which the picture does not say", p, imp))
			}
		}
	}
	for e, n := range documented {
		found := false
		for _, imp := range g[e[0]] {
			found = found || imp == e[1]
		}
		if !found {
			problems = append(problems, fmt.Sprintf("line %d says %s imports %s, which it does not", n, e[0], e[1]))
		}
	}
	// One way: a package imports only packages on later lines of its block.
	pos := map[[2]int]map[string]int{}
	for i, l := range lines {
		if l.arrow != "→" {
			continue
		}
		k := [2]int{l.block, 0}
		if pos[k] == nil {
			pos[k] = map[string]int{}
		}
		pos[k][l.pkg] = i
	}
	for i, l := range lines {
		if l.arrow != "→" {
			continue
		}
		for _, o := range l.others {
			if j, ok := pos[[2]int{l.block, 0}][o]; ok && j <= i {
				problems = append(problems, fmt.Sprintf("line %d: %s imports %s, listed above it (data must flow down the page)", l.n, l.pkg, o))
			}
		}
	}
	sort.Strings(problems)
	for _, p := range problems {
		t.Errorf("DEVELOPERS.md, Data flow: %s", p)
	}
	if len(problems) > 0 {
		t.Log("go list's graph (non-test imports within the module):")
		for _, p := range names {
			t.Logf("  %s → %s", p, strings.Join(g[p], " "))
		}
	}
}
