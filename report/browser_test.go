package report

import (
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"voxgamma/report/browsercheck"
)

// chromiumOrSkip returns the browser, skips the test when there is none,
// and fails it on CI, where the browser must be installed.
func chromiumOrSkip(t *testing.T) string {
	t.Helper()
	path, err := browsercheck.FindChromium()
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("CI: %v", err)
		}
		t.Skipf("%v: apt-get install chromium", err)
	}
	return path
}

// screenshotPath returns where to save a screenshot: $VOXGAMMA_ARTIFACTS
// when set (CI keeps it), else the test's temporary directory.
func screenshotPath(t *testing.T, name string) string {
	t.Helper()
	if dir := os.Getenv("VOXGAMMA_ARTIFACTS"); dir != "" {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		return filepath.Join(dir, name)
	}
	return filepath.Join(t.TempDir(), name)
}

// TestPageInBrowser opens a synthetic report in headless Chromium: the
// title, one table row per ROI, every figure present with a size and
// content (with and without JavaScript), a silent console, no request
// leaving the page, a screenshot that shows something.
func TestPageInBrowser(t *testing.T) {
	chromium := chromiumOrSkip(t)
	page := synthCase(t, smallCase)
	r := page.Result
	path := filepath.Join(t.TempDir(), "report.html")
	if err := WriteHTML(path, page); err != nil {
		t.Fatal(err)
	}
	shot := screenshotPath(t, "report-browser-test.png")
	rep, err := browsercheck.CheckWith(path, shot, browsercheck.Options{Chromium: chromium})
	if rep != nil {
		t.Logf("screenshot: %s (%d×%d)", rep.Screenshot, rep.ScreenshotWidth, rep.ScreenshotHeight)
	}
	if err != nil {
		var ce *browsercheck.Error
		if errors.As(err, &ce) {
			t.Fatalf("the page fails the browser check:\n%v", err)
		}
		t.Fatal(err)
	}

	if !strings.HasPrefix(rep.Title, "voxgamma dose comparison: PHANTOM-001") {
		t.Errorf("title %q", rep.Title)
	}
	var names []string
	for _, roi := range r.ROIs {
		names = append(names, roi.Name)
	}
	if !slices.Equal(rep.ROIRows, names) {
		t.Errorf("ROI rows %q, want %q", rep.ROIRows, names)
	}
	// Figures: the overall histogram and DVH, a histogram per ROI with a
	// mask and some Γ, a DVH per ROI with curves, three slices.
	want := 2 + 3
	for _, roi := range r.ROIs {
		for _, p := range page.ROIs {
			if p.Name == roi.Name && roi.Evaluated > 0 {
				want++
			}
		}
		if roi.DVH != nil && roi.DVH.Curves != nil {
			want++
		}
	}
	if len(rep.Figures) != want {
		t.Errorf("%d figures, want %d", len(rep.Figures), want)
	}
	slicesShown := 0
	for _, f := range rep.Figures {
		for _, v := range []string{"Axial", "Coronal", "Sagittal"} {
			if strings.HasPrefix(f.Label, v+",") {
				slicesShown++
			}
		}
	}
	if slicesShown != 3 {
		t.Errorf("%d slice figures, want 3", slicesShown)
	}
	// The script ran: it shows the first ROI's panel and hides the others.
	hidden := 0
	for i, roi := range r.ROIs {
		if i == 0 {
			continue
		}
		for _, p := range page.ROIs {
			if p.Name == roi.Name && roi.Evaluated > 0 {
				hidden++
			}
		}
		if roi.DVH != nil && roi.DVH.Curves != nil {
			hidden++
		}
	}
	if rep.HiddenWithJS != hidden {
		t.Errorf("with JavaScript %d figures hidden, want %d (every ROI panel but the first)", rep.HiddenWithJS, hidden)
	}
	for _, f := range rep.Figures {
		if f.RenderedWidth < 100 || f.RenderedHeight < 100 {
			t.Errorf("figure %q laid out at %g×%g px", f.Label, f.RenderedWidth, f.RenderedHeight)
		}
	}
	if rep.VisibleWithoutJS != len(rep.Figures) {
		t.Errorf("without JavaScript %d of %d figures visible", rep.VisibleWithoutJS, len(rep.Figures))
	}
}
