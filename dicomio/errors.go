package dicomio

import (
	"errors"
	"fmt"

	"github.com/suyashkumar/dicom/pkg/tag"
)

// Error kinds. Every error returned by the readers names the file and, where
// one is to blame, the tag; it also matches one of these with errors.Is so a
// caller can tell bad input from other failures.
var (
	// ErrNotDICOM: the file is neither a DICOM file with a "DICM" file meta
	// header nor an unambiguous raw little-endian DICOM data set.
	ErrNotDICOM = errors.New("not a DICOM file")
	// ErrUnsupported: a valid DICOM encoding or layout this package does not
	// read (big endian, compressed pixel data, 8-bit dose, ...).
	ErrUnsupported = errors.New("unsupported DICOM encoding")
	// ErrInvalid: missing, malformed or contradictory content.
	ErrInvalid = errors.New("invalid DICOM content")
)

// contentError is an error of one of the kinds above with its own message.
type contentError struct {
	kind error
	msg  string
}

func (e *contentError) Error() string { return e.msg }
func (e *contentError) Unwrap() error { return e.kind }

// invalid returns an ErrInvalid error whose message starts with the tag.
func invalid(t tag.Tag, format string, args ...any) error {
	return &contentError{kind: ErrInvalid, msg: tagString(t) + ": " + fmt.Sprintf(format, args...)}
}

// invalidf returns an ErrInvalid error with the message as given.
func invalidf(format string, args ...any) error {
	return &contentError{kind: ErrInvalid, msg: fmt.Sprintf(format, args...)}
}

// unsupportedf returns an ErrUnsupported error with the message as given.
func unsupportedf(format string, args ...any) error {
	return &contentError{kind: ErrUnsupported, msg: fmt.Sprintf(format, args...)}
}

// notDICOMf returns an ErrNotDICOM error with the message as given.
func notDICOMf(format string, args ...any) error {
	return &contentError{kind: ErrNotDICOM, msg: "not a DICOM file: " + fmt.Sprintf(format, args...)}
}

// missing returns the error for an absent required tag.
func missing(t tag.Tag, why string) error {
	if why != "" {
		return invalid(t, "missing (%s)", why)
	}
	return invalid(t, "missing")
}

// ModalityError is returned (wrapped, matching ErrInvalid) when a file's
// Modality (0008,0060) is not the one asked for: an RT Structure Set where
// a dose is expected, a CT image, a plan. Callers sorting files by kind use
// errors.As to read Got instead of parsing the message.
type ModalityError struct {
	// Got is the file's Modality, empty when the file has none.
	Got string
	// Want is the modality asked for.
	Want string
}

func (e *ModalityError) Error() string {
	if e.Got == "" {
		return tagString(tagModality) + ": missing (want " + e.Want + ")"
	}
	return tagString(tagModality) + ": is " + e.Got + ", want " + e.Want
}

// Unwrap makes a ModalityError match ErrInvalid.
func (e *ModalityError) Unwrap() error { return ErrInvalid }
