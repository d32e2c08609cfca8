package report

import (
	"bytes"
	"fmt"
	"image"
	"image/color"
	"math"
	"strconv"
	"strings"

	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/recorder"
	"gonum.org/v1/plot/vg/vgsvg"

	"voxgamma/result"
)

// Fonts: Liberation Sans is metric-compatible with Arial and Helvetica, so
// the page's font fallback (set in its style sheet) keeps the plot text
// where gonum measured it even where Liberation is not installed.
var (
	sansFont = font.Font{Typeface: "Liberation", Variant: "Sans"}
	boldFont = font.Font{Typeface: "Liberation", Variant: "Sans", Weight: xfont.WeightBold}
)

// Colours of the figures.
var (
	passBinColor = color.RGBA{R: 96, G: 125, B: 139, A: 255} // bins with Γ ≤ 1
	failBinColor = color.RGBA{R: 196, G: 78, B: 36, A: 255}  // bins with Γ > 1
)

// isodose is one isodose level drawn on the slices.
type isodose struct {
	Percent float64
	Color   color.RGBA
}

// isodoseLevels are the isodose lines drawn on the slices, in percent of
// the normalisation dose.
var isodoseLevels = []isodose{
	{20, color.RGBA{R: 70, G: 120, B: 255, A: 255}},
	{50, color.RGBA{R: 0, G: 200, B: 210, A: 255}},
	{80, color.RGBA{R: 60, G: 205, B: 60, A: 255}},
	{95, color.RGBA{R: 250, G: 225, B: 0, A: 255}},
}

// hexColor formats c as #rrggbb.
func hexColor(c color.RGBA) string { return fmt.Sprintf("#%02x%02x%02x", c.R, c.G, c.B) }

// newPlot returns a plot with the page's fonts and sizes.
func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = font.From(boldFont, 10)
	p.X.Label.Text = xLabel
	p.Y.Label.Text = yLabel
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = font.From(sansFont, 9)
		a.Tick.Label.Font = font.From(sansFont, 8)
	}
	p.Legend.TextStyle.Font = font.From(sansFont, 8)
	p.X.Tick.Marker = plainTicks{}
	p.Y.Tick.Marker = plainTicks{}
	return p
}

// plainTicks are gonum's default ticks labelled without trailing zeros
// ("25", not "25.00").
type plainTicks struct{}

// Ticks implements plot.Ticker.
func (plainTicks) Ticks(lo, hi float64) []plot.Tick {
	ticks := plot.DefaultTicks{}.Ticks(lo, hi)
	for i, t := range ticks {
		if t.Label == "" {
			continue
		}
		v := t.Value
		if math.Abs(v) < 1e-9*math.Max(math.Abs(hi-lo), 1e-300) {
			v = 0
		}
		ticks[i].Label = strconv.FormatFloat(v, 'g', 6, 64)
	}
	return ticks
}

// svgOf draws p on a w×h canvas and returns the SVG element, ready to be
// placed inline in HTML: without the XML prolog, with raster images told
// to fill their rectangle (the slice rasters have the slice's mm aspect;
// the plot keeps it too, this only guards against rounding), and labelled
// for assistive technology.
func svgOf(p *plot.Plot, w, h vg.Length, label string) (svg string, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("drawing %q: %v", label, r)
		}
	}()
	c := vgsvg.NewWith(vgsvg.UseWH(w, h))
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return "", fmt.Errorf("drawing %q: %w", label, err)
	}
	s := buf.String()
	i := strings.Index(s, "<svg")
	if i < 0 {
		return "", fmt.Errorf("drawing %q: no <svg> element in the output", label)
	}
	s = s[i:]
	s = strings.Replace(s, "<svg ", `<svg class="fig" role="img" aria-label="`+attrEscape(label)+`" `, 1)
	s = strings.ReplaceAll(s, "<image ", `<image preserveAspectRatio="none" `)
	// vgsvg labels its PNG data as JPEG; say what it is.
	s = strings.ReplaceAll(s, `"data:image/jpg;base64,`, `"data:image/png;base64,`)
	return strings.TrimSpace(s), nil
}

// attrEscape escapes s for a double-quoted HTML attribute.
func attrEscape(s string) string {
	return strings.NewReplacer("&", "&amp;", `"`, "&quot;", "<", "&lt;", ">", "&gt;").Replace(s)
}

