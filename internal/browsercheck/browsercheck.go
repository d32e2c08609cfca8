// Package browsercheck opens an HTML report in a headless Chromium and
// checks what a reviewer's browser would show: the page loads, every figure
// is present with a size and content (also with JavaScript disabled), the
// console stays silent, no request leaves the page, and a screenshot shows
// something. It is used by the report package's tests on a synthetic page
// and can be used by any test on a real report (the CLI's demo).
//
// [Open] starts a [Session] instead: a headless Chromium driven over the
// DevTools protocol, in which a test presses keys, clicks, turns the mouse
// wheel, drags, reads what the page's scripts did and takes screenshots,
// as a reader of the page would.
//
// Chromium is Debian's /usr/bin/chromium (apt-get install chromium) or the
// first of chromium, chromium-browser, google-chrome on PATH; the
// VOXGAMMA_CHROMIUM environment variable names another binary.
package browsercheck

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"image/png"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"time"
)

// ErrNoChromium is returned when no Chromium binary is found.
var ErrNoChromium = errors.New("browsercheck: chromium not found (Debian: apt-get install chromium)")

// Options tune a check.
type Options struct {
	// Chromium is the browser binary; empty means [FindChromium].
	Chromium string
	// Width and Height are the window (and screenshot) size in CSS pixels;
	// zero means 1280×2000.
	Width, Height int
	// Timeout bounds each browser run; zero means 2 minutes.
	Timeout time.Duration
}

// Figure is one <svg> (outermost) or <img> element of the page.
type Figure struct {
	// Tag is "svg" or "img".
	Tag string
	// Label is the element's aria-label, alt or id, whichever is set first.
	Label string
	// Width and Height are the element's width and height attributes as
	// numbers (units dropped), or the viewBox size when they are missing.
	Width, Height float64
	// Content counts the drawing elements inside an svg, or the bytes of an
	// img's src.
	Content int
	// RenderedWidth and RenderedHeight are the figure's laid-out size in
	// CSS pixels in the window, with the page's scripts not run.
	RenderedWidth, RenderedHeight float64
}

// Report is what the browser showed.
type Report struct {
	// Title is the document's title.
	Title string
	// ROIRows holds the first cell's text of each row of class "roi-row"
	// in the table with id "roi-table", in order (a voxgamma report's
	// per-ROI table).
	ROIRows []string
	// Figures lists every figure of the page as loaded with JavaScript.
	Figures []Figure
	// HiddenWithJS counts the figures hidden (hidden attribute or inline
	// display: none on them or an ancestor) once the page's scripts ran:
	// a page may show some figures at a time, as long as all are in it.
	HiddenWithJS int
	// VisibleWithoutJS counts the figures laid out with a size and visible
	// when the page's scripts do not run.
	VisibleWithoutJS int
	// Console holds the browser's console lines (any is a problem).
	Console []string
	// Requests lists URLs the page asked for (any is a problem).
	Requests []string
	// Screenshot is the path of the screenshot; ScreenshotWidth and
	// ScreenshotHeight its size in pixels.
	Screenshot                        string
	ScreenshotWidth, ScreenshotHeight int
}

// Error is returned when the page has problems; it lists all of them.
type Error struct {
	// Path is the HTML file checked.
	Path string
	// Problems describes each problem found.
	Problems []string
}

// Error lists the problems, one a line.
func (e *Error) Error() string {
	return fmt.Sprintf("browsercheck: %s: %d problem(s):\n  - %s", e.Path, len(e.Problems), strings.Join(e.Problems, "\n  - "))
}

// FindChromium returns the path of a Chromium binary, or [ErrNoChromium].
func FindChromium() (string, error) {
	if p := os.Getenv("VOXGAMMA_CHROMIUM"); p != "" {
		if _, err := exec.LookPath(p); err != nil {
			return "", fmt.Errorf("browsercheck: VOXGAMMA_CHROMIUM=%s: %w", p, err)
		}
		return p, nil
	}
	for _, name := range []string{"/usr/bin/chromium", "chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p, nil
		}
	}
	return "", ErrNoChromium
}

// Check opens the HTML file at htmlPath in a headless Chromium with the
// default [Options], saves a screenshot at screenshotPath, and checks the
// page. It returns the report and an [*Error] listing every problem, or
// another error when the browser cannot be run.
func Check(htmlPath, screenshotPath string) (*Report, error) {
	return CheckWith(htmlPath, screenshotPath, Options{})
}

