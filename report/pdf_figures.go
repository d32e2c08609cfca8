package report

// The PDF review's figures: plots rendered to PNG and placed on the page,
// the slices through the failing regions and the Γ colour bar.

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"strconv"
	"strings"

	"codeberg.org/go-pdf/fpdf"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"voxgamma/result"
)

// image places a plot rendered to PNG, w×h mm, at the current position
// (starting a new page when it does not fit), then moves right by w+gap
// or, with newline, down below it.
func (d *pdfDoc) image(p *plot.Plot, w, h float64, x, y float64) error {
	c := vgimg.NewWith(vgimg.UseWH(vg.Length(w)*vg.Millimeter, vg.Length(h)*vg.Millimeter), vgimg.UseDPI(figureDPI), vgimg.UseBackgroundColor(color.White))
	if err := drawPlot(p, c); err != nil {
		return err
	}
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&buf); err != nil {
		return err
	}
	d.imgs++
	name := "fig" + strconv.Itoa(d.imgs)
	opt := fpdf.ImageOptions{ImageType: "PNG"}
	d.f.RegisterImageOptionsReader(name, opt, &buf)
	d.f.ImageOptions(name, x, y, w, h, false, opt, 0, "")
	return d.f.Error()
}

// drawPlot draws p, turning a panic of the plotting library into an error.
func drawPlot(p *plot.Plot, c *vgimg.Canvas) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("drawing %q: %v", p.Title.Text, r)
		}
	}()
	p.Draw(draw.New(c))
	return nil
}

// ensure starts a new page unless h mm are left.
func (d *pdfDoc) ensure(h float64) {
	_, ph := d.f.GetPageSize()
	if d.f.GetY()+h > ph-pdfMargin-6 {
		d.f.AddPage()
	}
}

// figures: the overall Γ histogram and every ROI's Γ histogram and DVH.
func (d *pdfDoc) figures(in Page, r *result.Result, lay *roiLayout, overall *gammaHistogram, gcap float64) error {
	const fw, fh = 88.0, 56.0
	d.ensure(fh + 30)
	d.heading("Γ distribution and dose-volume histograms", 0)
	if overall.Total > 0 {
		p, err := histogramPlot(overall, "Γ histogram: all evaluated points")
		if err != nil {
			return err
		}
		d.ensure(fh + 12)
		y := d.f.GetY()
		if err := d.image(p, fw, fh, pdfMargin, y); err != nil {
			return err
		}
		d.f.SetXY(pdfMargin+fw+4, y+4)
		d.font("", 7.5)
		d.color(pdfMuted)
		d.f.MultiCell(d.w-fw-4, 3.4, histogramCaption(overall, gcap, r.Overall.Capped), "", "L", false)
		d.f.SetXY(pdfMargin, y+fh+2)
	}
	d.paragraph("Per ROI, in the table's order: Γ histogram (left) and cumulative DVH (right), reference solid, evaluated dashed, in the ROI's colour.", 8, pdfMuted)
	for _, i := range lay.order {
		roi := r.ROIs[i]
		d.ensure(fh + 8)
		d.font("B", 9)
		c := pdfInk
		label := roi.Name
		if lay.failing[i] {
			c, label = pdfNotMet, "NOT MET: "+roi.Name
		}
		d.color(c)
		d.f.CellFormat(d.w, 5, pdfText(label), "", 1, "L", false, 0, "")
		y := d.f.GetY()
		drew, hist := false, false
		if pr := lay.mask[i]; pr != nil {
			h, err := histogramOf(in.Gamma, pr.Mask, gcap)
			if err != nil {
				return err
			}
			if h.Total > 0 {
				p, err := histogramPlot(h, "Γ histogram: "+roi.Name)
				if err != nil {
					return err
				}
				if err := d.image(p, fw, fh, pdfMargin, y); err != nil {
					return err
				}
				drew, hist = true, true
			}
		}
		if roi.DVH != nil && checkCurves(roi.DVH.Curves) == nil {
			p, err := dvhPlot([]dvhSeries{{Name: roi.Name, Color: lay.color[i], Curves: roi.DVH.Curves}}, "Cumulative DVH: "+roi.Name, false)
			if err != nil {
				return err
			}
			if err := d.image(p, fw, fh, pdfMargin+fw+4, y); err != nil {
				return err
			}
			drew = true
		}
		if drew && !hist {
			d.f.SetXY(pdfMargin+4, y+fh/2-4)
			d.font("", 8)
			d.color(pdfMuted)
			why := "No mask of this ROI is drawn (a derived ROI): no Γ histogram; its numbers are in the table."
			if lay.mask[i] != nil {
				why = "No voxel of this ROI has a Γ (status: " + statusText(roi) + ")."
			}
			d.f.MultiCell(fw-8, 3.6, pdfText(why), "", "L", false)
		}
		if drew {
			d.f.SetXY(pdfMargin, y+fh+2)
		} else {
			d.paragraph("No Γ and no DVH for this ROI (status: "+statusText(roi)+").", 8, pdfMuted)
		}
	}
	return nil
}

