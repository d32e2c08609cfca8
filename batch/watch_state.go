package batch

// The state file: every case finished, keyed by the content of its files,
// and each folder's fingerprint as last handled, so that a restart redoes
// nothing and an idle folder costs a stat per file.

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"time"

	"voxgamma/deid"
	"voxgamma/internal/atomicfile"
)

// stateEntry records one case the watcher finished.
type stateEntry struct {
	// Key is the case key, Folder the unit it came from ("." for the
	// watched folder itself).
	Key    string `json:"case_key"`
	Folder string `json:"folder"`
	// Files are the case's files as they were read.
	Files []stateFile `json:"files"`
	// Quick is the fingerprint of the files' paths, sizes and modification
	// times alone, to recognise the case without reading it.
	Quick     string `json:"quick"`
	Verdict   string `json:"verdict"`
	Error     string `json:"error,omitempty"`
	Output    string `json:"output,omitempty"`
	MovedTo   string `json:"moved_to,omitempty"`
	Processed string `json:"processed"`
}

type stateFile struct {
	Path    string `json:"path"`
	Size    int64  `json:"size"`
	MtimeNS int64  `json:"mtime_ns"`
	SHA256  string `json:"sha256"`
}

// watchState is the state file: every case finished, keyed by the
// fingerprint of its files (relative paths, sizes, modification times and
// SHA-256), and the fingerprint of each folder as last handled.
type watchState struct {
	SchemaVersion string                 `json:"schema_version"`
	Cases         map[string]*stateEntry `json:"cases"`
	Units         map[string]string      `json:"folders"`
}

func (w *Watcher) statePath() string { return filepath.Join(w.out, WatchStateFile) }

func (w *Watcher) loadState() error {
	w.state = &watchState{SchemaVersion: WatchStateSchemaVersion, Cases: map[string]*stateEntry{}, Units: map[string]string{}}
	data, err := os.ReadFile(w.statePath())
	if os.IsNotExist(err) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("watch: reading %s: %w", w.statePath(), err)
	}
	if err := json.Unmarshal(data, w.state); err != nil {
		return fmt.Errorf("watch: reading %s: %w (move it away to start afresh: every case present would be processed again)", w.statePath(), err)
	}
	if w.state.Cases == nil {
		w.state.Cases = map[string]*stateEntry{}
	}
	if w.state.Units == nil {
		w.state.Units = map[string]string{}
	}
	for k, e := range w.state.Cases {
		if e.Quick != "" {
			w.quick[e.Quick] = k
		}
	}
	return nil
}

func (w *Watcher) saveState() error {
	data, err := json.MarshalIndent(w.state, "", "  ")
	if err != nil {
		return fmt.Errorf("watch: encoding the state: %w", err)
	}
	return atomicfile.WriteBytes(w.statePath(), append(data, '\n'))
}

// unitKey is how the state file names a folder of the watched folder: its
// name, or a keyed token of it when de-identified.
func (w *Watcher) unitKey(unit string) string {
	if w.deid == nil {
		return unit
	}
	return "folder-" + w.deid.Key.Token(deid.KindPath, unit)
}

// printKey is how the state file records a fingerprint of file names,
// sizes and times: as it is, or keyed when de-identified (an unkeyed hash
// of a guessable name could be confirmed by anyone).
func (w *Watcher) printKey(fp string) string {
	if w.deid == nil || fp == "" {
		return fp
	}
	return w.deid.Key.Token("fingerprint", fp)
}

// record adds a finished case to the state. De-identified, the entry
// names no file and no folder and holds no date: the case key and the
// content hashes identify it.
func (w *Watcher) record(full, quick string, c *watchCase, files []*watchFile, verdict, errMsg, output, movedTo string) {
	e := &stateEntry{Key: c.key, Folder: w.unitName(c.unit), Quick: quick, Verdict: verdict, Error: errMsg, Output: output, MovedTo: movedTo,
		Processed: time.Now().UTC().Format(time.RFC3339), Files: []stateFile{}}
	if w.deid != nil {
		e.Processed = ""
	}
	for _, f := range files {
		sf := stateFile{Path: f.rel, Size: f.size, MtimeNS: f.mtime.UnixNano(), SHA256: f.sha}
		if w.deid != nil {
			sf.Path, sf.MtimeNS = "", 0
		}
		e.Files = append(e.Files, sf)
	}
	if full == "" {
		full = "quick:" + quick
	}
	w.state.Cases[full] = e
	w.quick[quick] = full
}
