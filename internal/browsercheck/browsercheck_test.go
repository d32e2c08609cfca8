package browsercheck

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func chromiumOrSkip(t *testing.T) string {
	t.Helper()
	path, err := FindChromium()
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("CI: %v", err)
		}
		t.Skipf("%v: apt-get install chromium", err)
	}
	return path
}

func TestParse(t *testing.T) {
	doc, err := Parse(strings.NewReader(`<!DOCTYPE html><html><head><meta charset="utf-8"><title>A &amp; B</title>
<style>p > b { color: red }</style><script>if (1 < 2 && true) {}</script></head>
<body><p id="x" hidden class="a b">one<br>two</p><svg width="10pt" height="5"><image xlink:href="data:,"/></svg><img src="data:," alt="i"></body></html>`))
	if err != nil {
		t.Fatal(err)
	}
	if got := doc.Elements("title")[0].TextContent(); got != "A & B" {
		t.Errorf("title %q", got)
	}
	p := doc.ByID("x")
	if p == nil || !p.HasClass("b") || !p.Hidden() || p.TextContent() != "onetwo" {
		t.Errorf("paragraph parsed wrongly: %+v", p)
	}
	figs := figures(doc)
	if len(figs) != 2 || figs[0].Width != 10 || figs[0].Height != 5 || figs[0].Content != 1 || figs[1].Label != "i" {
		t.Errorf("figures %+v", figs)
	}
	if refs := externalReferences(doc); len(refs) != 0 {
		t.Errorf("data: URLs reported as external: %v", refs)
	}
}

func TestExternalReferences(t *testing.T) {
	doc, err := Parse(strings.NewReader(`<html><head><link rel="stylesheet" href="https://cdn.invalid/x.css"><style>@import "y.css"; body { background: url(http://x.invalid/b.png) }</style></head>
<body><img src="http://x.invalid/a.png"><svg><image xlink:href="pic.png"/></svg><a href="#top">ok</a><div style="background:url('data:,')"></div></body></html>`))
	if err != nil {
		t.Fatal(err)
	}
	refs := externalReferences(doc)
	joined := strings.Join(refs, "\n")
	for _, want := range []string{"cdn.invalid/x.css", "imports a style sheet", "x.invalid/b.png", "x.invalid/a.png", "pic.png", "<link>"} {
		if !strings.Contains(joined, want) {
			t.Errorf("not reported: %s\n(got %s)", want, joined)
		}
	}
	if strings.Contains(joined, "#top") || strings.Contains(joined, "data:") {
		t.Errorf("local references reported: %s", joined)
	}
}

