package report

// The PDF review's text primitives: the characters its embedded fonts can
// print, headings, paragraphs, wrapping, tables and boxes.

import (
	"fmt"
	"strings"
	"sync"
	"unicode"

	"codeberg.org/go-fonts/liberation/liberationmonoregular"
	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"golang.org/x/image/font/sfnt"
)

// pdfFallback replaces the symbols the page uses that Liberation Sans has
// no glyph for (the marks are also said in words).
var pdfFallback = strings.NewReplacer("✔ ", "", "✘ ", "", "✔", "", "✘", "", "⚠ ", "", "⚠", "!")

// pdfGlyphs tells whether the embedded fonts can print a character.
var pdfGlyphs = func() func(rune) bool {
	var fonts []*sfnt.Font
	for _, ttf := range [][]byte{liberationsansregular.TTF, liberationsansbold.TTF, liberationmonoregular.TTF} {
		if f, err := sfnt.Parse(ttf); err == nil {
			fonts = append(fonts, f)
		}
	}
	var mu sync.Mutex
	var buf sfnt.Buffer
	known := map[rune]bool{}
	return func(r rune) bool {
		mu.Lock()
		defer mu.Unlock()
		if ok, seen := known[r]; seen {
			return ok
		}
		ok := false
		for _, f := range fonts {
			if g, err := f.GlyphIndex(&buf, r); err == nil && g != 0 {
				ok = true
				break
			}
		}
		known[r] = ok
		return ok
	}
}()