// histogramSVG draws a Γ histogram. The count axis is logarithmic, so
// that a few failing voxels beside thousands of passing ones still show.
func histogramSVG(h *gammaHistogram, title string) (string, error) {
	p, err := histogramPlot(h, title)
	if err != nil {
		return "", err
	}
	return svgOf(p, 300, 190, title)
}

// histogramPlot makes the plot of histogramSVG.
func histogramPlot(h *gammaHistogram, title string) (*plot.Plot, error) {
	p := newPlot(title, "Γ", "voxels (log scale)")
	var pass, fail []plotter.HistogramBin
	maxCount := 0
	for b, n := range h.Counts {
		lo, hi := binEdges(b)
		bin := plotter.HistogramBin{Min: lo, Max: hi, Weight: float64(n)}
		if hi <= 1+1e-9 {
			pass = append(pass, bin)
		} else {
			fail = append(fail, bin)
		}
		maxCount = max(maxCount, n)
	}
	edge := draw.LineStyle{Color: color.White, Width: vg.Points(0.3)}
	if len(pass) > 0 {
		p.Add(&plotter.Histogram{Bins: pass, Width: 1.0 / binsPerUnit, FillColor: passBinColor, LineStyle: edge})
	}
	if len(fail) > 0 {
		p.Add(&plotter.Histogram{Bins: fail, Width: 1.0 / binsPerUnit, FillColor: failBinColor, LineStyle: edge})
	}
	bottom, top := 0.5, math.Max(10, float64(maxCount)*1.5)
	limit, err := plotter.NewLine(plotter.XYs{{X: 1, Y: bottom}, {X: 1, Y: top}})
	if err != nil {
		return nil, fmt.Errorf("histogram %q: %w", title, err)
	}
	limit.LineStyle = draw.LineStyle{Color: color.Black, Width: vg.Points(0.8), Dashes: []vg.Length{vg.Points(3), vg.Points(2)}}
	p.Add(limit)
	p.X.Min, p.X.Max = 0, float64(len(h.Counts))/binsPerUnit
	p.Y.Min, p.Y.Max = bottom, top
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	return p, nil
}

// dvhSeries is one ROI's DVH curves with the colour they are drawn in.
type dvhSeries struct {
	Name   string
	Color  color.RGBA
	Curves *result.DVHCurves
}

// checkCurves reports whether DVH curves can be drawn.
func checkCurves(c *result.DVHCurves) error {
	if c == nil {
		return fmt.Errorf("the result holds no DVH curves")
	}
	n := len(c.DoseGy)
	if n < 2 || len(c.ReferencePercent) != n || len(c.EvaluatedPercent) != n {
		return fmt.Errorf("the result's DVH curves are malformed (%d doses, %d reference and %d evaluated values)",
			n, len(c.ReferencePercent), len(c.EvaluatedPercent))
	}
	return nil
}

// curveXYs returns the points of a cumulative DVH, without the inner points
// of flat runs (they draw nothing the end points do not).
func curveXYs(dose, vol []float64) plotter.XYs {
	xy := make(plotter.XYs, 0, len(dose))
	for i := range dose {
		if i > 0 && i < len(dose)-1 && vol[i] == vol[i-1] && vol[i] == vol[i+1] {
			continue
		}
		xy = append(xy, plotter.XY{X: dose[i], Y: vol[i]})
	}
	return xy
}

// Dash patterns: reference solid, evaluated dashed with dashes long enough
// to read in greyscale print at the page's line width.
var (
	referenceDash = []vg.Length(nil)
	evaluatedDash = []vg.Length{vg.Points(5), vg.Points(3)}
)

// dvhSVG draws cumulative DVHs: reference solid, evaluated dashed, each
// ROI in its colour. Series must have drawable curves (see checkCurves).
// The legend is the page's (HTML, below the figure), where it cannot hide
// a curve; with labels, each ROI's name is also written beside its
// reference curve where it crosses 50 % of the volume, so that an overlay
// of many ROIs reads in greyscale too.
func dvhSVG(series []dvhSeries, title string, w, h vg.Length, labels bool) (string, error) {
	p, err := dvhPlot(series, title, labels)
	if err != nil {
		return "", err
	}
	return svgOf(p, w, h, title)
}

