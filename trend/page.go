package trend

import (
	"bytes"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"math"
	"strconv"
	"strings"

	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"voxgamma/internal/atomicfile"
	"voxgamma/result"
	"voxgamma/spc"
)

// PageOptions configure the control-chart page.
type PageOptions struct {
	// Store names the results store (without a password); Selection says
	// which plans were selected (labels, time window).
	Store, Selection string
	// Generated is the page's date, shown when not empty.
	Generated string
	// MaxPoints is the number of most recent plans drawn per chart (the
	// limits come from all of them); 0 means DefaultMaxPoints.
	MaxPoints int
	// Version is the voxgamma version.
	Version string
}

// DefaultMaxPoints is the number of plans drawn per chart by default.
const DefaultMaxPoints = 1000

// Page colours and fonts (Liberation Sans is metric-compatible with Arial
// and Helvetica, the page's fallbacks).
var (
	sansFont     = font.Font{Typeface: "Liberation", Variant: "Sans"}
	boldFont     = font.Font{Typeface: "Liberation", Variant: "Sans", Weight: xfont.WeightBold}
	pointColor   = color.RGBA{R: 0, G: 90, B: 160, A: 255}
	flagColor    = color.RGBA{R: 200, G: 20, B: 30, A: 255}
	limitColor   = color.RGBA{R: 213, G: 94, B: 0, A: 255}
	actionColor  = color.RGBA{R: 120, G: 0, B: 60, A: 255}
	zoneColor    = color.RGBA{R: 160, G: 160, B: 160, A: 255}
	connectColor = color.RGBA{R: 150, G: 170, B: 190, A: 255}
)

// pageStyle draws the lines of a chart; the same styles make the HTML
// legend.
var (
	centreStyle = draw.LineStyle{Color: color.Black, Width: vg.Points(1)}
	limitStyle  = draw.LineStyle{Color: limitColor, Width: vg.Points(1.2), Dashes: []vg.Length{vg.Points(5), vg.Points(3)}}
	actionStyle = draw.LineStyle{Color: actionColor, Width: vg.Points(1.4), Dashes: []vg.Length{vg.Points(7), vg.Points(2), vg.Points(1.5), vg.Points(2)}}
	zoneStyle   = draw.LineStyle{Color: zoneColor, Width: vg.Points(0.6), Dashes: []vg.Length{vg.Points(1.5), vg.Points(2)}}
)

func hexColor(c color.RGBA) string { return fmt.Sprintf("#%02x%02x%02x", c.R, c.G, c.B) }

// contentSecurityPolicy forbids the page any source but itself; it has no
// script.
const contentSecurityPolicy = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"

type legendItem struct {
	Style, Label string
	Mark         bool
}

type flagRow struct {
	Index                                                 int
	Time, Case, Patient, Value, Rules, Verdict, Reference string
}

type chartView struct {
	ID, Heading string
	SVG         template.HTML
	Missing     string
	Caption     string
	Legend      []legendItem
	Flagged     []flagRow
	Warnings    []string
}

type rowView struct {
	Group, Metric                                        string
	Plans                                                int
	Centre, LCL, UCL, Tolerance, Action, SigmaMR, Period string
	OutOfControl                                         int
	Warn                                                 bool
}

type pageModel struct {
	CSP, Title, Caution, Store, Selection, Generated, Version string
	Plans                                                     int
	First, Last                                               string
	Method                                                    []string
	Rules                                                     []string
	Rows                                                      []rowView
	Charts                                                    []chartView
}

// WritePage writes the control-chart page of the analysis to path,
// atomically: one self-contained HTML file (inline SVG figures drawn with
// gonum.org/v1/plot, inline styles, no script, a Content-Security-Policy
// that forbids any other source). It holds the limits table, one chart
// per group and metric (plans in time order, centre line, control limits,
// the 1σ and 2σ zones, TG-218's action limit for pass rates, plans flagged
// by a Western Electric rule marked) and, under each chart, the table of
// the flagged plans.
func (a *Analysis) WritePage(path string, opt PageOptions) error {
	m, err := a.pageModel(opt)
	if err != nil {
		return fmt.Errorf("trend page %s: %w", path, err)
	}
	if err := atomicfile.Write(path, func(w io.Writer) error { return pageTemplate.Execute(w, m) }); err != nil {
		return fmt.Errorf("trend page: %w", err)
	}
	return nil
}

