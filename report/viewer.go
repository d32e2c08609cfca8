package report

import (
	"bytes"
	"compress/zlib"
	"encoding/base64"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"html/template"
	"math"

	"voxgamma/volume"
)

// The slice browser's data: the reference dose, Γ, the dose difference and
// the ROI masks, arranged in the page's canonical order and encoded
// compactly, with what the page's script needs to place them in patient
// coordinates.
//
// Canonical order: index (ix, iy, iz) along patient x (towards the patient's
// left), y (posterior) and z (superior), each increasing, x fastest; the
// grid's own index order and axis signs do not matter.
//
// Encoding (each volume zlib-compressed (RFC 1950), then base64, in a
// non-executed <script type="application/octet-stream"> block that the CSP
// does not govern):
//
//   - dose: uint16 little endian, dose = code × DoseScale Gy (DoseScale =
//     reference maximum / 65535: 0.0015 % of the maximum), each x-run
//     stored as differences from the previous value (mod 2^16), which a
//     smooth dose turns into small numbers that compress well;
//   - Γ: one byte: 0 not evaluated, 1 Γ ≤ 1, 2–254 Γ = 1 + (code − 1) ×
//     GammaStep (rounded up, so a failing point never shows as passing),
//     255 Γ at the search cap (no agreement within the search distance);
//   - difference (evaluated − reference): one signed byte, difference =
//     code × DiffStep Gy with DiffStep 0.1 % of the normalisation dose,
//     saturating at ±127 (±12.7 %); −128 where it is not shown: outside the
//     evaluated grid, or where both doses are below the low-dose threshold
//     (the noise of the low-dose region would otherwise fill the picture);
//   - masks: one bit per voxel inside each ROI's bounding box, x fastest,
//     least significant bit first, every ROI one after the other.
//
// When the encoded volumes would make the page too large (more than
// viewerBudget bytes of base64) the grid is downsampled by 2 along its
// finest axes, as often as needed: the dose averaged over each block, Γ and
// the difference the largest in magnitude in each block and an ROI present
// where any voxel of the block is inside (no failure can disappear), and
// the page says so.

// viewerBudget is the most base64 the slice browser's volumes may take.
var viewerBudget = 8 << 20

// Codes of the Γ and difference volumes.
const (
	gammaNotEvaluated = 0
	gammaPassed       = 1
	gammaCapped       = 255
	gammaCodes        = 253 // codes 2..254
	diffHidden        = -128
	diffMaxCode       = 127
	// diffStepPercent is the difference step, % of the normalisation dose.
	diffStepPercent = 0.1
)

// viewerROI is one ROI's mask in the slice browser.
type viewerROI struct {
	Name  string `json:"name"`
	Color string `json:"color"`
	// Row is the id of the ROI's table row ("roi-3"), "" when not listed.
	Row string `json:"row"`
	// Box is the bounding box in canonical (downsampled) indices: x0, x1,
	// y0, y1, z0, z1, ends exclusive.
	Box [6]int `json:"box"`
	// Offset is the byte offset of the ROI's bits in the masks blob.
	Offset int `json:"offset"`
}

// viewerIso is an isodose level.
type viewerIso struct {
	Percent float64 `json:"percent"`
	Color   string  `json:"color"`
}

// viewerMeta is the JSON part of the slice browser's data.
type viewerMeta struct {
	Dims [3]int `json:"dims"`
	// X, Y, Z are the voxel centres (mm) along each canonical axis.
	X []float64 `json:"x"`
	Y []float64 `json:"y"`
	Z []float64 `json:"z"`
	// Raster maps display pixels to voxels along each axis: the identity
	// for a uniform axis, a finer uniform resampling for irregular frame
	// offsets (so that pixels have one size in mm).
	Raster [3][]int `json:"raster"`
	// Block is the downsampling factor along each axis (1: none).
	Block     [3]int     `json:"block"`
	DoseScale float64    `json:"doseScale"`
	RefMax    float64    `json:"refMax"`
	NormDose  float64    `json:"normDose"`
	NormNote  string     `json:"normNote"`
	GammaStep float64    `json:"gammaStep"`
	GammaCap  float64    `json:"gammaCap"`
	DiffStep  float64    `json:"diffStep"`
	DiffShown string     `json:"diffShown"`
	Threshold float64    `json:"threshold"`
	DosePct   float64    `json:"dosePercent"`
	Start     [3]float64 `json:"start"`
	// StartExtent is the size (mm) of the region first shown around Start;
	// 0 shows the whole grid.
	StartExtent float64     `json:"startExtent"`
	StartNote   string      `json:"startNote"`
	Isodoses    []viewerIso `json:"isodoses"`
	ROIs        []viewerROI `json:"rois"`
}

