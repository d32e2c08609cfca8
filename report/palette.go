package report

import (
	"image/color"
	"math"
	"strconv"
)

// ROI colours: Kelly's 22 colours of maximum contrast (K. L. Kelly,
// "Twenty-two colors of maximum contrast", Color Engineering 3(6) (1965)
// 26), in his order, white left out (it does not show on white paper). The
// order is Kelly's: the first n colours are as far apart as he could make
// them for any n. The sRGB values are the commonly used renderings of his
// ISCC-NBS colour names (from memory: check against the ISCC-NBS centroid
// table before relying on a particular value). A page with more ROIs than
// colours repeats them; the ROI picker and the legends name every ROI.
//
// The structure set's own display colours are not used: they often repeat
// (several blues), which is what made the DVHs unreadable.
var kellyColors = []string{
	"#222222", // black
	"#F3C300", // vivid yellow
	"#875692", // strong purple
	"#F38400", // vivid orange
	"#A1CAF1", // very light blue
	"#BE0032", // vivid red
	"#C2B280", // grayish yellow
	"#848482", // medium gray
	"#008856", // vivid green
	"#E68FAC", // strong purplish pink
	"#0067A5", // strong blue
	"#F99379", // strong yellowish pink
	"#604E97", // strong violet
	"#F6A600", // vivid orange yellow
	"#B3446C", // strong purplish red
	"#DCD300", // vivid greenish yellow
	"#882D17", // strong reddish brown
	"#8DB600", // vivid yellowish green
	"#654522", // deep yellowish brown
	"#E25822", // vivid reddish orange
	"#2B3D26", // dark olive green
}

// roiColor returns the line colour of the i-th ROI: Kelly's i-th colour,
// darkened where needed to a contrast of at least 3:1 against white (the
// WCAG 2.1 minimum for graphical objects, success criterion 1.4.11), so
// that every line shows on white paper and in greyscale print.
func roiColor(i int) color.RGBA {
	return darkenForContrast(parseHex(kellyColors[i%len(kellyColors)]), 3)
}

// parseHex parses #rrggbb.
func parseHex(s string) color.RGBA {
	v, _ := strconv.ParseUint(s[1:], 16, 32)
	return color.RGBA{R: uint8(v >> 16), G: uint8(v >> 8), B: uint8(v), A: 255}
}

// srgbToLinear is the sRGB transfer function's inverse (IEC 61966-2-1, as
// WCAG 2.1 states it).
func srgbToLinear(c uint8) float64 {
	v := float64(c) / 255
	if v <= 0.04045 {
		return v / 12.92
	}
	return math.Pow((v+0.055)/1.055, 2.4)
}

func linearToSRGB(v float64) uint8 {
	var s float64
	if v <= 0.0031308 {
		s = 12.92 * v
	} else {
		s = 1.055*math.Pow(v, 1/2.4) - 0.055
	}
	return uint8(math.Max(0, math.Min(255, math.Round(s*255))))
}

// relativeLuminance is WCAG 2.1's relative luminance of an sRGB colour.
func relativeLuminance(c color.RGBA) float64 {
	return 0.2126*srgbToLinear(c.R) + 0.7152*srgbToLinear(c.G) + 0.0722*srgbToLinear(c.B)
}

// contrastWithWhite is WCAG 2.1's contrast ratio of c against white.
func contrastWithWhite(c color.RGBA) float64 {
	return 1.05 / (relativeLuminance(c) + 0.05)
}

// darkenForContrast scales c's linear RGB down (keeping its hue) until its
// contrast with white is at least ratio.
func darkenForContrast(c color.RGBA, ratio float64) color.RGBA {
	maxL := 1.05/ratio - 0.05
	l := relativeLuminance(c)
	if l <= maxL {
		return c
	}
	f := maxL / l
	out := color.RGBA{R: linearToSRGB(srgbToLinear(c.R) * f), G: linearToSRGB(srgbToLinear(c.G) * f), B: linearToSRGB(srgbToLinear(c.B) * f), A: 255}
	for relativeLuminance(out) > maxL && (out.R > 0 || out.G > 0 || out.B > 0) {
		out.R, out.G, out.B = out.R-min(out.R, 1), out.G-min(out.G, 1), out.B-min(out.B, 1)
	}
	return out
}

// Colour scales of the slices, from ColorBrewer (M. Harrower and C. A.
// Brewer, "ColorBrewer.org: an online tool for selecting colour schemes for
// maps", The Cartographic Journal 40(1) (2003) 27): the seven darkest of
// the nine YlOrRd classes for Γ > 1 (the palest would not show on the grey
// dose), the eleven RdBu classes for the dose difference (blue: evaluated
// below reference; red: above) and the nine GnBu classes for the dose
// colour wash. The page's script holds the same lists (a test checks).
var (
	gammaClasses = []string{"#fed976", "#feb24c", "#fd8d3c", "#fc4e2a", "#e31a1c", "#bd0026", "#800026"}
	diffClasses  = []string{"#053061", "#2166ac", "#4393c3", "#92c5de", "#d1e5f0", "#f7f7f7", "#fddbc7", "#f4a582", "#d6604d", "#b2182b", "#67001f"}
	washClasses  = []string{"#f7fcf0", "#e0f3db", "#ccebc5", "#a8ddb5", "#7bccc4", "#4eb3d3", "#2b8cbe", "#0868ac", "#084081"}
)

// scale returns the colour at t in [0, 1] of classes interpolated
// linearly (t outside is clamped).
func scale(classes []string, t float64) color.RGBA {
	t = math.Max(0, math.Min(1, t))
	f := t * float64(len(classes)-1)
	k := min(int(f), len(classes)-2)
	u := f - float64(k)
	a, b := parseHex(classes[k]), parseHex(classes[k+1])
	mix := func(x, y uint8) uint8 { return uint8(math.Round(float64(x) + u*(float64(y)-float64(x)))) }
	return color.RGBA{R: mix(a.R, b.R), G: mix(a.G, b.G), B: mix(a.B, b.B), A: 255}
}

// gammaColor is the colour of a failing Γ (1 < g ≤ cap).
func gammaColor(g, cap float64) color.RGBA {
	if !(cap > 1) {
		cap = 1.5
	}
	return scale(gammaClasses, (g-1)/(cap-1))
}

// gradientCSS is a CSS linear gradient through classes, left to right.
func gradientCSS(classes []string) string {
	s := "background:linear-gradient(to right"
	for _, c := range classes {
		s += "," + c
	}
	return s + ")"
}
