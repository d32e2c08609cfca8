package report

import (
	"encoding/json"
	"fmt"
	"io"

	"voxgamma/internal/atomicfile"
	"voxgamma/result"
)

// EncodeJSON writes r to w as JSON indented by two spaces, with a trailing
// newline. Characters such as <, > and & are written as themselves, not
// escaped. Equal results give identical bytes: struct fields keep their
// declared order and map keys (in Protocol) are sorted.
func EncodeJSON(w io.Writer, r *result.Result) error {
	if r == nil {
		return fmt.Errorf("report: encoding JSON: no result")
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(r); err != nil { // Encode adds the trailing newline.
		return fmt.Errorf("report: encoding JSON result: %w", err)
	}
	return nil
}

// WriteJSON writes r as JSON (see [EncodeJSON]) to the file at path,
// atomically: on any error the file is left as it was.
func WriteJSON(path string, r *result.Result) error {
	if err := atomicfile.Write(path, func(w io.Writer) error { return EncodeJSON(w, r) }); err != nil {
		return fmt.Errorf("report: JSON: %w", err)
	}
	return nil
}