// fillDefaults gives opt its defaults: a 1280 × 2000 window, a two-minute
// timeout and the Chromium FindChromium finds.
func (opt *Options) fillDefaults() error {
	if opt.Width <= 0 || opt.Height <= 0 {
		opt.Width, opt.Height = 1280, 2000
	}
	if opt.Timeout <= 0 {
		opt.Timeout = 2 * time.Minute
	}
	if opt.Chromium == "" {
		p, err := FindChromium()
		if err != nil {
			return err
		}
		opt.Chromium = p
	}
	return nil
}

// CheckWith is [Check] with options. The checks:
//   - the page has a title, and at least one figure;
//   - every figure (outermost <svg>, <img>) has a positive width and height
//     and content (drawing elements, or a src);
//   - without the page's scripts every figure is still in the page, laid
//     out with a positive size and visible (not hidden by an attribute or
//     by CSS);
//   - every src and href (in the file and in the loaded DOM) is a data:
//     URL or a fragment, style sheets import nothing and use only data:
//     URLs;
//   - the browser's network log holds no request made by the page;
//   - the console shows no message (errors, uncaught exceptions, content
//     security policy violations);
//   - the screenshot has the window's size and is not blank.
func CheckWith(htmlPath, screenshotPath string, opt Options) (*Report, error) {
	if err := opt.fillDefaults(); err != nil {
		return nil, err
	}
	abs, err := filepath.Abs(htmlPath)
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %s: %w", htmlPath, err)
	}
	pageURL := (&url.URL{Scheme: "file", Path: abs}).String()
	shot, err := filepath.Abs(screenshotPath)
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %s: %w", screenshotPath, err)
	}
	var problems []string
	problem := func(format string, a ...any) { problems = append(problems, fmt.Sprintf(format, a...)) }

	// The file itself.
	raw, err := os.ReadFile(abs)
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %w", err)
	}
	fileDoc, err := Parse(bytes.NewReader(raw))
	if err != nil {
		problem("the file cannot be parsed: %v", err)
	} else {
		for _, p := range externalReferences(fileDoc) {
			problem("file: %s", p)
		}
	}

	tmp, err := os.MkdirTemp("", "browsercheck-")
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %w", err)
	}
	defer os.RemoveAll(tmp)
	netLog := filepath.Join(tmp, "netlog.json")

	// 1. Loaded with JavaScript: the DOM, the console, the network log.
	dom, stderr, err := runChromium(opt, filepath.Join(tmp, "profile-js"),
		[]string{"--log-net-log=" + netLog, "--dump-dom"}, pageURL)
	if err != nil {
		return nil, err
	}
	rep := &Report{Screenshot: shot}
	rep.Console = append(rep.Console, consoleLines(stderr)...)
	requests, err := pageRequests(netLog, pageURL)
	if err != nil {
		problem("%v", err)
	}
	rep.Requests = requests
	for _, u := range requests {
		problem("the page requested %s", u)
	}
	doc, err := Parse(bytes.NewReader(dom))
	if err != nil {
		return nil, fmt.Errorf("browsercheck: parsing the DOM Chromium dumped: %w", err)
	}
	if t := doc.Elements("title"); len(t) > 0 {
		rep.Title = strings.TrimSpace(t[0].TextContent())
	}
	if rep.Title == "" {
		problem("the page has no title")
	}
	if table := doc.ByID("roi-table"); table != nil {
		for _, tr := range table.Elements("tr") {
			if tr.HasClass("roi-row") {
				cells := tr.Elements("td")
				name := ""
				if len(cells) > 0 {
					name = strings.TrimSpace(cells[0].TextContent())
				}
				rep.ROIRows = append(rep.ROIRows, name)
			}
		}
	}
	rep.Figures = figures(doc)
	if len(rep.Figures) == 0 {
		problem("the page has no figure (svg or img)")
	}
	for _, n := range figureNodes(doc) {
		if n.Hidden() {
			rep.HiddenWithJS++
		}
	}
	for _, f := range rep.Figures {
		if !(f.Width > 0) || !(f.Height > 0) {
			problem("figure <%s> %q has size %g×%g", f.Tag, f.Label, f.Width, f.Height)
		}
		if f.Content == 0 {
			problem("figure <%s> %q is empty", f.Tag, f.Label)
		}
	}
	for _, p := range externalReferences(doc) {
		problem("DOM: %s", p)
	}

	// 2. Without the page's JavaScript: every figure must be there, laid
	// out with a size, and visible. Chromium's --dump-dom needs scripts,
	// so this loads a copy of the page with its scripts removed (and
	// <noscript> content unwrapped, as a browser without scripts shows
	// it), plus a measuring script that writes each figure's laid-out
	// size and visibility into the DOM.
	static := filepath.Join(tmp, "static.html")
	if err := os.WriteFile(static, withoutScripts(raw), 0o600); err != nil {
		return nil, fmt.Errorf("browsercheck: %w", err)
	}
	domNoJS, _, err := runChromium(opt, filepath.Join(tmp, "profile-nojs"),
		[]string{"--dump-dom"}, (&url.URL{Scheme: "file", Path: static}).String())
	if err != nil {
		return nil, err
	}
	docNoJS, err := Parse(bytes.NewReader(domNoJS))
	if err != nil {
		return nil, fmt.Errorf("browsercheck: parsing the DOM of the page without scripts: %w", err)
	}
	if html := docNoJS.Elements("html"); len(html) == 0 || html[0].Attr["data-bc-done"] != "1" {
		problem("the figures could not be measured without JavaScript (the measuring script did not run)")
	}
	noJS := figureNodes(docNoJS)
	for i, n := range noJS {
		w, _ := strconv.ParseFloat(n.Attr["data-bc-w"], 64)
		h, _ := strconv.ParseFloat(n.Attr["data-bc-h"], 64)
		visible := n.Attr["data-bc-visible"] == "true" && !n.Hidden()
		if i < len(rep.Figures) {
			rep.Figures[i].RenderedWidth, rep.Figures[i].RenderedHeight = w, h
		}
		if visible && w > 0 && h > 0 {
			rep.VisibleWithoutJS++
		} else {
			label := n.Attr["aria-label"]
			if label == "" {
				label = n.Attr["alt"]
			}
			problem("without JavaScript figure <%s> %q is not shown (laid out %g×%g px, visible %s)", n.Tag, label, w, h, n.Attr["data-bc-visible"])
		}
	}
	if len(noJS) != len(rep.Figures) {
		problem("without JavaScript the page has %d figures, with it %d", len(noJS), len(rep.Figures))
	}

	// 3. The screenshot.
	os.Remove(shot)
	_, stderr, err = runChromium(opt, filepath.Join(tmp, "profile-shot"),
		[]string{"--hide-scrollbars", "--screenshot=" + shot}, pageURL)
	if err != nil {
		return nil, err
	}
	rep.Console = append(rep.Console, consoleLines(stderr)...)
	if w, h, colours, err := screenshotStats(shot); err != nil {
		problem("screenshot: %v", err)
	} else {
		rep.ScreenshotWidth, rep.ScreenshotHeight = w, h
		if w != opt.Width || h != opt.Height {
			problem("screenshot is %d×%d pixels, the window %d×%d", w, h, opt.Width, opt.Height)
		}
		if colours < 8 {
			problem("screenshot looks blank (%d distinct colours)", colours)
		}
	}

	for _, l := range rep.Console {
		problem("console: %s", l)
	}
	if len(problems) > 0 {
		return rep, &Error{Path: htmlPath, Problems: problems}
	}
	return rep, nil
}