// pdfText is s as the PDF prints it: the page's marks left out (their
// words remain), and control characters, bidirectional overrides and
// characters the embedded fonts cannot draw written as visible escapes
// (\u202e), so that text from the input files can neither hide nor
// reorder what the reader sees.
func pdfText(s string) string {
	s = pdfFallback.Replace(s)
	var b strings.Builder
	for _, r := range s {
		switch {
		case r == '\n':
			b.WriteRune(r)
		case r == '\t':
			b.WriteRune(' ')
		case unicode.IsControl(r) || unicode.Is(unicode.Bidi_Control, r) || unicode.Is(unicode.Cf, r) || !pdfGlyphs(r):
			if r <= 0xFFFF {
				fmt.Fprintf(&b, "\\u%04x", r)
			} else {
				fmt.Fprintf(&b, "\\U%08x", r)
			}
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}

func (d *pdfDoc) font(style string, size float64) { d.f.SetFont("sans", style, size) }
func (d *pdfDoc) mono(size float64)               { d.f.SetFont("mono", "", size) }
func (d *pdfDoc) color(c [3]int)                  { d.f.SetTextColor(c[0], c[1], c[2]) }

// heading starts a section (new page when little room is left) and adds
// it to the document outline.
func (d *pdfDoc) heading(text string, level int) {
	f := d.f
	_, ph := f.GetPageSize()
	if f.GetY() > ph-pdfMargin-40 {
		f.AddPage()
	}
	f.Ln(2)
	f.Bookmark(text, level, -1)
	size := 13.0
	if level > 0 {
		size = 11
	}
	d.font("B", size)
	d.color(pdfInk)
	f.CellFormat(d.w, size*0.5, pdfText(text), "", 1, "L", false, 0, "")
	if level == 0 {
		y := f.GetY()
		f.SetDrawColor(28, 30, 33)
		f.SetLineWidth(0.5)
		f.Line(pdfMargin, y, pdfMargin+d.w, y)
		f.SetLineWidth(0.2)
	}
	f.Ln(1.5)
}

// paragraph writes wrapped text.
func (d *pdfDoc) paragraph(text string, size float64, c [3]int) {
	d.font("", size)
	d.color(c)
	for _, line := range d.wrap(pdfText(text), d.w, false) {
		d.f.CellFormat(d.w, size*0.45, line, "", 1, "L", false, 0, "")
	}
	d.f.Ln(1)
}

// wrap breaks text into lines no wider than w in the current font: at
// spaces, or (path) only after "/" and "\" so that file paths break at
// folder boundaries; a piece wider than the line is cut where it must.
func (d *pdfDoc) wrap(text string, w float64, path bool) []string {
	w -= 2 * d.f.GetCellMargin()
	var out []string
	for _, para := range strings.Split(text, "\n") {
		var pieces []string
		if path {
			start := 0
			for i, r := range para {
				if r == '/' || r == '\\' {
					pieces = append(pieces, para[start:i+1])
					start = i + 1
				}
			}
			pieces = append(pieces, para[start:])
		} else {
			words := strings.Split(para, " ")
			for i, wd := range words {
				if i < len(words)-1 {
					wd += " "
				}
				pieces = append(pieces, wd)
			}
		}
		line := ""
		for _, p := range pieces {
			if d.f.GetStringWidth(strings.TrimRight(line+p, " ")) <= w || line == "" {
				line += p
			} else {
				out = append(out, strings.TrimRight(line, " "))
				line = p
			}
			for d.f.GetStringWidth(strings.TrimRight(line, " ")) > w {
				// A piece wider than the line: cut it.
				rs := []rune(line)
				k := len(rs) - 1
				for k > 1 && d.f.GetStringWidth(string(rs[:k])) > w {
					k--
				}
				out = append(out, string(rs[:k]))
				line = string(rs[k:])
			}
		}
		out = append(out, strings.TrimRight(line, " "))
	}
	return out
}

// pdfCell is a table cell: text, colour, bold, font (mono, path).
type pdfCell struct {
	Text  string
	Color [3]int
	Bold  bool
	Mono  bool
	Path  bool
}

func cell(s string) pdfCell { return pdfCell{Text: s, Color: pdfInk} }

// table draws a table with a header row repeated on each page. Widths are
// fractions of the text width; aligns "L" or "R".
func (d *pdfDoc) table(headers []string, widths []float64, aligns string, rows [][]pdfCell, size float64) {
	f := d.f
	lh := size * 0.45
	ws := make([]float64, len(widths))
	for i, x := range widths {
		ws[i] = x * d.w
	}
	_, ph := f.GetPageSize()
	bottom := ph - pdfMargin - 6
	header := func() {
		if len(headers) == 0 {
			return
		}
		d.font("B", size)
		d.color(pdfInk)
		f.SetFillColor(236, 239, 242)
		hl := 1
		lines := make([][]string, len(headers))
		for i, h := range headers {
			lines[i] = d.wrap(h, ws[i], false)
			hl = max(hl, len(lines[i]))
		}
		x0, y0 := f.GetXY()
		for i := range headers {
			x := x0 + sum(ws[:i])
			f.Rect(x, y0, ws[i], float64(hl)*lh+1.4, "FD")
			for k, l := range lines[i] {
				f.SetXY(x, y0+0.7+float64(k)*lh)
				f.CellFormat(ws[i], lh, l, "", 0, string(aligns[i]), false, 0, "")
			}
		}
		f.SetXY(x0, y0+float64(hl)*lh+1.4)
	}
	f.SetDrawColor(196, 202, 208)
	f.SetLineWidth(0.2)
	header()
	for _, row := range rows {
		// A row with fewer cells than columns: its last cell spans the
		// rest.
		rw := append([]float64(nil), ws[:len(row)]...)
		rw[len(row)-1] = d.w - sum(ws[:len(row)-1])
		lines := make([][]string, len(row))
		n := 1
		for i, c := range row {
			switch {
			case c.Mono:
				d.mono(size - 0.5)
			case c.Bold:
				d.font("B", size)
			default:
				d.font("", size)
			}
			lines[i] = d.wrap(pdfText(c.Text), rw[i], c.Path)
			n = max(n, len(lines[i]))
		}
		h := float64(n)*lh + 1.4
		if f.GetY()+h > bottom {
			f.AddPage()
			header()
		}
		x0, y0 := f.GetXY()
		for i, c := range row {
			x := x0 + sum(rw[:i])
			f.Rect(x, y0, rw[i], h, "D")
			switch {
			case c.Mono:
				d.mono(size - 0.5)
			case c.Bold:
				d.font("B", size)
			default:
				d.font("", size)
			}
			d.color(c.Color)
			for k, l := range lines[i] {
				f.SetXY(x, y0+0.7+float64(k)*lh)
				f.CellFormat(rw[i], lh, l, "", 0, string(aligns[i]), false, 0, "")
			}
		}
		f.SetXY(x0, y0+h)
	}
	d.color(pdfInk)
	f.Ln(2)
}

func sum(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s
}

// box writes text in a framed box (verdict, failures, caution).
func (d *pdfDoc) box(title, text string, border, c [3]int, size float64) {
	f := d.f
	d.font("", size)
	lines := d.wrap(pdfText(text), d.w-6, false)
	h := float64(len(lines))*size*0.45 + 3
	if title != "" {
		h += size * 0.5
	}
	x, y := f.GetXY()
	f.SetDrawColor(border[0], border[1], border[2])
	f.SetLineWidth(0.5)
	f.Rect(x, y, d.w, h, "D")
	f.SetLineWidth(1.8)
	f.Line(x+0.9, y, x+0.9, y+h)
	f.SetLineWidth(0.2)
	f.SetXY(x+3, y+1.5)
	if title != "" {
		d.font("B", size)
		d.color(c)
		f.CellFormat(d.w-6, size*0.5, pdfText(title), "", 2, "L", false, 0, "")
	}
	d.font("", size)
	d.color(c)
	for _, l := range lines {
		f.SetX(x + 3)
		f.CellFormat(d.w-6, size*0.45, l, "", 2, "L", false, 0, "")
	}
	f.SetXY(x, y+h+2)
	d.color(pdfInk)
}