// RenderPage writes the page to w (see [Analysis.WritePage]).
func (a *Analysis) RenderPage(w io.Writer, opt PageOptions) error {
	m, err := a.pageModel(opt)
	if err != nil {
		return fmt.Errorf("trend page: %w", err)
	}
	return pageTemplate.Execute(w, m)
}

func (a *Analysis) pageModel(opt PageOptions) (*pageModel, error) {
	maxPts := opt.MaxPoints
	if maxPts <= 0 {
		maxPts = DefaultMaxPoints
	}
	m := &pageModel{CSP: contentSecurityPolicy, Title: fmt.Sprintf("voxgamma process control: %d plans", a.Plans), Caution: result.Caution,
		Store: opt.Store, Selection: opt.Selection, Generated: opt.Generated, Version: opt.Version, Plans: a.Plans,
		First: stamp(a.First), Last: stamp(a.Last), Method: Method}
	for r := 1; r <= 4; r++ {
		m.Rules = append(m.Rules, fmt.Sprintf("rule %d: %s", r, spc.RuleText[r]))
	}
	lim := a.Limits()
	for i, s := range a.Series {
		r := lim.Rows[i]
		digits := 2
		if s.Metric.HigherIsWorse {
			digits = 3
		}
		m.Rows = append(m.Rows, rowView{Group: s.Group.Name(), Metric: s.Metric.Title, Plans: r.Plans, Centre: num(r.Centre, digits),
			LCL: num(r.LCL, digits), UCL: num(r.UCL, digits), Tolerance: num(r.Tolerance, digits), Action: num(r.Action, digits),
			SigmaMR: num(r.SigmaMR, digits+1), Period: shortDate(r.First) + " – " + shortDate(r.Last), OutOfControl: r.OutOfControl,
			Warn: len(r.Warnings) > 0})
		cv := chartView{ID: "chart-" + strconv.Itoa(i+1), Heading: s.Group.Name() + ": " + s.Metric.Title, Warnings: s.Warnings}
		if s.ChartErr != nil {
			cv.Missing = "No chart: " + s.ChartErr.Error()
			m.Charts = append(m.Charts, cv)
			continue
		}
		from := max(0, len(s.Values)-maxPts)
		svg, err := chartSVG(s, from, cv.Heading)
		if err != nil {
			return nil, err
		}
		cv.SVG = template.HTML(svg)
		cv.Caption = fmt.Sprintf("Plans %d to %d of %d in the order compared (%s to %s).", from+1, len(s.Values), len(s.Values),
			shortDate(stamp(s.Points[from].ComparedAt)), shortDate(stamp(s.Points[len(s.Points)-1].ComparedAt)))
		if from > 0 {
			cv.Caption += fmt.Sprintf(" The %d earlier plans are not drawn; the limits come from all %d.", from, len(s.Values))
		}
		cv.Legend = []legendItem{{Style: lineCSS(centreStyle), Label: "centre line x̄"}, {Style: lineCSS(limitStyle), Label: "control limits x̄ ± 3σ̂"},
			{Style: lineCSS(zoneStyle), Label: "1σ̂ and 2σ̂ zones"}}
		if s.Action != nil {
			cv.Legend = append(cv.Legend, legendItem{Style: lineCSS(actionStyle), Label: "TG-218 action limit 100 − ΔA/2"})
		}
		cv.Legend = append(cv.Legend, legendItem{Style: "color: " + hexColor(flagColor), Label: "plan flagged by a Western Electric rule", Mark: true})
		idx, rules := s.Flagged()
		for _, i := range idx {
			if i < from {
				continue
			}
			p := s.Points[i]
			var rs []string
			for _, r := range rules[i] {
				rs = append(rs, strconv.Itoa(r))
			}
			side := "above"
			for _, sg := range s.Signals {
				if sg.Index == i && sg.Side < 0 {
					side = "below"
				}
			}
			unit := s.Metric.Unit
			if unit != "" {
				unit = " " + unit
			}
			ref := p.ReferenceSHA256
			if len(ref) > 12 {
				ref = ref[:12]
			}
			cv.Flagged = append(cv.Flagged, flagRow{Index: i + 1, Time: stamp(p.ComparedAt), Case: p.CaseID, Patient: p.PatientID,
				Value: strconv.FormatFloat(s.Values[i], 'f', digits, 64) + unit, Rules: strings.Join(rs, ", ") + " (" + side + " the centre)",
				Verdict: p.Verdict, Reference: ref})
		}
		m.Charts = append(m.Charts, cv)
	}
	return m, nil
}