// runChromium runs one headless browser on the page with its own profile
// directory and returns its standard output and error.
func runChromium(opt Options, profile string, extra []string, pageURL string) (stdout, stderr []byte, err error) {
	args := []string{
		"--headless", "--no-sandbox", "--disable-gpu",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--disable-extensions", "--no-first-run", "--no-default-browser-check",
		// Nothing should resolve: the page must not need the network.
		"--host-resolver-rules=MAP * ~NOTFOUND",
		"--user-data-dir=" + profile,
		"--window-size=" + strconv.Itoa(opt.Width) + "," + strconv.Itoa(opt.Height),
		"--enable-logging=stderr", "--v=0",
	}
	args = append(append(args, extra...), pageURL)
	ctx, cancel := context.WithTimeout(context.Background(), opt.Timeout)
	defer cancel()
	cmd := exec.CommandContext(ctx, opt.Chromium, args...)
	ownGroup(cmd)
	cmd.WaitDelay = 10 * time.Second
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		tail := errb.String()
		if len(tail) > 2000 {
			tail = tail[len(tail)-2000:]
		}
		return nil, nil, fmt.Errorf("browsercheck: running %s %s: %w\n%s", opt.Chromium, strings.Join(extra, " "), err, tail)
	}
	return out.Bytes(), errb.Bytes(), nil
}