// dvhPlot makes the plot of dvhSVG.
func dvhPlot(series []dvhSeries, title string, labels bool) (*plot.Plot, error) {
	p := newPlot(title, "dose (Gy)", "volume (%)")
	maxDose := 0.0
	var at plotter.XYs
	var names []string
	var styles []text.Style
	for _, s := range series {
		col := s.Color
		for _, c := range []struct {
			vol  []float64
			dash []vg.Length
		}{{s.Curves.ReferencePercent, referenceDash}, {s.Curves.EvaluatedPercent, evaluatedDash}} {
			l, err := plotter.NewLine(curveXYs(s.Curves.DoseGy, c.vol))
			if err != nil {
				return nil, fmt.Errorf("DVH of %q: %w", s.Name, err)
			}
			l.LineStyle = draw.LineStyle{Color: col, Width: vg.Points(1.4), Dashes: c.dash}
			p.Add(l)
		}
		maxDose = math.Max(maxDose, s.Curves.DoseGy[len(s.Curves.DoseGy)-1])
		if labels {
			if x, ok := crossing(s.Curves.DoseGy, s.Curves.ReferencePercent, 50); ok {
				at = append(at, plotter.XY{X: x, Y: 50})
				names = append(names, s.Name)
				styles = append(styles, text.Style{Color: col, Font: font.From(sansFont, 7), XAlign: draw.XLeft, YAlign: draw.YBottom, Handler: p.TextHandler})
			}
		}
	}
	if len(names) > 0 {
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: at, Labels: names})
		if err != nil {
			return nil, fmt.Errorf("DVH labels: %w", err)
		}
		lb.TextStyle = styles
		p.Add(lb)
	}
	p.X.Min = 0
	if maxDose > 0 {
		p.X.Max = maxDose
	}
	p.Y.Min, p.Y.Max = 0, 105
	return p, nil
}

// crossing returns the first dose at which a cumulative DVH falls to pct
// of the volume, interpolated linearly between bins.
func crossing(dose, vol []float64, pct float64) (float64, bool) {
	for i := 1; i < len(dose); i++ {
		if vol[i-1] >= pct && vol[i] < pct {
			t := (vol[i-1] - pct) / (vol[i-1] - vol[i])
			return dose[i-1] + t*(dose[i]-dose[i-1]), true
		}
	}
	return 0, false
}

// sliceFigure holds what one slice figure shows.
type sliceFigure struct {
	Slice *slice2D
	// Dose and Gamma are the reference dose and Γ at the slice's pixels.
	Dose, Gamma []float32
	// GreyMax is the dose shown white.
	GreyMax float64
	// GammaCap is the largest Γ (the search cap): the end of the Γ colour
	// scale.
	GammaCap float64
	// NormDose is the dose the isodose percentages refer to.
	NormDose float64
	// Outlines are the ROI outlines to draw.
	Outlines []roiOutline
	// Marker is the point the three slices go through (patient mm).
	Marker [3]float64
	Title  string
}

// roiOutline is one ROI's voxel-centre mask on the slice.
type roiOutline struct {
	Color color.RGBA
	In    []bool
}

// raster renders the slice as an image: the reference dose in grey (black
// at 0, white at GreyMax), with Γ > 1 in the Γ colour scale (gammaColor:
// pale orange just above 1 to dark red at the search cap; Γ ≤ 1 shows the
// dose). Pixels have the same size in mm along both axes.
func (f *sliceFigure) raster() *image.RGBA {
	s := f.Slice
	cols, rows := rasterAxis(s.XEdges), rasterAxis(s.YEdges)
	img := image.NewRGBA(image.Rect(0, 0, len(cols), len(rows)))
	scale := 0.0
	if f.GreyMax > 0 {
		scale = 255 / f.GreyMax
	}
	for y, r := range rows {
		line := img.Pix[y*img.Stride : y*img.Stride+4*len(cols)]
		for x, c := range cols {
			n := r*s.W + c
			g := float64(f.Dose[n]) * scale
			if !(g > 0) { // NaN too
				g = 0
			} else if g > 255 {
				g = 255
			}
			red, green, blue := g, g, g
			if gm := f.Gamma[n]; gm > 1 {
				c := gammaColor(float64(gm), f.GammaCap)
				red, green, blue = float64(c.R), float64(c.G), float64(c.B)
			}
			px := line[4*x : 4*x+4]
			px[0], px[1], px[2], px[3] = uint8(red+0.5), uint8(green+0.5), uint8(blue+0.5), 255
		}
	}
	return img
}

