// Package safetext makes text that came from input files safe to show: on a
// terminal, in an HTML page and in a CSV cell that a spreadsheet opens.
//
// Text from a DICOM file (an ROI name, a series description) is chosen by
// whoever wrote the file. Written raw it can drive the terminal that shows
// it (ESC sequences retitle, clear or rewrite the screen; BEL beeps; NUL and
// other controls confuse pagers), reorder what a reader sees (the Unicode
// bidirectional overrides and isolates, U+202A to U+202E and U+2066 to
// U+2069), or, as the first character of a CSV cell, make a spreadsheet
// evaluate it as a formula.
//
// [Visible] writes such characters as Go-style escapes (\x1b, \u202e) and
// invalid UTF-8 bytes as \xNN; [NewWriter] does the same to a stream, so a
// whole output (a command's stdout and stderr, a review page) goes through
// one filter. [CSVCell] escapes a formula-leading cell after OWASP's CSV
// injection guidance.
package safetext

import (
	"fmt"
	"io"
	"strings"
	"unicode"
	"unicode/utf8"
)

// keep reports whether r may be written as it is. Letters, marks, numbers,
// punctuation, symbols and the ASCII space are kept (unicode.IsPrint); so
// are the line feed and the tab when the caller allows them (layout, never
// control). Everything else (C0 and C1 controls, DEL, format characters
// such as the bidirectional overrides and zero-width joiners, line and
// paragraph separators, private-use and unassigned code points) is escaped.
func keep(r rune, newlines bool) bool {
	if r == '\n' || r == '\t' {
		return newlines
	}
	return unicode.IsPrint(r)
}

func escape(b *strings.Builder, r rune) {
	switch {
	case r < 0x80:
		fmt.Fprintf(b, `\x%02x`, r)
	case r <= 0xFFFF:
		fmt.Fprintf(b, `\u%04x`, r)
	default:
		fmt.Fprintf(b, `\U%08x`, r)
	}
}

// Visible returns s with every character that is not printable written as
// an escape: \x1b for ESC, \x07 for BEL, \x00 for NUL, \n for a line feed,
// \u202e for RIGHT-TO-LEFT OVERRIDE, \xff for a byte that is not UTF-8.
// Printable text (any script) is unchanged. Use it for one value shown
// inside a line.
func Visible(s string) string { return visible(s, false) }

// VisibleLines is [Visible] keeping line feeds and tabs: for whole
// messages whose lines are laid out by the program.
func VisibleLines(s string) string { return visible(s, true) }

func visible(s string, newlines bool) string {
	clean := true
	for i, r := range s {
		if r == utf8.RuneError {
			if _, n := utf8.DecodeRuneInString(s[i:]); n == 1 {
				clean = false
				break
			}
		}
		if !keep(r, newlines) {
			clean = false
			break
		}
	}
	if clean {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && n == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case r == '\n' && !newlines:
			b.WriteString(`\n`)
		case r == '\t' && !newlines:
			b.WriteString(`\t`)
		case keep(r, newlines):
			b.WriteString(s[i : i+n])
		default:
			escape(&b, r)
		}
		i += n
	}
	return b.String()
}

// Writer passes text to an underlying writer with every character that is
// not printable escaped as by [VisibleLines] (line feeds and tabs kept).
// Text is processed as it is written; a UTF-8 sequence cut between two
// writes is held back until the next write (or [Writer.Flush]).
type Writer struct {
	w       io.Writer
	pending []byte
	// Filter, when not nil, is applied to each written text before the
	// escaping (de-identification of a run's output, for example).
	Filter func(string) string
}

// NewWriter returns a Writer writing to w.
func NewWriter(w io.Writer) *Writer { return &Writer{w: w} }

// Write escapes p and writes it; it reports len(p) written when the
// underlying writer took the whole escaped text.
func (sw *Writer) Write(p []byte) (int, error) {
	buf := append(sw.pending, p...)
	sw.pending = nil
	// Hold back an incomplete UTF-8 sequence at the end.
	cut := len(buf)
	for k := 1; k <= 3 && k <= len(buf); k++ {
		c := buf[len(buf)-k]
		if c < 0x80 {
			break
		}
		if utf8.RuneStart(c) {
			if !utf8.FullRune(buf[len(buf)-k:]) {
				cut = len(buf) - k
			}
			break
		}
	}
	if cut < len(buf) {
		sw.pending = append([]byte(nil), buf[cut:]...)
	}
	if err := sw.emit(string(buf[:cut])); err != nil {
		return 0, err
	}
	return len(p), nil
}

func (sw *Writer) emit(s string) error {
	if s == "" {
		return nil
	}
	if sw.Filter != nil {
		s = sw.Filter(s)
	}
	_, err := io.WriteString(sw.w, VisibleLines(s))
	return err
}

// Flush writes what an incomplete UTF-8 sequence held back (escaped).
func (sw *Writer) Flush() error {
	p := sw.pending
	sw.pending = nil
	return sw.emit(string(p))
}

// formulaStart lists the characters that make a spreadsheet read a cell as
// a formula (or as the start of one) when they come first: = + - @, tab,
// carriage return and line feed (OWASP, "CSV Injection": cells must not
// begin with =, +, -, @, tab or carriage return; ASVS 1.2.10 adds NUL), and
// the full-width forms of = + - @, which some spreadsheets read as the
// ASCII ones.
const formulaStart = "=+-@\t\r\n\x00＝＋－＠"

// CSVCell returns text for a CSV cell that a spreadsheet will show as text,
// never evaluate: a value whose first character, after any leading spaces,
// is one of = + - @ (or their full-width forms), tab, carriage return, line
// feed or NUL gets a leading apostrophe, as OWASP's CSV injection guidance
// recommends ("'=1+1" is shown as =1+1). Quoting and doubling of quotes
// are left to the CSV writer (RFC 4180). Use it for text from files and
// messages, not for numbers the program formats itself (a negative number
// such as -1.5 must stay a number).
func CSVCell(s string) string {
	t := strings.TrimLeft(s, " ")
	if t == "" {
		return s
	}
	r, _ := utf8.DecodeRuneInString(t)
	if strings.ContainsRune(formulaStart, r) {
		return "'" + s
	}
	return s
}
