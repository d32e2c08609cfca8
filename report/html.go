package report

import (
	_ "embed"

	"crypto/sha256"
	"encoding/base64"
	"fmt"
	"html/template"
	"io"

	"voxgamma/internal/atomicfile"
	"voxgamma/internal/safetext"
)

// pageScript is the page's one script (viewer.js): the ROI picker and the
// slice browser. It only shows, hides and draws what is in the page; with
// scripts disabled every ROI panel and the fixed slices show.
//
//go:embed viewer.js
var pageScript string

// contentSecurityPolicy forbids the page any source but itself: no
// request can leave it (no fetch, no connection, no frame, no form). Images
// are data: URLs, styles inline, and the one script is allowed by its
// SHA-256 hash (CSP Level 2 hash source): no other script, inline or
// injected, runs. The slice browser's volumes are data blocks (<script
// type="application/octet-stream">), which browsers never execute.
var contentSecurityPolicy = func() string {
	sum := sha256.Sum256([]byte(pageScript))
	return "default-src 'none'; img-src data:; style-src 'unsafe-inline'; script-src 'sha256-" +
		base64.StdEncoding.EncodeToString(sum[:]) + "'; base-uri 'none'; form-action 'none'"
}()

// RenderHTML writes the review page for in to w: one self-contained HTML
// document (see the package documentation). It returns an error, and
// writes nothing, when the inputs disagree: a Γ grid whose geometry is not
// the reference's, a mask of other dimensions, or a Γ grid whose evaluated
// points do not number Result.Overall.Evaluated.
func RenderHTML(w io.Writer, in Page) error {
	m, err := buildModel(in)
	if err != nil {
		return fmt.Errorf("report: HTML page: %w", err)
	}
	if err := executePage(w, m); err != nil {
		return fmt.Errorf("report: HTML page: %w", err)
	}
	return nil
}

// executePage renders the page through a filter that writes every control
// character, bidirectional override and other non-printable character of
// the text (ROI names, descriptions and messages from the input files) as
// a visible escape such as \x1b or \u202e: the template escapes HTML
// syntax, not control characters.
func executePage(w io.Writer, m *model) error {
	sw := safetext.NewWriter(w)
	if err := pageTemplate.Execute(sw, m); err != nil {
		return err
	}
	return sw.Flush()
}

// WriteHTML writes the review page (see [RenderHTML]) to the file at path,
// atomically. The figures are computed before the file is opened.
func WriteHTML(path string, in Page) error {
	m, err := buildModel(in)
	if err != nil {
		return fmt.Errorf("report: HTML page %s: %w", path, err)
	}
	if err := atomicfile.Write(path, func(w io.Writer) error { return executePage(w, m) }); err != nil {
		return fmt.Errorf("report: HTML page: %w", err)
	}
	return nil
}

var pageTemplate = template.Must(template.New("page").Parse(pageHTML))

// pageHTML is the page's template (page.html.tmpl).
//
//go:embed page.html.tmpl
var pageHTML string