// interp maps a fractional index into coordinates given at integer indices.
func interp(coords []float64, f float64) float64 {
	i := int(math.Floor(f))
	if i < 0 {
		return coords[0]
	}
	if i >= len(coords)-1 {
		return coords[len(coords)-1]
	}
	return coords[i] + (f-float64(i))*(coords[i+1]-coords[i])
}

// sliceLayer draws a slice figure's image, isodose lines, ROI outlines,
// marker and orientation letters. It is a gonum plot.Plotter.
type sliceLayer struct {
	fig     *sliceFigure
	img     image.Image
	iso     [][][]point // per isodose level, polylines in mm
	outline [][][]point // per ROI, polylines in mm
}

func newSliceLayer(f *sliceFigure) *sliceLayer {
	s := f.Slice
	l := &sliceLayer{fig: f, img: f.raster()}
	toMM := func(lines [][]point, xs, ys []float64) [][]point {
		for _, line := range lines {
			for i, p := range line {
				line[i] = point{interp(xs, p.X), interp(ys, p.Y)}
			}
		}
		return lines
	}
	for _, iso := range isodoseLevels {
		lines := isolines(f.Dose, s.W, s.H, iso.Percent/100*f.NormDose)
		l.iso = append(l.iso, toMM(lines, s.X, s.Y))
	}
	for _, o := range f.Outlines {
		l.outline = append(l.outline, toMM(outline(o.In, s.W, s.H), s.XEdges, s.YEdges))
	}
	return l
}

// DataRange implements plot.DataRanger.
func (l *sliceLayer) DataRange() (xmin, xmax, ymin, ymax float64) {
	s := l.fig.Slice
	x0, x1 := s.XEdges[0], s.XEdges[s.W]
	y0, y1 := s.YEdges[0], s.YEdges[s.H]
	return math.Min(x0, x1), math.Max(x0, x1), math.Min(y0, y1), math.Max(y0, y1)
}

// Plot implements plot.Plotter.
func (l *sliceLayer) Plot(c draw.Canvas, p *plot.Plot) {
	s := l.fig.Slice
	trX, trY := p.Transforms(&c)
	x0, x1 := trX(s.XEdges[0]), trX(s.XEdges[s.W])
	yTop, yBottom := trY(s.YEdges[0]), trY(s.YEdges[s.H])
	rect := vg.Rectangle{
		Min: vg.Point{X: min(x0, x1), Y: min(yTop, yBottom)},
		Max: vg.Point{X: max(x0, x1), Y: max(yTop, yBottom)},
	}
	c.DrawImage(rect, l.img)

	toVG := func(lines [][]point) [][]vg.Point {
		out := make([][]vg.Point, len(lines))
		for i, line := range lines {
			out[i] = make([]vg.Point, len(line))
			for j, q := range line {
				out[i][j] = vg.Point{X: trX(q.X), Y: trY(q.Y)}
			}
		}
		return out
	}
	for i, lines := range l.iso {
		c.StrokeLines(draw.LineStyle{Color: isodoseLevels[i].Color, Width: vg.Points(0.8),
			Dashes: []vg.Length{vg.Points(2.5), vg.Points(1.5)}}, toVG(lines)...)
	}
	for i, lines := range l.outline {
		// A light halo under each outline keeps dark colours visible on
		// the black of low doses.
		c.StrokeLines(draw.LineStyle{Color: color.NRGBA{R: 255, G: 255, B: 255, A: 170}, Width: vg.Points(2.4)}, toVG(lines)...)
		c.StrokeLines(draw.LineStyle{Color: l.fig.Outlines[i].Color, Width: vg.Points(1.2)}, toVG(lines)...)
	}

	// The point the three slices go through.
	across, down, _ := s.View.inPlane()
	m := vg.Point{X: trX(l.fig.Marker[across]), Y: trY(l.fig.Marker[down])}
	if rect.Min.X <= m.X && m.X <= rect.Max.X && rect.Min.Y <= m.Y && m.Y <= rect.Max.Y {
		c.DrawGlyph(draw.GlyphStyle{Color: color.White, Radius: vg.Points(5), Shape: draw.RingGlyph{}}, m)
		c.DrawGlyph(draw.GlyphStyle{Color: color.Black, Radius: vg.Points(3.5), Shape: draw.RingGlyph{}}, m)
	}

	// Patient directions at the edges.
	left, right, top, bottom := s.View.edgeLetters()
	sty := text.Style{Color: color.Black, Font: font.From(boldFont, 8), XAlign: draw.XCenter, YAlign: draw.YCenter, Handler: p.TextHandler}
	pad := vg.Points(7)
	mid := vg.Point{X: (rect.Min.X + rect.Max.X) / 2, Y: (rect.Min.Y + rect.Max.Y) / 2}
	for _, t := range []struct {
		s  string
		at vg.Point
	}{
		{left, vg.Point{X: rect.Min.X + pad, Y: mid.Y}},
		{right, vg.Point{X: rect.Max.X - pad, Y: mid.Y}},
		{top, vg.Point{X: mid.X, Y: rect.Max.Y - pad}},
		{bottom, vg.Point{X: mid.X, Y: rect.Min.Y + pad}},
	} {
		r := sty.Rectangle(t.s)
		box := vg.Rectangle{Min: t.at.Add(r.Min).Sub(vg.Point{X: 1.5, Y: 1}), Max: t.at.Add(r.Max).Add(vg.Point{X: 1.5, Y: 1})}
		c.FillPolygon(color.NRGBA{R: 255, G: 255, B: 255, A: 210}, []vg.Point{box.Min, {X: box.Max.X, Y: box.Min.Y}, box.Max, {X: box.Min.X, Y: box.Max.Y}})
		c.FillText(sty, t.at, t.s)
	}
}