// viewerPayload is the slice browser's data as the page embeds it.
type viewerPayload struct {
	Meta                     viewerMeta
	Dose, Gamma, Diff, Masks string // base64 of the compressed volumes
	Note                     string // how the volumes were reduced, if they were
}

// Size returns the bytes the payload adds to the page (base64 and JSON).
func (v *viewerPayload) Size() int {
	return len(v.Dose) + len(v.Gamma) + len(v.Diff) + len(v.Masks)
}

// html returns the payload as the page's data blocks.
func (v *viewerPayload) html() (template.HTML, error) {
	meta, err := json.Marshal(v.Meta) // escapes <, > and &: safe inside <script>
	if err != nil {
		return "", err
	}
	var b bytes.Buffer
	b.WriteString(`<script type="application/json" id="vg-meta">`)
	b.Write(meta)
	b.WriteString("</script>\n")
	for _, blk := range []struct{ id, data string }{{"vg-dose", v.Dose}, {"vg-gamma", v.Gamma}, {"vg-diff", v.Diff}, {"vg-masks", v.Masks}} {
		b.WriteString(`<script type="application/octet-stream" id="` + blk.id + `">`)
		b.WriteString(blk.data)
		b.WriteString("</script>\n")
	}
	return template.HTML(b.String()), nil
}

// viewerInput is what the slice browser is made from.
type viewerInput struct {
	Ref, Gamma, Diff *volume.Grid
	ROIs             []viewerMask
	NormDose         float64
	NormNote         string
	ThresholdPercent float64
	DosePercent      float64
	GammaCap         float64
	Start            [3]float64
	StartExtent      float64
	StartNote        string
}

// viewerMask is one ROI's mask with its display name, colour and row.
type viewerMask struct {
	Name, Color, Row string
	Mask             *volume.Mask
}

// canonical describes the canonical arrangement of a grid: for each
// canonical axis, the grid's index axis and, per canonical index, the
// grid's index.
type canonical struct {
	g      *volume.Grid
	axis   [3]int
	index  [3][]int
	coords [3][]float64
	// inverse[p][i] is the canonical index along patient axis p of the
	// grid's index i along its axis c.axis[p].
	inverse [3][]int
}

func newCanonical(g *volume.Grid) *canonical {
	c := &canonical{g: g}
	for p := 0; p < 3; p++ {
		c.axis[p] = indexAxisAlong(g, p)
		c.coords[p], c.index[p] = axisOrder(g, c.axis[p], true)
		c.inverse[p] = make([]int, len(c.index[p]))
		for ci, gi := range c.index[p] {
			c.inverse[p][gi] = ci
		}
	}
	return c
}

// canonicalOf returns the canonical indices of the grid's data position n.
func (c *canonical) canonicalOf(n int) (x, y, z int) {
	var ijk [3]int
	ijk[0], ijk[1], ijk[2] = c.g.IJK(n)
	return c.inverse[0][ijk[c.axis[0]]], c.inverse[1][ijk[c.axis[1]]], c.inverse[2][ijk[c.axis[2]]]
}

// voxel returns the grid's data position of canonical voxel (x, y, z).
func (c *canonical) voxel(x, y, z int) int {
	var ijk [3]int
	ijk[c.axis[0]] = c.index[0][x]
	ijk[c.axis[1]] = c.index[1][y]
	ijk[c.axis[2]] = c.index[2][z]
	return c.g.Index(ijk[0], ijk[1], ijk[2])
}

// blocks returns, for n samples grouped f at a time, the number of groups.
func blocks(n, f int) int { return (n + f - 1) / f }

