package report

import (
	"crypto/sha256"
	"encoding/base64"
	"fmt"
	"html/template"
	"io"

	"voxgamma/internal/atomicfile"
	"voxgamma/internal/safetext"
)

// pageScript switches which ROI's histogram and DVH are shown. It only
// hides and shows panels that are all in the page: with scripts disabled
// every panel shows. (It avoids the characters < and &, so that the page
// stays parseable by simple XML-based readers.)
const pageScript = `
(function () {
  var picker = document.getElementById("roi-picker");
  var select = document.getElementById("roi-select");
  if (!picker || !select) { return; }
  var panels = document.querySelectorAll("[data-roi-panel]");
  function show() {
    var want = select.value;
    Array.prototype.forEach.call(panels, function (p) {
      p.hidden = !(want === "all" || p.getAttribute("data-roi-panel") === want);
    });
  }
  select.addEventListener("change", show);
  picker.hidden = false;
  show();
})();
`

// contentSecurityPolicy forbids the page any source but itself: no
// request can leave it. Images are data: URLs, styles inline, and the one
// script is allowed by its hash.
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

const pageHTML = `<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{{.CSP}}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{.Title}}</title>
<style>
:root { --ink: #1c1e21; --muted: #555c63; --rule: #c4cad0; --met: #17663a; --notmet: #a3161b; --warn: #7a4e00; }
body { font-family: "Liberation Sans", Arial, Helvetica, sans-serif; color: var(--ink); background: #fff;
  margin: 0 auto; max-width: 1240px; padding: 14px 22px 40px; font-size: 14px; line-height: 1.4; }
h1 { font-size: 22px; margin: 0; }
h2 { font-size: 17px; margin: 26px 0 8px; padding-bottom: 2px; border-bottom: 2px solid var(--ink); }
h3 { font-size: 15px; margin: 14px 0 6px; }
.sub { color: var(--muted); margin: 2px 0 10px; }
table { border-collapse: collapse; margin: 6px 0; }
th, td { border: 1px solid var(--rule); padding: 3px 7px; text-align: left; vertical-align: top; }
thead th { background: #eceff2; }
th[scope=row] { background: #f5f6f8; font-weight: normal; color: var(--muted); white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.overall-row td { font-weight: bold; border-bottom: 2px solid var(--ink); }
tr.not-evaluated td { background: #f3f3f3; color: var(--muted); }
.verdict-line { margin: 8px 0; }
.verdict { display: inline-block; font-size: 20px; font-weight: bold; padding: 3px 14px; border: 3px solid var(--ink); margin-right: 10px; }
.verdict.pass { color: var(--met); border-color: var(--met); }
.verdict.fail { color: var(--notmet); border-color: var(--notmet); }
.met { color: var(--met); font-weight: bold; white-space: nowrap; }
.notmet { color: var(--notmet); font-weight: bold; white-space: nowrap; }
.na { color: #555; font-style: italic; white-space: nowrap; }
.cond { color: #6a4a00; font-size: 0.9em; }
.caution { border: 2px solid var(--warn); border-left-width: 8px; background: #fff7e3; padding: 8px 12px; margin: 10px 0; }
.warnings li { color: var(--warn); font-weight: bold; }
.mono { font-family: "Liberation Mono", "DejaVu Sans Mono", Consolas, monospace; font-size: 12px; word-break: break-all; }
ul.rules { list-style: none; margin: 0; padding: 0; }
ul.rules li { white-space: normal; }
.figs { display: flex; flex-wrap: wrap; gap: 14px 22px; align-items: flex-start; }
figure { margin: 0; max-width: 640px; }
figcaption { font-size: 12px; color: var(--muted); max-width: 480px; }
.missing { color: var(--muted); font-style: italic; max-width: 400px; }
svg.fig { max-width: 100%; height: auto; display: block; }
svg.fig text { font-family: "Liberation Sans", Arial, Helvetica, sans-serif !important; }
svg.fig image { image-rendering: pixelated; }
.swatch { display: inline-block; width: 12px; height: 12px; border: 1px solid #444; vertical-align: -1px; margin-right: 5px; }
ul.legend { list-style: none; padding: 0; margin: 6px 0; display: flex; flex-wrap: wrap; gap: 4px 18px; font-size: 12px; }
.line { display: inline-block; width: 28px; height: 0; border-top: 3px solid #000; vertical-align: middle; margin-right: 6px; }
.panel { border-top: 1px solid var(--rule); padding-top: 4px; }
#roi-picker { margin: 12px 0 4px; }
pre { background: #f5f6f8; border: 1px solid var(--rule); padding: 8px; overflow-x: auto; font-size: 12px; }
footer { margin-top: 30px; color: var(--muted); font-size: 12px; }
@media print {
  body { max-width: none; padding: 0; font-size: 11px; }
  #roi-picker { display: none !important; }
  [data-roi-panel][hidden] { display: block !important; }
  figure, tr, .caution { break-inside: avoid; }
  h2, h3 { break-after: avoid; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
</style>
</head>
<body>
<header>
<h1>{{.Heading}}</h1>
<p class="sub">voxgamma {{.Version}}: volumetric gamma index (Low et al., Med Phys 25 (1998) 656) per structure{{if .Generated}} · {{.Generated}}{{end}}</p>
<div class="verdict-line"><span id="verdict" class="verdict{{if .VerdictKnown}}{{if .VerdictPass}} pass{{else}} fail{{end}}{{end}}">Verdict: {{.Verdict}}</span><span>{{.VerdictOf}}</span></div>
<div class="caution" id="caution" role="note"><strong>Caution.</strong> {{.Caution}}</div>
<table class="ident" id="identification">
<tr><th scope="row">Patient ID</th><td>{{range $i, $v := .PatientIDs}}{{if $i}}; {{end}}{{$v}}{{else}}not given{{end}}</td></tr>
<tr><th scope="row">Patient name</th><td>{{range $i, $v := .PatientNames}}{{if $i}}; {{end}}{{$v}}{{else}}not given{{end}}</td></tr>
<tr><th scope="row">Frame of reference</th><td class="mono">{{range $i, $v := .Frames}}{{if $i}}; {{end}}{{$v}}{{else}}not given{{end}}</td></tr>
<tr><th scope="row">Criteria</th><td><strong>{{.CriteriaLabel}}</strong>: {{range $i, $v := .CriteriaDetails}}{{if $i}}; {{end}}{{$v}}{{end}}</td></tr>
<tr><th scope="row">Protocol</th><td>{{.ProtocolName}}</td></tr>
<tr><th scope="row">voxgamma version</th><td>{{.Version}} (result schema {{.Schema}})</td></tr>
{{- if .Generated}}
<tr><th scope="row">Date</th><td>{{.Generated}}</td></tr>
{{- end}}
</table>
<h3>Input files</h3>
<table id="inputs">
<thead><tr><th>role</th><th>file</th><th>SHA-256</th><th>modality</th><th>frame of reference</th><th>patient</th><th>dose</th><th>grid</th></tr></thead>
<tbody>
{{- range .Inputs}}
<tr><td>{{.Role}}</td><td class="mono">{{.Path}}</td><td class="mono">{{.SHA256}}</td><td>{{.Modality}}</td><td class="mono">{{.FrameOfReference}}</td><td>{{.Patient}}</td><td>{{.Dose}}</td><td>{{.Grid}}{{if .Description}}{{if .Grid}}. {{end}}{{.Description}}{{end}}</td></tr>
{{- end}}
</tbody>
</table>
</header>

<section id="rules">
<h2>Protocol rules</h2>
{{- if .Rules}}
<table id="rule-table">
<thead><tr><th>outcome</th><th>rule</th><th>level</th><th>applied to</th><th>measured</th><th>limit</th><th>remark</th></tr></thead>
<tbody>
{{- range .Rules}}
<tr><td class="{{.Class}}">{{.Mark}}</td><td>{{.Rule}}</td><td>{{.Level}}</td><td>{{.Subject}}</td><td class="num">{{.Value}}</td><td class="num">{{.Limit}}</td><td>{{.Reason}}{{range .Conditions}}<br><span class="cond">under: {{.}}</span>{{end}}</td></tr>
{{- end}}
</tbody>
</table>
{{- else}}
<p>The result lists no protocol rules.</p>
{{- end}}
</section>

<section id="messages">
<h2>Warnings and notes</h2>
<h3>Warnings</h3>
{{- if .Warnings}}
<ul class="warnings">{{range .Warnings}}<li>⚠ {{.}}</li>{{end}}</ul>
{{- else}}
<p>None.</p>
{{- end}}
<h3>Not evaluated</h3>
<ul>{{range .NotEvaluated}}<li>{{.}}</li>{{end}}</ul>
<h3>Notes</h3>
{{- if .Notes}}
<ul class="notes">{{range .Notes}}<li>{{.}}</li>{{end}}</ul>
{{- else}}
<p>None.</p>
{{- end}}
</section>

<section id="roi-results">
<h2>Results per ROI</h2>
<table id="roi-table">
<thead><tr><th>ROI</th><th>kind</th><th>volume (cc)</th><th>evaluated points</th><th>pass rate (%)</th><th>mean Γ</th><th>P95 Γ</th><th>max Γ</th><th>ΔDmean (%)</th><th>ΔD95 (%)</th><th>ΔD2 (%)</th><th>status</th><th>rules</th></tr></thead>
<tbody>
{{- with .Overall}}
<tr class="overall-row" data-roi="overall">{{template "cells" .}}</tr>
{{- end}}
{{- range .ROIRows}}
<tr class="roi-row{{if .NotEvaluated}} not-evaluated{{end}}" data-roi="{{.ID}}">{{template "cells" .}}</tr>
{{- end}}
</tbody>
</table>
<p class="sub">Pass rate: points with Γ ≤ 1 over evaluated points, rounded down to one decimal (never shown as 100.0 unless every point passed). ΔD: evaluated minus reference in % of the reference value of the metric (D95: minimum dose to the hottest 95 % of the ROI; D2: to the hottest 2 %).</p>
</section>

<section id="figures">
<h2>Γ distribution and dose-volume histograms</h2>
<div class="figs">
{{template "figure" .OverallHistogram}}
{{template "figure" .DVHAll}}
</div>
<div id="roi-picker" hidden><label for="roi-select">ROI shown below: </label><select id="roi-select">
{{- range $i, $p := .Panels}}<option value="{{$p.ID}}"{{if not $i}} selected{{end}}>{{$p.Name}}</option>{{end}}<option value="all">every ROI</option></select></div>
{{- range .Panels}}
<section class="panel" data-roi-panel="{{.ID}}" id="panel-{{.ID}}">
<h3>{{.Name}}</h3>
<div class="figs">
{{template "figure" .Histogram}}
{{template "figure" .DVH}}
</div>
</section>
{{- end}}
</section>

<section id="slices">
<h2>Slices</h2>
<p>{{.SliceCaption}}</p>
<div class="figs">
{{- range .Slices}}
{{template "figure" .}}
{{- end}}
</div>
<ul class="legend">{{range .SliceLegend}}<li><span class="line" style="{{.Style}}"></span>{{.Label}}</li>{{end}}</ul>
</section>

<section id="clusters">
<h2>Failing regions</h2>
{{- if .Clusters}}
<table id="cluster-table">
<thead><tr><th>#</th><th>volume (cc)</th><th>voxels</th><th>centroid x, y, z (mm)</th><th>max Γ</th><th>ROIs touched</th></tr></thead>
<tbody>
{{- range .Clusters}}
<tr><td class="num">{{.Number}}</td><td class="num">{{.VolumeCC}}</td><td class="num">{{.Voxels}}</td><td class="num">{{.Centroid}}</td><td class="num">{{.GammaMax}}</td><td>{{.ROIs}}</td></tr>
{{- end}}
</tbody>
</table>
{{- if .ClustersMore}}
<p>{{.ClustersMore}} smaller regions are not listed here; the JSON result lists them all.</p>
{{- end}}
{{- else}}
<p>No connected region of failing points (Γ &gt; 1).</p>
{{- end}}
</section>

{{- if .ProtocolJSON}}
<section id="protocol">
<h2>Protocol in full</h2>
<pre>{{.ProtocolJSON}}</pre>
</section>
{{- end}}

<footer>
<p>{{.Run}} Written by voxgamma {{.Version}}.</p>
<p>{{.Caution}}</p>
</footer>
<script>{{.Script}}</script>
</body>
</html>
{{define "cells" -}}
<td>{{if .SwatchStyle}}<span class="swatch" style="{{.SwatchStyle}}"></span>{{end}}{{.Name}}</td><td>{{.Kind}}</td><td class="num" data-col="volume_cc">{{.VolumeCC}}</td><td class="num" data-col="evaluated">{{.Evaluated}}</td><td class="num" data-col="pass_rate">{{.PassRate}}</td><td class="num" data-col="gamma_mean">{{.GammaMean}}</td><td class="num" data-col="gamma_p95">{{.GammaP95}}</td><td class="num" data-col="gamma_max">{{.GammaMax}}</td><td class="num" data-col="d_mean">{{.DMean}}</td><td class="num" data-col="d95">{{.D95}}</td><td class="num" data-col="d2">{{.D2}}</td><td data-col="status">{{.Status}}</td><td data-col="rules"><ul class="rules">{{range .Rules}}<li class="{{.Class}}">{{.Mark}}: <span>{{.Text}}</span></li>{{end}}</ul></td>
{{- end}}
{{define "figure" -}}
<figure>{{if .SVG}}{{.SVG}}{{if .Legend}}
<ul class="legend">{{range .Legend}}<li><span class="line" style="{{.Style}}"></span>{{.Label}}</li>{{end}}</ul>{{end}}{{if .Caption}}
<figcaption>{{.Caption}}</figcaption>{{end}}{{else}}<p class="missing">{{.Missing}}</p>{{end}}</figure>
{{- end}}
`