func shortDate(s string) string {
	if len(s) >= 10 {
		return s[:10]
	}
	return s
}

// lineCSS is a legend swatch's border in the line's colour and dashes.
func lineCSS(l draw.LineStyle) string {
	c := color.RGBAModel.Convert(l.Color).(color.RGBA)
	kind := "solid"
	if len(l.Dashes) > 0 {
		kind = "dashed"
		if l.Dashes[0] < vg.Points(2) {
			kind = "dotted"
		}
	}
	return fmt.Sprintf("border-top: 3px %s %s", kind, hexColor(c))
}

// hline is a horizontal line across the chart.
func hline(y, x0, x1 float64, sty draw.LineStyle) (*plotter.Line, error) {
	l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: y}, {X: x1, Y: y}})
	if err != nil {
		return nil, err
	}
	l.LineStyle = sty
	return l, nil
}

// chartSVG draws the individuals chart of s from point index from on.
func chartSVG(s *Series, from int, title string) (svg string, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("drawing %q: %v", title, r)
		}
	}()
	c := s.Chart
	unit := ""
	if s.Metric.Unit != "" {
		unit = " (" + s.Metric.Unit + ")"
	}
	p := plot.New()
	p.Title.Text = s.Metric.Title
	p.Title.TextStyle.Font = font.From(boldFont, 10)
	p.X.Label.Text = "plan, in the order compared"
	p.Y.Label.Text = s.Metric.Title + unit
	for _, ax := range []*plot.Axis{&p.X, &p.Y} {
		ax.Label.TextStyle.Font = font.From(sansFont, 9)
		ax.Tick.Label.Font = font.From(sansFont, 8)
	}
	x0, x1 := float64(from+1)-0.5, float64(len(s.Values))+0.5
	lo, hi := math.Inf(1), math.Inf(-1)
	pts := make(plotter.XYs, 0, len(s.Values)-from)
	for i := from; i < len(s.Values); i++ {
		v := s.Values[i]
		pts = append(pts, plotter.XY{X: float64(i + 1), Y: v})
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	lo, hi = math.Min(lo, c.LCL), math.Max(hi, c.UCL)
	if s.Action != nil {
		lo = math.Min(lo, *s.Action)
	}
	if s.Metric.IsPassRate() {
		hi = math.Min(hi, math.Max(100.5, maxOf(s.Values[from:])))
		lo = math.Max(lo, -0.5)
	} else {
		lo = math.Max(lo, 0)
	}
	if hi-lo < 1e-6 {
		lo, hi = lo-0.5, hi+0.5
	}
	pad := 0.05 * (hi - lo)
	p.Y.Min, p.Y.Max = lo-pad, hi+pad
	p.X.Min, p.X.Max = x0, x1
	for _, k := range []float64{-2, -1, 1, 2} {
		l, err := hline(c.Mean+k*c.Sigma, x0, x1, zoneStyle)
		if err != nil {
			return "", err
		}
		p.Add(l)
	}
	for _, y := range []float64{c.LCL, c.UCL} {
		l, err := hline(y, x0, x1, limitStyle)
		if err != nil {
			return "", err
		}
		p.Add(l)
	}
	cl, err := hline(c.Mean, x0, x1, centreStyle)
	if err != nil {
		return "", err
	}
	p.Add(cl)
	if s.Action != nil {
		al, err := hline(*s.Action, x0, x1, actionStyle)
		if err != nil {
			return "", err
		}
		p.Add(al)
	}
	if len(pts) > 1 {
		conn, err := plotter.NewLine(pts)
		if err != nil {
			return "", err
		}
		conn.LineStyle = draw.LineStyle{Color: connectColor, Width: vg.Points(0.5)}
		p.Add(conn)
	}
	radius := vg.Points(2)
	if len(pts) > 300 {
		radius = vg.Points(1.2)
	}
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return "", err
	}
	sc.GlyphStyle = draw.GlyphStyle{Color: pointColor, Radius: radius, Shape: draw.CircleGlyph{}}
	p.Add(sc)
	idx, _ := s.Flagged()
	var flagged plotter.XYs
	for _, i := range idx {
		if i >= from {
			flagged = append(flagged, plotter.XY{X: float64(i + 1), Y: s.Values[i]})
		}
	}
	if len(flagged) > 0 {
		fs, err := plotter.NewScatter(flagged)
		if err != nil {
			return "", err
		}
		fs.GlyphStyle = draw.GlyphStyle{Color: flagColor, Radius: vg.Points(4), Shape: draw.RingGlyph{}}
		p.Add(fs)
	}
	cv := vgsvg.NewWith(vgsvg.UseWH(560, 250))
	p.Draw(draw.New(cv))
	var buf bytes.Buffer
	if _, err := cv.WriteTo(&buf); err != nil {
		return "", fmt.Errorf("drawing %q: %w", title, err)
	}
	out := buf.String()
	i := strings.Index(out, "<svg")
	if i < 0 {
		return "", fmt.Errorf("drawing %q: no <svg> element", title)
	}
	out = strings.Replace(out[i:], "<svg ", `<svg class="fig" role="img" aria-label="`+template.HTMLEscapeString(title)+`" `, 1)
	return strings.TrimSpace(out), nil
}

