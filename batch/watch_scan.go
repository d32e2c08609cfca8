package batch

// Scanning the watched folder and settling: which files each folder holds
// and whether every one has stopped changing. Stat only; nothing is read.

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"
)

// observation is what the watcher knows of a file between polls.
type observation struct {
	size    int64
	mtime   time.Time
	changed time.Time // when it was last seen to change
	// confirmed is set once a later scan found the file unchanged: a file
	// seen once is never read, whatever its modification time says (a copy
	// may set an old time before its data have arrived).
	confirmed bool
	header    *watchFile
}

// ignoredName reports whether a file or folder name in the watched folder
// is never part of a case: hidden names (the watcher's own .failed and
// .voxgamma, partial uploads such as rsync's) and names of files still
// being transferred (*.part, *.partial, *.tmp, *.crdownload).
func ignoredName(name string) bool {
	if strings.HasPrefix(name, ".") {
		return true
	}
	l := strings.ToLower(name)
	for _, s := range []string{".part", ".partial", ".tmp", ".crdownload"} {
		if strings.HasSuffix(l, s) {
			return true
		}
	}
	return false
}

// scan lists the units of the watched folder: "." for the files directly
// in it, and each immediate subfolder's name for the files in it. It
// stats only.
func (w *Watcher) scan() (map[string][]string, error) {
	units := map[string][]string{}
	entries, err := os.ReadDir(w.dir)
	if err != nil {
		return nil, fmt.Errorf("watch: listing %s: %w", w.dir, err)
	}
	for _, e := range entries {
		if ignoredName(e.Name()) {
			continue
		}
		p := filepath.Join(w.dir, e.Name())
		switch {
		case e.Type().IsRegular():
			units["."] = append(units["."], p)
		case e.IsDir():
			if st, err := os.Stat(p); err == nil && os.SameFile(st, w.outInfo) {
				continue
			}
			sub, err := os.ReadDir(p)
			if err != nil {
				w.log.Warn("cannot list a subfolder", "folder", w.unitName(e.Name()), "error", w.scrub(e.Name(), err.Error()))
				continue
			}
			for _, s := range sub {
				if !ignoredName(s.Name()) && s.Type().IsRegular() {
					units[e.Name()] = append(units[e.Name()], filepath.Join(p, s.Name()))
				}
			}
			if _, ok := units[e.Name()]; !ok {
				units[e.Name()] = nil
			}
		}
	}
	return units, nil
}

// observe stats the files and updates when each last changed; it returns
// the units' quick fingerprints and whether every file of each has been
// unchanged for the settle time.
func (w *Watcher) observe(units map[string][]string, now time.Time) (fps map[string]string, settled map[string]bool) {
	fps, settled = map[string]string{}, map[string]bool{}
	seen := map[string]bool{}
	for u, files := range units {
		h := sha256.New()
		ok := true
		sort.Strings(files)
		for _, p := range files {
			st, err := os.Lstat(p)
			if err != nil {
				ok = false // vanished between list and stat: look again later
				continue
			}
			seen[p] = true
			o := w.obs[p]
			if o == nil {
				// First sight: trust the modification time, so that files
				// already at rest when the watcher starts are not held up.
				changed := st.ModTime()
				if changed.After(now) {
					changed = now
				}
				o = &observation{size: st.Size(), mtime: st.ModTime(), changed: changed}
				w.obs[p] = o
			} else if o.size != st.Size() || !o.mtime.Equal(st.ModTime()) {
				o.size, o.mtime, o.changed, o.header, o.confirmed = st.Size(), st.ModTime(), now, nil, false
			} else {
				o.confirmed = true
			}
			if !o.confirmed || now.Sub(o.changed) < w.opt.Settle {
				ok = false
			}
			fmt.Fprintf(h, "%s\x00%d\x00%d\n", w.rel(p), o.size, o.mtime.UnixNano())
		}
		fps[u] = hex.EncodeToString(h.Sum(nil))
		settled[u] = ok
	}
	for p := range w.obs {
		if !seen[p] {
			delete(w.obs, p)
		}
	}
	return fps, settled
}

func (w *Watcher) rel(p string) string {
	if r, err := filepath.Rel(w.dir, p); err == nil {
		return filepath.ToSlash(r)
	}
	return p
}
