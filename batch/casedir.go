package batch

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"
)

// CasesDir is the folder, under a batch's output folder, that holds one
// folder per case.
const CasesDir = "cases"

// Temporary-folder markers: a case is built in cases/.<id>.tmp-<random> and
// renamed into place; a case folder being replaced is first renamed to
// cases/.<id>.old-<time>.
const (
	tmpMarker = ".tmp-"
	oldMarker = ".old-"
)

// newCaseTemp creates the temporary folder a case is built in.
func newCaseTemp(parent, id string) (string, error) {
	dir, err := os.MkdirTemp(parent, "."+id+tmpMarker)
	if err != nil {
		return "", fmt.Errorf("case %s: creating its temporary folder in %s: %w", id, parent, err)
	}
	return dir, nil
}

// installCase renames the finished temporary folder tmp to parent/id,
// replacing a previous folder of that name: the previous one is renamed
// aside first and removed after. A run killed between the two renames
// leaves parent/.<id>.old-*, which [cleanStale] puts back.
func installCase(parent, id, tmp string) error {
	final := filepath.Join(parent, id)
	var old string
	if _, err := os.Lstat(final); err == nil {
		old = filepath.Join(parent, fmt.Sprintf(".%s%s%d", id, oldMarker, time.Now().UnixNano()))
		if err := os.Rename(final, old); err != nil {
			return fmt.Errorf("case %s: moving the previous %s aside: %w", id, final, err)
		}
	}
	if err := os.Rename(tmp, final); err != nil {
		if old != "" {
			os.Rename(old, final)
		}
		return fmt.Errorf("case %s: renaming %s to %s: %w", id, tmp, final, err)
	}
	syncDir(parent)
	if old != "" {
		if err := os.RemoveAll(old); err != nil {
			return fmt.Errorf("case %s: removing the previous folder %s: %w", id, old, err)
		}
	}
	return nil
}

// syncDir flushes a directory's entries (the renames) to disk where the
// platform allows it.
func syncDir(dir string) {
	if f, err := os.Open(dir); err == nil {
		f.Sync()
		f.Close()
	}
}

// staleOwner returns the case id a temporary or set-aside folder name
// belongs to, and which kind it is.
func staleOwner(name string) (id string, isOld, ok bool) {
	if !strings.HasPrefix(name, ".") {
		return "", false, false
	}
	if i := strings.LastIndex(name, tmpMarker); i > 1 {
		return name[1:i], false, true
	}
	if i := strings.LastIndex(name, oldMarker); i > 1 {
		return name[1:i], true, true
	}
	return "", false, false
}

// cleanStale removes the temporary folders that runs killed part-way left
// in parent for the cases owned (those of this run: other shards' folders
// are left alone, as they may be live), and puts back a set-aside previous
// folder whose replacement never arrived. It returns what it did, one line
// each.
func cleanStale(parent string, owned func(id string) bool) ([]string, error) {
	entries, err := os.ReadDir(parent)
	if err != nil {
		if os.IsNotExist(err) {
			return nil, nil
		}
		return nil, fmt.Errorf("listing %s: %w", parent, err)
	}
	var did []string
	for _, e := range entries {
		id, isOld, ok := staleOwner(e.Name())
		if !ok || !e.IsDir() || !owned(id) {
			continue
		}
		path := filepath.Join(parent, e.Name())
		if isOld {
			final := filepath.Join(parent, id)
			if _, err := os.Lstat(final); os.IsNotExist(err) {
				if err := os.Rename(path, final); err != nil {
					return did, fmt.Errorf("case %s: restoring %s: %w", id, path, err)
				}
				did = append(did, fmt.Sprintf("case %s: restored the previous case folder from %s", id, e.Name()))
				continue
			}
		}
		if err := os.RemoveAll(path); err != nil {
			return did, fmt.Errorf("case %s: removing stale %s: %w", id, path, err)
		}
		did = append(did, fmt.Sprintf("case %s: removed stale temporary folder %s", id, e.Name()))
	}
	return did, nil
}