func maxOf(v []float64) float64 {
	m := math.Inf(-1)
	for _, x := range v {
		m = math.Max(m, x)
	}
	return m
}

var pageTemplate = template.Must(template.New("trend").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{{.CSP}}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{.Title}}</title>
<style>
:root { --ink: #1c1e21; --muted: #555c63; --rule: #c4cad0; --warn: #7a4e00; --flag: #c8141e; }
body { font-family: "Liberation Sans", Arial, Helvetica, sans-serif; color: var(--ink); background: #fff;
  margin: 0 auto; max-width: 1240px; padding: 14px 22px 40px; font-size: 14px; line-height: 1.4; }
h1 { font-size: 22px; margin: 0; }
h2 { font-size: 17px; margin: 26px 0 8px; padding-bottom: 2px; border-bottom: 2px solid var(--ink); }
h3 { font-size: 15px; margin: 18px 0 6px; }
.sub { color: var(--muted); margin: 2px 0 10px; }
table { border-collapse: collapse; margin: 6px 0; }
th, td { border: 1px solid var(--rule); padding: 3px 7px; text-align: left; vertical-align: top; }
thead th { background: #eceff2; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.flag { color: var(--flag); font-weight: bold; }
.caution { border: 2px solid var(--warn); border-left-width: 8px; background: #fff7e3; padding: 8px 12px; margin: 10px 0; }
.warnings li, .warn { color: var(--warn); font-weight: bold; }
.mono { font-family: "Liberation Mono", "DejaVu Sans Mono", Consolas, monospace; font-size: 12px; word-break: break-all; }
figure { margin: 0; max-width: 760px; }
figcaption { font-size: 12px; color: var(--muted); }
svg.fig { max-width: 100%; height: auto; display: block; }
svg.fig text { font-family: "Liberation Sans", Arial, Helvetica, sans-serif !important; }
ul.legend { list-style: none; padding: 0; margin: 6px 0; display: flex; flex-wrap: wrap; gap: 4px 18px; font-size: 12px; }
.line { display: inline-block; width: 28px; height: 0; vertical-align: middle; margin-right: 6px; }
.mark { font-weight: bold; margin-right: 6px; }
.missing { color: var(--muted); font-style: italic; }
section.chart { border-top: 1px solid var(--rule); margin-top: 14px; }
footer { margin-top: 30px; color: var(--muted); font-size: 12px; }
@media print { body { max-width: none; padding: 0; font-size: 11px; } figure, tr, .caution { break-inside: avoid; } }
</style>
</head>
<body>
<header>
<h1>{{.Title}}</h1>
<p class="sub">voxgamma {{.Version}}: process-based limits and control charts of recorded comparisons{{if .Generated}} · {{.Generated}}{{end}}</p>
<div class="caution" id="caution" role="note"><strong>Caution.</strong> {{.Caution}} Process-based limits describe this process as it was; they are not by themselves clinically acceptable limits.</div>
<table id="selection">
<tr><th scope="row">Results store</th><td class="mono">{{.Store}}</td></tr>
<tr><th scope="row">Selection</th><td>{{.Selection}}</td></tr>
<tr><th scope="row">Plans</th><td>{{.Plans}}, compared {{.First}} to {{.Last}}</td></tr>
</table>
</header>

<section id="method">
<h2>Method</h2>
<ul>{{range .Method}}<li>{{.}}</li>{{end}}</ul>
<p>Western Electric rules applied to every chart:</p>
<ul>{{range .Rules}}<li>{{.}}</li>{{end}}</ul>
</section>

<section id="limits">
<h2>Limits per group and metric</h2>
<table id="limits-table">
<thead><tr><th>group</th><th>metric</th><th>plans</th><th>period</th><th>centre x̄</th><th>σ̂ = mR̄/1.128</th><th>LCL</th><th>UCL</th><th>tolerance (worse side)</th><th>TG-218 action</th><th>out of control</th></tr></thead>
<tbody>
{{- range .Rows}}
<tr class="limit-row"><td>{{.Group}}</td><td>{{.Metric}}{{if .Warn}} <span class="warn">⚠</span>{{end}}</td><td class="num">{{.Plans}}</td><td>{{.Period}}</td><td class="num">{{.Centre}}</td><td class="num">{{.SigmaMR}}</td><td class="num">{{.LCL}}</td><td class="num">{{.UCL}}</td><td class="num">{{.Tolerance}}</td><td class="num">{{.Action}}</td><td class="num{{if .OutOfControl}} flag{{end}}">{{.OutOfControl}}</td></tr>
{{- end}}
</tbody>
</table>
<p class="sub">⚠: see the warnings under the metric's chart. Pass rates in %, Γ unitless.</p>
</section>

<section id="charts">
<h2>Control charts</h2>
{{- range .Charts}}
<section class="chart" id="{{.ID}}">
<h3>{{.Heading}}</h3>
{{- if .Warnings}}
<ul class="warnings">{{range .Warnings}}<li>⚠ {{.}}</li>{{end}}</ul>
{{- end}}
<figure>{{if .SVG}}{{.SVG}}
<ul class="legend">{{range .Legend}}<li>{{if .Mark}}<span class="mark" style="{{.Style}}">◯</span>{{else}}<span class="line" style="{{.Style}}"></span>{{end}}{{.Label}}</li>{{end}}</ul>
<figcaption>{{.Caption}}</figcaption>{{else}}<p class="missing">{{.Missing}}</p>{{end}}</figure>
{{- if .SVG}}
{{- if .Flagged}}
<table class="flagged">
<thead><tr><th>plan</th><th>compared</th><th>case</th><th>patient</th><th>value</th><th>Western Electric rules</th><th>verdict</th><th>reference SHA-256</th></tr></thead>
<tbody>
{{- range .Flagged}}
<tr class="flag-row"><td class="num">{{.Index}}</td><td>{{.Time}}</td><td>{{.Case}}</td><td>{{.Patient}}</td><td class="num">{{.Value}}</td><td>{{.Rules}}</td><td>{{.Verdict}}</td><td class="mono">{{.Reference}}</td></tr>
{{- end}}
</tbody>
</table>
{{- else}}
<p>No plan flagged by a Western Electric rule.</p>
{{- end}}
{{- end}}
</section>
{{- end}}
</section>

<footer>
<p>Written by voxgamma {{.Version}}.</p>
<p>{{.Caution}}</p>
</footer>
</body>
</html>
`))
