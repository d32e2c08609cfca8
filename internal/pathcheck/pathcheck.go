// Package pathcheck compares paths the way the filesystem sees them, so
// that an output never lands on, over or inside an input: every path is made
// absolute and its symbolic links resolved (for a path that does not exist
// yet, those of its nearest existing ancestor), and a path is inside another
// when it is that path or lies below it.
package pathcheck

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
)

// Resolve returns p absolute and with its symbolic links resolved. For a
// path that does not exist (an output folder not made yet), the nearest
// existing ancestor is resolved and the rest appended.
func Resolve(p string) string {
	a, err := filepath.Abs(p)
	if err != nil {
		return filepath.Clean(p)
	}
	rest := ""
	for cur := a; ; {
		if r, err := filepath.EvalSymlinks(cur); err == nil {
			return filepath.Join(r, rest)
		}
		parent := filepath.Dir(cur)
		if parent == cur {
			return a
		}
		rest = filepath.Join(filepath.Base(cur), rest)
		cur = parent
	}
}

// forms returns the absolute lexical form of p (where a symbolic link
// sits) and its resolved form (where it points).
func forms(p string) []string {
	a, err := filepath.Abs(p)
	if err != nil {
		a = filepath.Clean(p)
	}
	r := Resolve(p)
	if r == a {
		return []string{a}
	}
	return []string{a, r}
}

// Within reports whether p is base or lies below it; both must be clean
// absolute paths (as [Resolve] returns).
func Within(p, base string) bool {
	if p == base {
		return true
	}
	rel, err := filepath.Rel(base, p)
	return err == nil && rel != ".." && !strings.HasPrefix(rel, "../") && !filepath.IsAbs(rel)
}

// Overlap says how an output folder and an input overlap: the folder is
// the input, contains it, or lies inside it (an input folder).
type Overlap struct {
	Out, Input string
	// How is "is", "contains" or "is inside".
	How string
}

func (o *Overlap) Error() string {
	switch o.How {
	case "is":
		return fmt.Sprintf("the output folder %s is the input %s", o.Out, o.Input)
	case "contains":
		return fmt.Sprintf("the output folder %s contains the input %s", o.Out, o.Input)
	}
	return fmt.Sprintf("the output folder %s is inside the input folder %s", o.Out, o.Input)
}

// FolderOverlap returns an [*Overlap] error when the output folder out
// would hold, replace or remove an input: out is an input, contains one
// (its files could be replaced or removed with the folder's contents), or
// lies inside an input folder (whose content would change). Paths are
// compared both where they are written and where their symbolic links
// point. Empty inputs are skipped; nil means no overlap.
func FolderOverlap(out string, inputs []string) error {
	outs := forms(out)
	for _, in := range inputs {
		if in == "" {
			continue
		}
		isDir := false
		if st, err := os.Stat(in); err == nil && st.IsDir() {
			isDir = true
		}
		for _, i := range forms(in) {
			for _, o := range outs {
				switch {
				case o == i:
					return &Overlap{Out: out, Input: in, How: "is"}
				case Within(i, o):
					return &Overlap{Out: out, Input: in, How: "contains"}
				case isDir && Within(o, i):
					return &Overlap{Out: out, Input: in, How: "is inside"}
				}
			}
		}
	}
	return nil
}

// FileInFolder returns the input folder among inputs that would hold the
// output file out ("" when none): writing it would change that folder's
// content.
func FileInFolder(out string, inputs []string) string {
	outs := forms(out)
	for _, in := range inputs {
		if in == "" {
			continue
		}
		if st, err := os.Stat(in); err != nil || !st.IsDir() {
			continue
		}
		for _, i := range forms(in) {
			for _, o := range outs {
				if Within(o, i) {
					return in
				}
			}
		}
	}
	return ""
}