// TestCheckFindsProblems gives the browser check a page with every kind of
// problem it looks for: it must report each.
func TestCheckFindsProblems(t *testing.T) {
	chromium := chromiumOrSkip(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "bad.html")
	bad := `<!DOCTYPE html><html><head><meta charset="utf-8"><title>bad page</title><style>.gone { display: none }</style></head><body>
<div class="gone"><svg width="30" height="20" aria-label="css-hidden"><rect width="5" height="5"></rect></svg></div>
<p>figures</p>
<svg width="0" height="20"><rect width="5" height="5"></rect></svg>
<svg width="30" height="20"></svg>
<div class="js-only"><svg width="30" height="20"><rect width="5" height="5"></rect></svg></div>
<img src="https://example.invalid/remote.png" width="10" height="10">
<script>
document.querySelector(".js-only").hidden = false;
console.error("something broke");
notDefinedAnywhere();
</script>
<noscript><div hidden><svg width="30" height="20"><rect width="5" height="5"></rect></svg></div></noscript>
</body></html>`
	if err := os.WriteFile(page, []byte(bad), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := CheckWith(page, filepath.Join(dir, "bad.png"), Options{Chromium: chromium, Width: 400, Height: 300})
	var ce *Error
	if !errors.As(err, &ce) {
		t.Fatalf("want a list of problems, got %v", err)
	}
	all := strings.Join(ce.Problems, "\n")
	t.Logf("problems found:\n%s", all)
	for _, want := range []string{
		"has size 0×20",              // zero-width figure
		"is empty",                   // figure without drawing
		"example.invalid/remote.png", // external reference and request
		"the page requested https://example.invalid/remote.png",
		"console:", // console.error and the uncaught error
		"notDefinedAnywhere",
		"without JavaScript", // a figure only JS shows (noscript one hidden)
	} {
		if !strings.Contains(all, want) {
			t.Errorf("problem not reported: %q", want)
		}
	}
	// Not shown without JavaScript: the zero-width figure, the one hidden
	// by CSS, the one in a hidden <noscript> block.
	for _, want := range []string{`"css-hidden" is not shown`, "laid out 0×20 px", "visible false"} {
		if !strings.Contains(all, want) {
			t.Errorf("problem not reported: %q", want)
		}
	}
}

func TestCheckGoodPage(t *testing.T) {
	chromium := chromiumOrSkip(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "good.html")
	good := `<!DOCTYPE html><html><head><meta charset="utf-8"><title>good page</title></head><body>
<h1>Heading</h1><p style="color:#a00">Some text in colour.</p>
<svg width="200" height="100" viewBox="0 0 200 100"><rect x="10" y="10" width="80" height="60" fill="#36c"></rect><text x="100" y="50">label</text></svg>
<table id="roi-table"><tr class="roi-row"><td>PTV</td></tr><tr class="roi-row"><td>CORD</td></tr></table>
</body></html>`
	if err := os.WriteFile(page, []byte(good), 0o644); err != nil {
		t.Fatal(err)
	}
	rep, err := CheckWith(page, filepath.Join(dir, "good.png"), Options{Chromium: chromium, Width: 640, Height: 480})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Title != "good page" || len(rep.Figures) != 1 || strings.Join(rep.ROIRows, ",") != "PTV,CORD" {
		t.Errorf("report %+v", rep)
	}
	if rep.ScreenshotWidth != 640 || rep.ScreenshotHeight != 480 {
		t.Errorf("screenshot %d×%d", rep.ScreenshotWidth, rep.ScreenshotHeight)
	}
}

// TestSession drives a small page: a click on a button and keys in a text
// box reach the page's script as a user's would; Eval reads the result; a
// console message, an uncaught exception and a blocked request are
// reported; the screenshot of an element has its size.
func TestSession(t *testing.T) {
	chromium := chromiumOrSkip(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "p.html")
	html := `<!DOCTYPE html><html><head><meta charset="utf-8"><title>t</title></head><body>
<button id="b" style="width:120px;height:40px">press</button><input id="i"><div id="out" style="width:200px;height:50px;background:#c00"></div>
<script>
var clicks = 0, keys = [];
document.getElementById("b").addEventListener("click", function () { clicks++; });
document.getElementById("i").addEventListener("keydown", function (e) { keys.push(e.key); });
window.addEventListener("wheel", function (e) { window.wheel = e.deltaY; });
</script></body></html>`
	if err := os.WriteFile(page, []byte(html), 0o644); err != nil {
		t.Fatal(err)
	}
	s, err := Open(page, Options{Chromium: chromium, Width: 800, Height: 600})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if err := s.Click("#b"); err != nil {
		t.Fatal(err)
	}
	if err := s.Click("#i"); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"ArrowUp", "PageDown", "+"} {
		if err := s.Key(k); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.Wheel(100, 100, -120); err != nil {
		t.Fatal(err)
	}
	// Wheel events reach the page after the compositor: wait for it.
	if err := s.WaitFor(`window.wheel !== undefined`, 10*time.Second); err != nil {
		t.Error(err)
	}
	var got struct {
		Clicks int
		Keys   []string
		Wheel  float64
	}
	if err := s.Eval(`({Clicks: clicks, Keys: keys, Wheel: window.wheel})`, &got); err != nil {
		t.Fatal(err)
	}
	if got.Clicks != 1 || strings.Join(got.Keys, ",") != "ArrowUp,PageDown,+" || got.Wheel != -120 {
		t.Errorf("the page saw %+v", got)
	}
	if p := s.Problems(); len(p) != 0 {
		t.Errorf("problems before any: %q", p)
	}
	shot := filepath.Join(dir, "out.png")
	if err := s.Screenshot(shot, "#out"); err != nil {
		t.Fatal(err)
	}
	if w, h, colours, err := screenshotStats(shot); err != nil || w != 200 || h != 50 || colours < 1 {
		t.Errorf("element screenshot %d×%d, %d colours, %v", w, h, colours, err)
	}
	// What must be reported.
	s.Eval(`console.error("boom"); setTimeout(function () { throw new Error("late"); }, 0); var im = new Image(); im.src = "http://example.invalid/x.png"; 1`, nil)
	deadline := 50
	var p []string
	for ; deadline > 0; deadline-- {
		p = s.Problems()
		joined := strings.Join(p, "\n")
		if strings.Contains(joined, "boom") && strings.Contains(joined, "late") && strings.Contains(joined, "example.invalid") {
			break
		}
		s.Eval(`new Promise(function (r) { setTimeout(r, 100); })`, nil)
	}
	if deadline == 0 {
		t.Errorf("problems %q: want the console error, the exception and the request", p)
	}
}
