package batch

// Case keys (the names of the output folders) and what de-identification
// shows of a folder of the watched folder.

import (
	"crypto/sha256"
	"encoding/hex"
	"path/filepath"
	"strings"

	"voxgamma/deid"
)

// scope returns the de-identification scope of a folder of the watched
// folder (nil without de-identification), made on first use: the folder's
// path and name stand for its case key, each file's for [deid.FileRemoved].
func (w *Watcher) scope(unit string, paths []string) *deid.Scope {
	if w.deid == nil {
		return nil
	}
	s := w.scopes[unit]
	if s == nil {
		// Kept for as long as the folder exists, but part of the run's
		// own scrubbing only while the folder is handled (handleUnit):
		// a folder of many cases costs each log line one scope.
		s = w.deid.Scope()
		s.Close()
		w.scopes[unit] = s
		if unit != "." {
			key := w.subfolderKey(unit)
			s.Path(filepath.Join(w.dir, unit), key)
			s.Text(unit, key)
		}
	}
	for _, p := range paths {
		s.File(p, deid.FileRemoved)
		s.Text(w.rel(p), deid.FileRemoved)
	}
	return s
}

// scrub de-identifies a message about a folder of the watched folder.
func (w *Watcher) scrub(unit, msg string) string {
	if w.deid == nil {
		return msg
	}
	return w.scope(unit, nil).Scrub(msg)
}

// unitName is a folder of the watched folder as logs and the state show it:
// its name, or its case key when de-identified.
func (w *Watcher) unitName(unit string) string {
	if w.deid == nil || unit == "." {
		return unit
	}
	return w.subfolderKey(unit)
}

// subfolderKey is the case key (and output folder name) of a subfolder:
// its name when that is a valid id (letters, digits, '.', '_', '-') that
// does not start with a prefix the other keys use ("for-", "file-", "x-"),
// else "x-", the name made filesystem-safe and 16 hex digits of
// its SHA-256; when de-identified, "case-" and a keyed token of the name.
// The prefixes keep the kinds of keys apart, so no folder name can take
// another case's output folder.
func (w *Watcher) subfolderKey(unit string) string {
	if w.deid != nil {
		return "case-" + w.deid.Key.Token(deid.KindPath, unit)
	}
	return safeKey(unit)
}

// flatKey is the case key of a frame of reference in the flat layout:
// "for-" and 12 hex digits of its SHA-256 (a keyed token when
// de-identified).
func (w *Watcher) flatKey(frame string) string {
	if w.deid != nil {
		return "for-" + w.deid.Key.Token(deid.KindFrame, frame)[:12]
	}
	return frameKey(frame)
}

// brokenKey is the case key of an unreadable file in the flat layout:
// "file-" and the key its stem would have as a subfolder.
func (w *Watcher) brokenKey(stem string) string {
	if w.deid != nil {
		return "file-" + w.deid.Key.Token(deid.KindPath, stem)
	}
	return "file-" + safeKey(stem)
}

// reservedKeyPrefixes start the keys of cases that are not named after a
// subfolder (flat layout, broken files, altered names): a subfolder named
// with one of them gets an altered key, so that it can never take the
// output folder of another case. (De-identified runs name every case by a
// keyed token, with the prefixes case-, for- and file-.)
var reservedKeyPrefixes = []string{"for-", "file-", "x-"}

// safeKey turns a folder name into a case key usable as a folder name: the
// name itself when it is a valid id (see [ValidID]) that starts with no
// reserved prefix, else "x-", the name with every character but ASCII
// letters, digits, '.', '_' and '-' made '_' (at most 60 of them), "-" and
// 16 hex digits of the name's SHA-256.
func safeKey(name string) string {
	keep := ValidID(name) == nil
	for _, p := range reservedKeyPrefixes {
		if len(name) >= len(p) && strings.EqualFold(name[:len(p)], p) {
			keep = false
		}
	}
	if keep {
		return name
	}
	var b strings.Builder
	for _, r := range name {
		if r < 128 && (r == '.' || r == '_' || r == '-' || r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z') {
			b.WriteRune(r)
		} else {
			b.WriteByte('_')
		}
	}
	k := b.String()
	if len(k) > 60 {
		k = k[:60]
	}
	sum := sha256.Sum256([]byte(name))
	return "x-" + k + "-" + hex.EncodeToString(sum[:8])
}

// frameKey is the case key of a frame of reference in the flat layout.
func frameKey(frame string) string {
	sum := sha256.Sum256([]byte(frame))
	return "for-" + hex.EncodeToString(sum[:6])
}