// patientAxisName names patient axes in labels.
var patientAxisName = [3]string{"x", "y", "z"}

// sliceSVG draws one slice figure, with the plot sized so that 1 mm is as
// long across as down.
func sliceSVG(f *sliceFigure) (string, error) {
	p, w, h := slicePlot(f, 280, 320)
	return svgOf(p, w, h, f.Title)
}

// slicePlot makes one slice figure's plot and the canvas size, at most
// maxW×maxH points, that gives 1 mm the same length across and down.
func slicePlot(f *sliceFigure, maxW, maxH vg.Length) (*plot.Plot, vg.Length, vg.Length) {
	s := f.Slice
	across, down, downInc := s.View.inPlane()
	left, right, top, bottom := s.View.edgeLetters()
	p := newPlot(f.Title,
		fmt.Sprintf("%s (mm), %s → %s", patientAxisName[across], left, right),
		fmt.Sprintf("%s (mm), %s → %s", patientAxisName[down], bottom, top))
	layer := newSliceLayer(f)
	p.Add(layer)
	xmin, xmax, ymin, ymax := layer.DataRange()
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = xmin, xmax, ymin, ymax
	if downInc {
		p.Y.Scale = plot.InvertedScale{Normalizer: plot.LinearScale{}}
	}
	w, h := fitAspect(p, xmax-xmin, ymax-ymin, maxW, maxH)
	return p, w, h
}

// fitAspect returns a canvas size, at most maxW×maxH points, whose data
// area has the aspect ratio ew:eh (mm across to mm down).
func fitAspect(p *plot.Plot, ew, eh float64, maxW, maxH vg.Length) (vg.Length, vg.Length) {
	if !(ew > 0) || !(eh > 0) {
		return maxW, maxH
	}
	probe := draw.NewCanvas(new(recorder.Canvas), maxW, maxH)
	da := p.DataCanvas(probe)
	padW := maxW - (da.Max.X - da.Min.X)
	padH := maxH - (da.Max.Y - da.Min.Y)
	dw := maxW - padW
	dh := dw * vg.Length(eh/ew)
	if dh+padH > maxH {
		dh = maxH - padH
		dw = dh * vg.Length(ew/eh)
	}
	if dw < 40 || dh < 40 { // extreme aspect: keep it legible
		return maxW, maxH
	}
	return dw + padW, dh + padH
}