// sliceSet is one row of three slices in the PDF, cropped to a window mm
// wide around the centre (0: the whole slice).
type sliceSet struct {
	title  string
	centre [3]float64
	window float64
}

// sliceWindow is the width (mm) of the slices around a region extent mm
// across: room for the region and its surroundings, at least 60 mm.
func sliceWindow(extent float64) float64 { return math.Max(60, 2.5*extent) }

// slices: the three views through each failing region (the largest
// first) and through each target.
func (d *pdfDoc) slices(in Page, r *result.Result, lay *roiLayout) error {
	d.ensure(110)
	d.heading("Slices through the failing regions and the targets", 0)
	norm, greyMax, normNote := normOf(in, r)
	d.paragraph(fmt.Sprintf("Grey: reference dose, black 0 Gy to white %s Gy. Γ > 1 in colour from pale orange (just above 1) to dark red (the search cap, Γ = %s); Γ ≤ 1 shows the dose. Dashed lines: isodoses of 20, 50, 80 and 95 %% of %s (%s Gy). Outlines: the ROIs in their colours. The ring marks the point the three slices go through; letters name the patient directions (R/L, A/P, S/I). Axial seen from the feet, coronal from the front, sagittal from the patient's left.",
		fixed(greyMax, 2), fixed(gammaCap(r.Criteria, in.Gamma), 2), normNote, fixed(norm, 2)), 7.5, pdfMuted)
	var sets []sliceSet
	for i, c := range r.Clusters {
		if i == maxPDFClusterSlices {
			break
		}
		sets = append(sets, sliceSet{fmt.Sprintf("Failing region %d: centroid %s mm, %s cc, maximum Γ %s, touching %s", i+1, mm3(c.CentroidMM), cc(c.VolumeCC), fixed(c.GammaMax, 2), nonBlank(strings.Join(c.ROIs, ", "), "no ROI")),
			c.CentroidMM, sliceWindow(clusterExtent(c.VolumeCC))})
	}
	for _, i := range lay.order {
		roi := r.ROIs[i]
		if roi.Kind != "target" || roi.Source != "structure set" {
			continue
		}
		g, ok := lay.goTo[i]
		if !ok {
			continue
		}
		what := "its centre"
		if roi.WorstCentroidMM != nil {
			what = "the centroid of its failing voxels"
		}
		ext := g.extent
		if pr := lay.mask[i]; pr != nil {
			if _, e, ok := maskCentre(in.Reference, pr.Mask); ok {
				ext = math.Max(ext, e)
			}
		}
		sets = append(sets, sliceSet{fmt.Sprintf("Target %s: through %s, %s mm; %s mm wide", roi.Name, what, mm3(g.at), fixed(sliceWindow(ext), 0)), g.at, sliceWindow(ext)})
	}
	if len(sets) == 0 {
		c, caption := sliceCentre(in, r)
		sets = append(sets, sliceSet{caption, c, 0})
	}
	const gap = 3.0
	for _, s := range sets {
		figs := sliceFigures(in, r, lay, s.centre, s.window)
		w := (d.w - 2*gap) / 3
		h := 0.0
		type sized struct {
			p    *plot.Plot
			w, h float64
		}
		var plots []sized
		for _, f := range figs {
			p, pw, ph := slicePlot(f, vg.Length(w)*vg.Millimeter, vg.Length(w*1.15)*vg.Millimeter)
			plots = append(plots, sized{p, float64(pw / vg.Millimeter), float64(ph / vg.Millimeter)})
			h = math.Max(h, float64(ph/vg.Millimeter))
		}
		d.ensure(h + 12)
		d.font("B", 8.5)
		d.color(pdfInk)
		for _, l := range d.wrap(pdfText(s.title), d.w, false) {
			d.f.CellFormat(d.w, 4, l, "", 1, "L", false, 0, "")
		}
		y := d.f.GetY()
		for k, p := range plots {
			if err := d.image(p.p, p.w, p.h, pdfMargin+float64(k)*(w+gap), y); err != nil {
				return err
			}
		}
		d.f.SetXY(pdfMargin, y+h+3)
	}
	d.colourBar(gammaCap(r.Criteria, in.Gamma))
	return nil
}

// colourBar draws the Γ colour scale with its ends named.
func (d *pdfDoc) colourBar(gcap float64) {
	f := d.f
	d.ensure(10)
	x, y := f.GetXY()
	const bw, bh = 60.0, 3.5
	steps := 60
	for k := 0; k < steps; k++ {
		c := scale(gammaClasses, (float64(k)+0.5)/float64(steps))
		f.SetFillColor(int(c.R), int(c.G), int(c.B))
		f.Rect(x+bw*float64(k)/float64(steps), y, bw/float64(steps)+0.05, bh, "F")
	}
	f.SetDrawColor(68, 68, 68)
	f.Rect(x, y, bw, bh, "D")
	f.SetXY(x+bw+2, y-0.3)
	d.font("", 7.5)
	d.color(pdfInk)
	f.CellFormat(d.w-bw-2, 4, "Γ from 1 (left) to "+fixed(gcap, 2)+", the search cap (right); Γ ≤ 1 not coloured", "", 1, "L", false, 0, "")
	f.Ln(2)
}