// buildViewer encodes the slice browser's data, downsampling until it fits
// the budget.
func buildViewer(in viewerInput) (*viewerPayload, error) {
	c := newCanonical(in.Ref)
	n := [3]int{len(c.coords[0]), len(c.coords[1]), len(c.coords[2])}
	block := [3]int{1, 1, 1}
	for {
		v, err := encodeViewer(in, c, block)
		if err != nil {
			return nil, err
		}
		if v.Size() <= viewerBudget || (block[0] >= n[0] && block[1] >= n[1] && block[2] >= n[2]) {
			if block != [3]int{1, 1, 1} {
				v.Note = fmt.Sprintf("To keep the page small, the slice browser shows blocks of %d × %d × %d voxels (x × y × z): the reference dose is their mean, Γ and the dose difference the largest in each block, and an ROI covers a block when it covers any of its voxels, so no failing point is hidden. The tables, histograms and DVHs use every voxel.",
					block[0], block[1], block[2])
			}
			return v, nil
		}
		// Halve the finest axis (by spacing in mm), ties to x before y
		// before z.
		best, bestMM := -1, math.Inf(1)
		for a := 0; a < 3; a++ {
			if block[a] >= n[a] {
				continue
			}
			mm := math.Inf(1)
			if n[a] > 1 {
				mm = (c.coords[a][n[a]-1] - c.coords[a][0]) / float64(n[a]-1) * float64(block[a])
			}
			if mm < bestMM-1e-9 {
				best, bestMM = a, mm
			}
		}
		if best < 0 {
			return v, nil
		}
		block[best] *= 2
	}
}