// consoleLine matches Chromium's log lines for console messages, e.g.
// [..:INFO:CONSOLE:3] "Uncaught ReferenceError: ...", source: file:///... (3)
var consoleLine = regexp.MustCompile(`:CONSOLE[:(\]]|Uncaught `)

func consoleLines(stderr []byte) []string {
	var out []string
	sc := bufio.NewScanner(bytes.NewReader(stderr))
	sc.Buffer(make([]byte, 0, 64*1024), 4<<20)
	for sc.Scan() {
		if l := sc.Text(); consoleLine.MatchString(l) {
			out = append(out, strings.TrimSpace(l))
		}
	}
	return out
}

// pageRequests returns the URLs the page requested, from Chromium's network
// log. Requests the browser makes for itself (update checks and the like)
// carry no page initiator and are left out; file:// pages load through no
// network request, so any request started for the page is one too many.
func pageRequests(path, pageURL string) ([]string, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("network log: %w", err)
	}
	var log struct {
		Constants struct {
			LogEventTypes map[string]int `json:"logEventTypes"`
		} `json:"constants"`
		Events []struct {
			Type   int            `json:"type"`
			Params map[string]any `json:"params"`
		} `json:"events"`
	}
	if err := json.Unmarshal(b, &log); err != nil {
		// A log cut short by the browser's exit lacks its closing brackets.
		trimmed := strings.TrimRight(strings.TrimSpace(string(b)), ",")
		if err2 := json.Unmarshal([]byte(trimmed+"]}"), &log); err2 != nil {
			return nil, fmt.Errorf("network log %s unreadable: %v", path, err)
		}
	}
	start, ok := log.Constants.LogEventTypes["URL_REQUEST_START_JOB"]
	if !ok {
		return nil, fmt.Errorf("network log %s names no URL_REQUEST_START_JOB event", path)
	}
	var out []string
	seen := map[string]bool{}
	for _, e := range log.Events {
		if e.Type != start {
			continue
		}
		u, _ := e.Params["url"].(string)
		initiator, _ := e.Params["initiator"].(string)
		nik, _ := e.Params["network_isolation_key"].(string)
		fromPage := initiator == "null" || strings.HasPrefix(initiator, "file://") || strings.Contains(nik, "file://")
		if !fromPage || u == "" || u == pageURL || seen[u] {
			continue
		}
		seen[u] = true
		out = append(out, u)
	}
	return out, nil
}

// drawing lists SVG elements that draw something.
var drawing = map[string]bool{
	"path": true, "image": true, "text": true, "rect": true, "line": true,
	"polyline": true, "polygon": true, "circle": true, "ellipse": true, "use": true,
}

// figureNodes returns the outermost <svg> elements and the <img> elements.
func figureNodes(doc *Node) []*Node {
	return doc.All(func(n *Node) bool {
		switch n.Tag {
		case "img":
			return true
		case "svg":
			for p := n.Parent; p != nil; p = p.Parent {
				if p.Tag == "svg" {
					return false
				}
			}
			return true
		}
		return false
	})
}

func figures(doc *Node) []Figure {
	var out []Figure
	for _, n := range figureNodes(doc) {
		f := Figure{Tag: n.Tag}
		for _, k := range []string{"aria-label", "alt", "id"} {
			if v := n.Attr[k]; v != "" {
				f.Label = v
				break
			}
		}
		f.Width, f.Height = length(n.Attr["width"]), length(n.Attr["height"])
		if vb := strings.Fields(strings.ReplaceAll(n.Attr["viewBox"], ",", " ")); len(vb) == 4 && (f.Width == 0 || f.Height == 0) {
			f.Width, _ = strconv.ParseFloat(vb[2], 64)
			f.Height, _ = strconv.ParseFloat(vb[3], 64)
		}
		if n.Tag == "img" {
			f.Content = len(n.Attr["src"])
		} else {
			f.Content = len(n.All(func(m *Node) bool { return drawing[m.Tag] }))
		}
		out = append(out, f)
	}
	return out
}

// length parses an SVG/HTML length such as "300pt" or "120", dropping the
// unit; 0 when it does not parse.
func length(s string) float64 {
	s = strings.TrimSpace(s)
	end := 0
	for end < len(s) && (s[end] >= '0' && s[end] <= '9' || s[end] == '.' || s[end] == '-' || s[end] == '+' || s[end] == 'e') {
		end++
	}
	v, err := strconv.ParseFloat(s[:end], 64)
	if err != nil {
		return 0
	}
	return v
}

