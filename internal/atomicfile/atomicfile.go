// Package atomicfile writes files so that a reader, or a run stopped at any
// instant, sees either the old file (or none) or the complete new one, never
// a half-written file: the data goes to a temporary file in the same
// directory, is synced, and is renamed over the target.
package atomicfile

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// Write writes the file at path atomically. fill writes the content; if it
// fails, or any step of writing fails, the temporary file is removed, path is
// left as it was, and the error names path. Only a regular file is ever
// replaced: a directory, symbolic link, named pipe, socket or device node at
// path is an error (see [CheckTarget]).
func Write(path string, fill func(w io.Writer) error) (err error) {
	if err := CheckTarget(path); err != nil {
		return err
	}
	dir := filepath.Dir(path)
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	bw := bufio.NewWriterSize(tmp, 1<<20)
	if err = fill(bw); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err = bw.Flush(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err = tmp.Chmod(0o644); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err = tmp.Sync(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err = tmp.Close(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err = CheckTarget(path); err != nil {
		return err
	}
	if err = os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// WriteBytes writes data to path atomically.
func WriteBytes(path string, data []byte) error {
	return Write(path, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
}

// CheckTarget returns nil when path does not exist or is a regular file,
// the only things a write may create or replace; otherwise an error naming
// path and what it is ("a named pipe (FIFO)", "a device node", ...). A
// rename over a special file would replace the file itself, not write to
// it: a pipe a reader waits on, or a device node, would be gone.
func CheckTarget(path string) error {
	st, err := os.Lstat(path)
	if err != nil {
		if os.IsNotExist(err) {
			return nil
		}
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if st.Mode().IsRegular() {
		return nil
	}
	return fmt.Errorf("writing %s: it is %s, not a regular file: only regular files are overwritten", path, Kind(st.Mode()))
}

// Kind names the kind of file a mode describes, with its article: "a
// directory", "a symbolic link", "a named pipe (FIFO)", "a socket", "a
// device node", "a regular file".
func Kind(m os.FileMode) string {
	switch {
	case m.IsDir():
		return "a directory"
	case m&os.ModeSymlink != 0:
		return "a symbolic link"
	case m&os.ModeNamedPipe != 0:
		return "a named pipe (FIFO)"
	case m&os.ModeSocket != 0:
		return "a socket"
	case m&os.ModeCharDevice != 0:
		return "a character device node"
	case m&os.ModeDevice != 0:
		return "a block device node"
	case m.IsRegular():
		return "a regular file"
	}
	return "not a regular file"
}