// encodeViewer encodes the volumes downsampled by block.
func encodeViewer(in viewerInput, c *canonical, block [3]int) (*viewerPayload, error) {
	n := [3]int{len(c.coords[0]), len(c.coords[1]), len(c.coords[2])}
	var d [3]int
	var coords [3][]float64
	for a := 0; a < 3; a++ {
		d[a] = blocks(n[a], block[a])
		coords[a] = make([]float64, d[a])
		for b := 0; b < d[a]; b++ {
			lo, hi := b*block[a], min((b+1)*block[a], n[a])
			s := 0.0
			for i := lo; i < hi; i++ {
				s += c.coords[a][i]
			}
			coords[a][b] = s / float64(hi-lo)
		}
	}
	refMax, _ := in.Ref.Max()
	doseScale := float64(refMax) / 65535
	if !(doseScale > 0) {
		doseScale = 1.0 / 65535
	}
	gcap := in.GammaCap
	if !(gcap > 1) {
		gcap = 1.5
	}
	gstep := (gcap - 1) / gammaCodes
	norm := in.NormDose
	diffStep := diffStepPercent / 100 * norm
	if !(diffStep > 0) {
		diffStep = diffStepPercent / 100 * math.Max(float64(refMax), 1)
	}
	cutoff := in.ThresholdPercent / 100 * norm

	total := d[0] * d[1] * d[2]
	dose := make([]byte, 2*total)
	gam := make([]byte, total)
	diff := make([]byte, total)
	out := 0
	for z := 0; z < d[2]; z++ {
		for y := 0; y < d[1]; y++ {
			prev := uint16(0)
			for x := 0; x < d[0]; x++ {
				sum, cnt := 0.0, 0
				gmax, gEval, gCapped := 0.0, false, false
				dBest, dShown := 0.0, false
				for zz := z * block[2]; zz < min((z+1)*block[2], n[2]); zz++ {
					for yy := y * block[1]; yy < min((y+1)*block[1], n[1]); yy++ {
						for xx := x * block[0]; xx < min((x+1)*block[0], n[0]); xx++ {
							at := c.voxel(xx, yy, zz)
							r := float64(in.Ref.Data[at])
							if r == r {
								sum += r
								cnt++
							}
							if g := float64(in.Gamma.Data[at]); g == g {
								gEval = true
								if g >= gcap-1e-6 {
									gCapped = true
								}
								gmax = math.Max(gmax, g)
							}
							if in.Diff != nil {
								df := float64(in.Diff.Data[at])
								if df == df && (r >= cutoff || r+df >= cutoff) && (!dShown || math.Abs(df) > math.Abs(dBest)) {
									dBest, dShown = df, true
								}
							}
						}
					}
				}
				code := uint16(0)
				if cnt > 0 {
					if v := math.Round(sum / float64(cnt) / doseScale); v > 0 {
						code = uint16(math.Min(v, 65535))
					}
				}
				binary.LittleEndian.PutUint16(dose[2*out:], code-prev)
				prev = code
				switch {
				case !gEval:
					gam[out] = gammaNotEvaluated
				case gCapped:
					gam[out] = gammaCapped
				case gmax <= 1:
					gam[out] = gammaPassed
				default:
					k := math.Ceil((gmax-1)/gstep - 1e-9)
					gam[out] = byte(1 + math.Min(math.Max(k, 1), gammaCodes))
				}
				dc := diffHidden
				if dShown {
					dc = int(math.Max(-diffMaxCode, math.Min(diffMaxCode, math.Round(dBest/diffStep))))
				}
				diff[out] = byte(int8(dc))
				out++
			}
		}
	}

	v := &viewerPayload{}
	m := &v.Meta
	m.Dims = d
	m.X, m.Y, m.Z = round4(coords[0]), round4(coords[1]), round4(coords[2])
	m.Block = block
	for a := 0; a < 3; a++ {
		m.Raster[a] = rasterAxis(edgesOf(coords[a], true))
	}
	m.DoseScale, m.RefMax, m.NormDose, m.NormNote = doseScale, float64(refMax), norm, in.NormNote
	m.GammaStep, m.GammaCap, m.DiffStep = gstep, gcap, diffStep
	m.Threshold, m.DosePct = in.ThresholdPercent, in.DosePercent
	m.DiffShown = fmt.Sprintf("shown where either dose is at least the low-dose threshold (%s %% of %s Gy)", exact(in.ThresholdPercent), fixed(norm, 2))
	m.Start, m.StartExtent, m.StartNote = in.Start, in.StartExtent, in.StartNote
	for _, iso := range isodoseLevels {
		m.Isodoses = append(m.Isodoses, viewerIso{Percent: iso.Percent, Color: hexColor(iso.Color)})
	}

	var masks []byte
	m.ROIs = []viewerROI{}
	for _, r := range in.ROIs {
		vr := viewerROI{Name: r.Name, Color: r.Color, Row: r.Row, Offset: len(masks)}
		// Bounding box in downsampled indices.
		lo := [3]int{d[0], d[1], d[2]}
		hi := [3]int{0, 0, 0}
		inBlock := make([]bool, total)
		any := false
		for at, set := range r.Mask.Bits {
			if !set {
				continue
			}
			x, y, z := c.canonicalOf(at)
			bx, by, bz := x/block[0], y/block[1], z/block[2]
			inBlock[bx+d[0]*(by+d[1]*bz)] = true
			any = true
			lo = [3]int{min(lo[0], bx), min(lo[1], by), min(lo[2], bz)}
			hi = [3]int{max(hi[0], bx+1), max(hi[1], by+1), max(hi[2], bz+1)}
		}
		if !any {
			continue
		}
		vr.Box = [6]int{lo[0], hi[0], lo[1], hi[1], lo[2], hi[2]}
		bits := (hi[0] - lo[0]) * (hi[1] - lo[1]) * (hi[2] - lo[2])
		packed := make([]byte, (bits+7)/8)
		k := 0
		for z := lo[2]; z < hi[2]; z++ {
			for y := lo[1]; y < hi[1]; y++ {
				for x := lo[0]; x < hi[0]; x++ {
					if inBlock[x+d[0]*(y+d[1]*z)] {
						packed[k>>3] |= 1 << (k & 7)
					}
					k++
				}
			}
		}
		masks = append(masks, packed...)
		m.ROIs = append(m.ROIs, vr)
	}

	var err error
	for _, e := range []struct {
		dst *string
		raw []byte
	}{{&v.Dose, dose}, {&v.Gamma, gam}, {&v.Diff, diff}, {&v.Masks, masks}} {
		if *e.dst, err = deflate64(e.raw); err != nil {
			return nil, err
		}
	}
	return v, nil
}

// deflate64 compresses b with zlib and returns it in base64.
func deflate64(b []byte) (string, error) {
	var buf bytes.Buffer
	w, err := zlib.NewWriterLevel(&buf, zlib.DefaultCompression)
	if err != nil {
		return "", err
	}
	if _, err := w.Write(b); err != nil {
		return "", err
	}
	if err := w.Close(); err != nil {
		return "", err
	}
	return base64.StdEncoding.EncodeToString(buf.Bytes()), nil
}

// round4 rounds coordinates to 0.1 µm for a shorter JSON.
func round4(v []float64) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = math.Round(x*1e4) / 1e4
	}
	return out
}