// linkAttrs are the attributes that make a browser fetch.
var linkAttrs = []string{"src", "href", "xlink:href", "srcset", "poster", "data", "action", "formaction", "background", "manifest", "ping"}

var cssURL = regexp.MustCompile(`(?i)url\(\s*['"]?([^'")\s]*)`)

// externalReferences lists the references of the document to anything
// other than data: URLs and fragments of itself.
func externalReferences(doc *Node) []string {
	var out []string
	local := func(v string) bool {
		v = strings.TrimSpace(v)
		return v == "" || strings.HasPrefix(v, "#") || strings.HasPrefix(strings.ToLower(v), "data:")
	}
	checkCSS := func(where, css string) {
		if strings.Contains(strings.ToLower(css), "@import") {
			out = append(out, where+" imports a style sheet")
		}
		for _, m := range cssURL.FindAllStringSubmatch(css, -1) {
			if !local(m[1]) {
				out = append(out, fmt.Sprintf("%s refers to %s", where, m[1]))
			}
		}
	}
	for _, n := range doc.All(func(n *Node) bool { return n.Tag != "" }) {
		for _, a := range linkAttrs {
			if v, ok := n.Attr[a]; ok && !local(v) {
				out = append(out, fmt.Sprintf("<%s %s=%q> points outside the page", n.Tag, a, v))
			}
		}
		if st, ok := n.Attr["style"]; ok {
			checkCSS("<"+n.Tag+"> style", st)
		}
		if n.Tag == "style" {
			checkCSS("<style>", n.TextContent())
		}
		if n.Tag == "link" || n.Tag == "iframe" || n.Tag == "object" || n.Tag == "embed" || n.Tag == "frame" {
			out = append(out, fmt.Sprintf("<%s> element (pages must not embed or link other documents)", n.Tag))
		}
	}
	return out
}

// screenshotStats decodes a PNG screenshot and counts its distinct colours
// on a sparse lattice of pixels.
func screenshotStats(path string) (w, h, colours int, err error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, 0, 0, err
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		return 0, 0, 0, fmt.Errorf("%s: %w", path, err)
	}
	b := img.Bounds()
	seen := map[[4]uint32]bool{}
	for y := b.Min.Y; y < b.Max.Y; y += 7 {
		for x := b.Min.X; x < b.Max.X; x += 7 {
			r, g, bl, a := img.At(x, y).RGBA()
			seen[[4]uint32{r, g, bl, a}] = true
		}
	}
	return b.Dx(), b.Dy(), len(seen), nil
}

var (
	scriptElement = regexp.MustCompile(`(?is)<script\b[^>]*>.*?</script\s*>`)
	noscriptTag   = regexp.MustCompile(`(?i)</?noscript\b[^>]*>`)
	cspMeta       = regexp.MustCompile(`(?is)<meta\b[^>]*http-equiv\s*=\s*["']?content-security-policy["']?[^>]*>`)
	bodyEnd       = regexp.MustCompile(`(?i)</body\s*>`)
)

// measureScript records, once the page has loaded, each outermost figure's
// laid-out size and whether it is visible (CSS included), as data-bc-*
// attributes that --dump-dom then shows.
const measureScript = `<script>
window.addEventListener("load", function () {
  document.querySelectorAll("svg, img").forEach(function (e) {
    if (e.parentElement && e.parentElement.closest("svg")) { return; }
    var r = e.getBoundingClientRect();
    e.setAttribute("data-bc-w", String(r.width));
    e.setAttribute("data-bc-h", String(r.height));
    var v = e.checkVisibility ? e.checkVisibility({checkOpacity: true, checkVisibilityCSS: true}) : (r.width > 0);
    e.setAttribute("data-bc-visible", String(v));
  });
  document.documentElement.setAttribute("data-bc-done", "1");
});
</script>`

// withoutScripts returns the page as a browser without scripts would build
// it (scripts removed, <noscript> content in place), without its content
// security policy (which would block the measuring script), with the
// measuring script added.
func withoutScripts(page []byte) []byte {
	s := scriptElement.ReplaceAll(page, nil)
	s = noscriptTag.ReplaceAll(s, nil)
	s = cspMeta.ReplaceAll(s, nil)
	if loc := bodyEnd.FindIndex(s); loc != nil {
		out := append([]byte(nil), s[:loc[0]]...)
		out = append(out, measureScript...)
		return append(out, s[loc[0]:]...)
	}
	return append(s, measureScript...)
}
