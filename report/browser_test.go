package report

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"voxgamma/internal/browsercheck"
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
	lay := layoutROIs(r, page.Reference, page.ROIs)
	var names []string
	for _, i := range lay.order {
		names = append(names, r.ROIs[i].Name)
	}
	if !slices.Equal(rep.ROIRows, names) {
		t.Errorf("ROI rows %q, want %q", rep.ROIRows, names)
	}
	// Figures: the overall histogram, per ROI a histogram (with a mask and
	// some Γ) and a DVH (with curves), the overlay of every DVH, and the
	// three fixed slices.
	perROI := func(i int) int {
		n, roi := 0, r.ROIs[i]
		if lay.mask[i] != nil && roi.Evaluated > 0 {
			n++
		}
		if roi.DVH != nil && roi.DVH.Curves != nil {
			n++
		}
		return n
	}
	want := 1 + 1 + 3
	for _, i := range lay.order {
		want += perROI(i)
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
	// The script ran: it shows the worst ROI's panel, hides the other
	// panels and the overlay, and hides the fixed slices behind the slice
	// browser.
	hidden := 1 + 3
	for _, i := range lay.order {
		if i != lay.worst {
			hidden += perROI(i)
		}
	}
	if rep.HiddenWithJS != hidden {
		t.Errorf("with JavaScript %d figures hidden, want %d (every ROI panel but the worst's, the DVH overlay, the fixed slices)", rep.HiddenWithJS, hidden)
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

// viewerState is what the slice browser exposes of itself in the DOM.
type viewerState struct {
	Ready   string `json:"ready"`
	Point   string `json:"point"`
	PointMM string `json:"pointMm"`
	Slices  [3]string
	Zooms   [3]string
	Centres [3]string
	Panel   string
}

const viewerStateJS = `(function(){var v=document.getElementById("viewer"), s=[], z=[], c=[];
["axial","coronal","sagittal"].forEach(function(n){var e=document.getElementById("vw-"+n); s.push(e.dataset.slice||""); z.push(e.dataset.zoom||""); c.push(e.dataset.centre||"");});
var sel=document.getElementById("roi-select");
return {ready:v.dataset.ready||"", point:v.dataset.point||"", pointMm:v.dataset.pointMm||"", Slices:s, Zooms:z, Centres:c, Panel: sel?sel.value:""};})()`

// overlayPixels counts, in a view's canvas, the pixels whose colour is of
// one overlay: "gamma" (Γ > 1: red at least green, red well above blue, as
// every YlOrRd class), "diff-red" and "diff-blue" (the two halves of RdBu;
// the cyan crosshair, blue as much as green, is not "diff-blue"). It reads
// a copy, so the page's own canvas is never read back.
const overlayPixelsJS = `(function(view, kind){var src=document.getElementById("vw-"+view), c=document.createElement("canvas");
c.width=src.width; c.height=src.height; var x=c.getContext("2d",{willReadFrequently:true}); x.drawImage(src,0,0);
var d=x.getImageData(0,0,c.width,c.height).data, n=0;
for(var i=0;i<d.length;i+=4){var r=d[i],g=d[i+1],b=d[i+2];
 if(kind==="gamma"&&r>=g&&r-b>60)n++;
 if(kind==="diff-red"&&r-b>40&&r-g>20)n++;
 if(kind==="diff-blue"&&b-r>40&&b-g>20)n++;
 if(kind==="any-colour"&&(Math.abs(r-g)>8||Math.abs(g-b)>8))n++;}
return n;})`

// TestSliceBrowserDriven drives the slice browser in headless Chromium as
// a reader would: the views open on the largest failing region; the arrow
// keys and the slider step through slices; the overlays switch on and off;
// the mouse wheel zooms and a drag pans; a click on a failing region's row
// and on a failing ROI's row moves the three views there. The point is
// checked against the voxel nearest to the region's centroid, computed from
// the grid here. Screenshots of each step are kept (VOXGAMMA_ARTIFACTS).
func TestSliceBrowserDriven(t *testing.T) {
	chromium := chromiumOrSkip(t)
	page := synthCase(t, smallCase)
	r := page.Result
	path := filepath.Join(t.TempDir(), "report.html")
	if err := WriteHTML(path, page); err != nil {
		t.Fatal(err)
	}
	s, err := browsercheck.Open(path, browsercheck.Options{Chromium: chromium, Width: 1280, Height: 1400})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if err := s.WaitFor(`document.getElementById("viewer").dataset.ready === "1"`, time.Minute); err != nil {
		t.Fatalf("%v; problems: %q", err, s.Problems())
	}
	state := func() viewerState {
		t.Helper()
		var v viewerState
		if err := s.Eval(viewerStateJS, &v); err != nil {
			t.Fatal(err)
		}
		return v
	}
	shot := func(name string) {
		t.Helper()
		if err := s.Screenshot(screenshotPath(t, "slice-browser-"+name+".png"), "#viewer"); err != nil {
			t.Fatal(err)
		}
	}
	pixels := func(view, kind string) int {
		t.Helper()
		var n int
		if err := s.Eval(overlayPixelsJS+fmt.Sprintf("(%q,%q)", view, kind), &n); err != nil {
			t.Fatal(err)
		}
		return n
	}
	// The canonical voxel nearest to a patient point, from the grid's
	// axes (the same arrangement the page's data uses).
	c := newCanonical(page.Reference)
	nearestVoxel := func(p [3]float64) string {
		var idx [3]string
		for a := 0; a < 3; a++ {
			best := 0
			for i, x := range c.coords[a] {
				if math.Abs(x-p[a]) < math.Abs(c.coords[a][best]-p[a]) {
					best = i
				}
			}
			idx[a] = strconv.Itoa(best)
		}
		return strings.Join(idx[:], ",")
	}

	// Opens on the largest failing region, zoomed in on it.
	st := state()
	if want := nearestVoxel(r.Clusters[0].CentroidMM); st.Point != want {
		t.Errorf("opens at voxel %s, the largest failing region's centroid is nearest %s", st.Point, want)
	}
	if g := pixels("axial", "gamma"); g == 0 {
		t.Error("the axial view through the failing region shows no Γ > 1")
	}
	shot("1-open")

	// Keys: click the axial view (focus; the click also moves the point
	// within the slice, not the slice), then step.
	before := state().Slices[0]
	if err := s.Click("#vw-axial"); err != nil {
		t.Fatal(err)
	}
	if got := state().Slices[0]; got != before {
		t.Errorf("a click in the axial view changed its slice from %s to %s", before, got)
	}
	k0, _ := strconv.Atoi(before)
	for i := 0; i < 3; i++ {
		if err := s.Key("ArrowUp"); err != nil {
			t.Fatal(err)
		}
	}
	if got := state().Slices[0]; got != strconv.Itoa(k0+3) {
		t.Errorf("three ArrowUp from slice %d: slice %s", k0, got)
	}
	if err := s.Key("PageDown"); err != nil {
		t.Fatal(err)
	}
	if got := state().Slices[0]; got != strconv.Itoa(max(k0+3-10, 0)) {
		t.Errorf("PageDown from slice %d: slice %s", k0+3, got)
	}
	var posText string
	s.Eval(`document.getElementById("vw-pos-axial").textContent`, &posText)
	kz, _ := strconv.Atoi(state().Slices[0])
	if want := fmt.Sprintf("z = %.1f mm (slice %d of %d)", c.coords[2][kz], kz+1, len(c.coords[2])); posText != want {
		t.Errorf("axial position %q, want %q", posText, want)
	}
	if err := s.Key("Home"); err != nil {
		t.Fatal(err)
	}
	if got := state().Slices[0]; got != "0" {
		t.Errorf("Home: slice %s", got)
	}
	shot("2-keys")

	// The slider: a click three quarters along the coronal slider.
	box, err := s.Element("#vw-slider-coronal")
	if err != nil {
		t.Fatal(err)
	}
	if err := s.ClickAt(box.X+0.75*box.Width, box.Y+box.Height/2); err != nil {
		t.Fatal(err)
	}
	n := len(c.coords[1])
	if got, _ := strconv.Atoi(state().Slices[1]); math.Abs(float64(got)-0.75*float64(n-1)) > 0.05*float64(n)+1 {
		t.Errorf("coronal slider clicked at 75 %%: slice %d of %d", got, n)
	}

	// Back to the failing region through its row; then the overlays.
	if err := s.Click(`#cluster-table tr.cluster-row:nth-child(1)`); err != nil {
		t.Fatal(err)
	}
	st = state()
	if want := nearestVoxel(r.Clusters[0].CentroidMM); st.Point != want {
		t.Errorf("after a click on failing region 1: voxel %s, want %s", st.Point, want)
	}
	if err := s.Click("#vw-iso"); err != nil {
		t.Fatal(err)
	}
	if err := s.Click("#vw-roi"); err != nil {
		t.Fatal(err)
	}
	gammaOn := pixels("axial", "gamma")
	if gammaOn == 0 {
		t.Fatal("no Γ > 1 pixels in the axial view through the failing region")
	}
	if err := s.Click("#vw-gamma"); err != nil {
		t.Fatal(err)
	}
	if g := pixels("axial", "gamma"); g != 0 {
		t.Errorf("Γ overlay off: still %d Γ-coloured pixels (with it on: %d)", g, gammaOn)
	}
	shot("3-gamma-off")
	if err := s.Click("#vw-diff"); err != nil {
		t.Fatal(err)
	}
	// The synthetic evaluated dose is 1.5 % high everywhere and 8 % high
	// in the failing region: red (evaluated above reference), no blue.
	if red, blue := pixels("axial", "diff-red"), pixels("axial", "diff-blue"); red == 0 || blue != 0 {
		t.Errorf("dose difference overlay: %d red and %d blue pixels, want red only (the evaluated dose is higher everywhere)", red, blue)
	}
	shot("4-difference")
	if err := s.Click("#vw-diff"); err != nil {
		t.Fatal(err)
	}
	if err := s.Click("#vw-gamma"); err != nil {
		t.Fatal(err)
	}
	if err := s.Click("#vw-iso"); err != nil {
		t.Fatal(err)
	}
	if err := s.Click("#vw-roi"); err != nil {
		t.Fatal(err)
	}
	if g := pixels("axial", "gamma"); g != gammaOn {
		t.Logf("Γ pixels back on: %d (before %d; isodoses and outlines drawn over some)", g, gammaOn)
	}

	// Zoom with the wheel and pan with a drag on the sagittal view.
	box, err = s.Element("#vw-sagittal")
	if err != nil {
		t.Fatal(err)
	}
	z0, _ := strconv.ParseFloat(state().Zooms[2], 64)
	if err := s.Wheel(box.X+box.Width/2, box.Y+box.Height/2, -300); err != nil {
		t.Fatal(err)
	}
	// Wheel events reach the page after the compositor: wait for the zoom.
	if err := s.WaitFor(fmt.Sprintf(`parseFloat(document.getElementById("vw-sagittal").dataset.zoom) > %g`, z0*1.5), 10*time.Second); err != nil {
		t.Error(err)
	}
	st = state()
	if z1, _ := strconv.ParseFloat(st.Zooms[2], 64); !(z1 > z0*1.5) {
		t.Errorf("wheel: zoom %s from %g", st.Zooms[2], z0)
	}
	c0 := st.Centres[2]
	if err := s.Drag(box.X+box.Width/2, box.Y+box.Height/2, box.X+box.Width/2+60, box.Y+box.Height/2+40); err != nil {
		t.Fatal(err)
	}
	if st2 := state(); st2.Centres[2] == c0 || st2.Point != st.Point {
		t.Errorf("drag: centre %s from %s (must move), point %s from %s (must not)", st2.Centres[2], c0, st2.Point, st.Point)
	}
	shot("5-zoom-pan")

	// A failing ROI's row: the views move to its failing voxels and the
	// ROI's figures are shown.
	lay := layoutROIs(r, page.Reference, page.ROIs)
	worst := lay.worst
	if r.ROIs[worst].WorstCentroidMM == nil {
		t.Fatalf("the worst ROI %s has no failing centroid", r.ROIs[worst].Name)
	}
	if err := s.Click(fmt.Sprintf(`#roi-table tr[data-roi="%s"] td:nth-child(3)`, lay.id[worst])); err != nil {
		t.Fatal(err)
	}
	st = state()
	if want := nearestVoxel(*r.ROIs[worst].WorstCentroidMM); st.Point != want {
		t.Errorf("after a click on %s's row: voxel %s, want %s (its failing centroid)", r.ROIs[worst].Name, st.Point, want)
	}
	if st.Panel != lay.id[worst] {
		t.Errorf("after a click on %s's row the picker shows %q", r.ROIs[worst].Name, st.Panel)
	}
	shot("6-roi-row")

	// A click inside a view moves the other views.
	box, _ = s.Element("#vw-axial")
	before2 := state()
	if err := s.ClickAt(box.X+box.Width*0.3, box.Y+box.Height*0.4); err != nil {
		t.Fatal(err)
	}
	after := state()
	if after.Slices[0] != before2.Slices[0] || (after.Slices[1] == before2.Slices[1] && after.Slices[2] == before2.Slices[2]) {
		t.Errorf("a click in the axial view: slices %v from %v (axial kept, coronal or sagittal moved)", after.Slices, before2.Slices)
	}
	if p := s.Problems(); len(p) > 0 {
		t.Errorf("the page reported problems: %q", p)
	}
}

// gammaCentroidJS returns the centre (x, y) of a view's Γ-coloured pixels
// and the canvas size, in canvas pixels (read from a copy of the canvas).
const gammaCentroidJS = `(function(view){var src=document.getElementById("vw-"+view), c=document.createElement("canvas");
c.width=src.width; c.height=src.height; var x=c.getContext("2d",{willReadFrequently:true}); x.drawImage(src,0,0);
var d=x.getImageData(0,0,c.width,c.height).data, sx=0, sy=0, n=0;
for(var i=0;i<d.length;i+=4){var r=d[i],g=d[i+1],b=d[i+2]; if(r>=g&&r-b>60){var p=i/4; sx+=p%c.width; sy+=Math.floor(p/c.width); n++;}}
return n?[sx/n, sy/n, c.width, c.height]:[0,0,0,0];})`

// TestSliceBrowserOddGrids opens the slice browser on grids a planning
// system may send: a single frame, and axes stored flipped and transposed
// (the views must still be in patient orientation): the browser starts
// without a console message, steps and zooms.
func TestSliceBrowserOddGrids(t *testing.T) {
	chromium := chromiumOrSkip(t)
	for name, o := range map[string]synthOptions{
		"single frame":         {Dims: [3]int{40, 36, 1}, Spacing: [3]float64{3, 3, 3}, Fail: true},
		"flipped, transposed":  {Dims: [3]int{30, 26, 20}, Spacing: [3]float64{2, 2.5, 3}, Direction: [3][3]float64{{0, -1, 0}, {1, 0, 0}, {0, 0, -1}}, Fail: true},
		"feet first prone":     {Dims: [3]int{24, 22, 18}, Spacing: [3]float64{3, 3, 3}, Direction: [3][3]float64{{1, 0, 0}, {0, -1, 0}, {0, 0, -1}}, Fail: true},
		"no failure, no masks": {Dims: [3]int{24, 22, 18}, Spacing: [3]float64{3, 3, 3}},
	} {
		t.Run(name, func(t *testing.T) {
			page := synthCase(t, o)
			if name == "no failure, no masks" {
				page.ROIs, page.Difference = nil, nil
			}
			path := filepath.Join(t.TempDir(), "report.html")
			if err := WriteHTML(path, page); err != nil {
				t.Fatal(err)
			}
			s, err := browsercheck.Open(path, browsercheck.Options{Chromium: chromium, Width: 1280, Height: 1200})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			if err := s.WaitFor(`document.getElementById("viewer").dataset.ready === "1"`, time.Minute); err != nil {
				t.Fatalf("%v: %q", err, s.Problems())
			}
			if err := s.Click("#vw-coronal"); err != nil {
				t.Fatal(err)
			}
			for _, k := range []string{"ArrowUp", "ArrowDown", "End", "Home", "+", "-", "0"} {
				if err := s.Key(k); err != nil {
					t.Fatal(err)
				}
			}
			if o.Fail {
				// Orientation: with the whole grid shown (centred on the
				// patient origin) and only Γ drawn, the failing region at
				// x = +18 (patient left), y = −10 (anterior), z = +6
				// (superior) must appear right of and above the middle in
				// the axial view (R on the left, A at the top), right and
				// up in the coronal view, left (anterior) and up in the
				// sagittal view, whatever the storage order. Single-frame
				// grids have one plane: only the axial view is checked.
				for _, id := range []string{"#vw-reset", "#vw-iso", "#vw-roi"} {
					if err := s.Click(id); err != nil {
						t.Fatal(err)
					}
				}
				want := map[string][2]int{"axial": {1, -1}, "coronal": {1, -1}, "sagittal": {-1, -1}}
				for view, sign := range want {
					if o.Dims[2] == 1 && view != "axial" {
						continue
					}
					// The view through the failing region's centre.
					if err := s.Click(`#cluster-table tr.cluster-row:nth-child(1)`); err != nil {
						t.Fatal(err)
					}
					if err := s.Click("#vw-reset"); err != nil {
						t.Fatal(err)
					}
					var c [4]float64
					if err := s.Eval(gammaCentroidJS+fmt.Sprintf("(%q)", view), &c); err != nil {
						t.Fatal(err)
					}
					dx, dy := c[0]-c[2]/2, c[1]-c[3]/2
					if c[2] == 0 || dx*float64(sign[0]) <= 0 || dy*float64(sign[1]) <= 0 {
						t.Errorf("%s view: Γ > 1 centred at (%.0f, %.0f) px of %.0f×%.0f; want it %s and %s of the middle", view, c[0], c[1], c[2], c[3],
							map[int]string{1: "right", -1: "left"}[sign[0]], map[int]string{1: "below", -1: "above"}[sign[1]])
					}
				}
			}
			var pos string
			s.Eval(`document.getElementById("vw-pos-axial").textContent`, &pos)
			if !strings.HasPrefix(pos, "z = ") {
				t.Errorf("axial position %q", pos)
			}
			if p := s.Problems(); len(p) > 0 {
				t.Errorf("problems: %q", p)
			}
		})
	}
}
