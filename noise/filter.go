package noise

import (
	"fmt"
	"math"

	"voxgamma/internal/selection"
	"voxgamma/volume"
)

// FilterOptions tune Denoise. The zero value takes the defaults.
type FilterOptions struct {
	// Threshold is the window rule's limit: a larger window is taken only
	// while its estimate differs from the raw value's and from the
	// previous window's by at most Threshold standard deviations of the
	// difference. 0 means DefaultThreshold.
	Threshold float64
	// ChiZ is the χ² test's limit in standard deviations of the χ²
	// distribution of the window's residuals; 0 means DefaultChiZ,
	// negative turns the test off.
	ChiZ float64
	// Range is the half-width of the range weights in units of the
	// voxel's σ: a neighbour whose lightly smoothed dose differs by Δ from
	// the voxel's weighs (1 − (Δ/(Range·σ))²)² in the fit, nothing beyond
	// Range·σ (Tukey's biweight). 0 means DefaultRange; negative turns
	// range weights off.
	Range float64
	// MaxHalfWidth bounds the window along each axis to 2·MaxHalfWidth+1
	// samples. 0 means DefaultMaxHalfWidth.
	MaxHalfWidth int
	// MaxHalfWidthMM bounds the window's half-width in mm as well (never
	// below two samples); 0 means DefaultMaxHalfWidthMM, negative no bound
	// beyond MaxHalfWidth.
	MaxHalfWidthMM float64
	// QuarticFrom is the half-width (samples) from which the windows fit a
	// quartic instead of a quadratic, on grids where the filter works on
	// the dose itself (see DetailMaxSpacingMM); 0 means
	// DefaultQuarticFrom, negative never. Quadratic windows never exceed
	// QuadraticMaxHalfWidth.
	QuarticFrom int
	// Floor is a dose (Gy) below which voxels (by their lightly smoothed
	// dose) are left as they are; 0 filters every voxel.
	Floor float64
	// NoDetail filters the dose itself even on a fine grid (see
	// DetailMaxSpacingMM).
	NoDetail bool
	// Workers is the number of goroutines; 0 means GOMAXPROCS.
	Workers int
}

// Defaults of FilterOptions, chosen on the fields with exact truth of the
// package's tests (BENCHMARKS.md gives the figures).
const (
	DefaultThreshold      = 3.5
	DefaultChiZ           = 5.0
	DefaultRange          = 4.0
	DefaultMaxHalfWidth   = 8
	DefaultMaxHalfWidthMM = 24.0
	// DefaultQuarticFrom makes the windows of 9 samples and more quartic
	// where the dose itself is filtered: a quadratic over 9 to 13 samples
	// of a 2–3 mm grid rounds a 5 mm penumbra's shoulders by up to half of
	// σ, which no test on the window's residuals sees, and a quartic
	// (Savitzky and Golay, Anal Chem 36 (1964) 1627, order 4) follows them.
	// The quartic keeps more noise for a window of the same width (the
	// variance of the centre estimate 0.278σ² at 13 samples, the
	// quadratic's 0.175σ²), so windows then grow to 17 samples.
	DefaultQuarticFrom = 4
	// QuadraticMaxHalfWidth bounds a quadratic window to 13 samples: on
	// the dose's detail (fine grids), where every window is quadratic,
	// the windows stop there.
	QuadraticMaxHalfWidth = 6
	// DetailMaxSpacingMM is the coarsest spacing (every axis) on which the
	// filter works on the dose's detail: the dose minus its binomial
	// smoothing, which there follows a 3–5 mm penumbra within a fraction
	// of a percent, so that the quadratic fits no longer round the
	// penumbra's shoulders. On coarser grids the binomial smoothing itself
	// rounds them, and the dose is filtered directly, with quartic fits
	// over the wider windows (DefaultQuarticFrom).
	DetailMaxSpacingMM = 1.5
)

// fineGrid reports whether every axis of g with more than one sample is
// spaced at most DetailMaxSpacingMM (mean spacing).
func fineGrid(g *volume.Grid) bool {
	for a := 0; a < 3; a++ {
		if h, _ := g.Spacing(a); h > DetailMaxSpacingMM {
			return false
		}
	}
	return true
}

// FilterStats describe what Denoise did.
type FilterStats struct {
	// MeanWidth is the mean window width (samples) chosen along each axis,
	// over the voxels with a positive σ (1 along an axis not filtered).
	MeanWidth [3]float64
	// Detail is true when the filter worked on the dose's detail (see
	// DetailMaxSpacingMM).
	Detail bool
	// ResidualSigmaRatio is the median, over the voxels filtered whose σ
	// is at least a tenth of the largest, of the model standard deviation
	// of the filtered value over σ (1: not smoothed).
	ResidualSigmaRatio float64
}

func (o *FilterOptions) fill() error {
	if o.Threshold == 0 {
		o.Threshold = DefaultThreshold
	}
	if o.ChiZ == 0 {
		o.ChiZ = DefaultChiZ
	}
	if o.Range == 0 {
		o.Range = DefaultRange
	}
	if o.MaxHalfWidth == 0 {
		o.MaxHalfWidth = DefaultMaxHalfWidth
	}
	if o.QuarticFrom == 0 {
		o.QuarticFrom = DefaultQuarticFrom
	}
	if o.MaxHalfWidthMM == 0 {
		o.MaxHalfWidthMM = DefaultMaxHalfWidthMM
	}
	if !(o.Threshold > 0) || math.IsInf(o.Threshold, 0) || math.IsNaN(o.ChiZ) || math.IsNaN(o.Range) ||
		o.MaxHalfWidth < 2 || o.MaxHalfWidth > maxHalfWidth || math.IsNaN(o.MaxHalfWidthMM) ||
		(o.QuarticFrom > 0 && (o.QuarticFrom < 3 || o.QuarticFrom > QuadraticMaxHalfWidth+1)) {
		return fmt.Errorf("noise: filter options %+v: want a positive threshold, a half-width from 2 to %d and quartic fits from a half-width of 3 to %d",
			*o, maxHalfWidth, QuadraticMaxHalfWidth+1)
	}
	return nil
}

// maxHalfWidth bounds FilterOptions.MaxHalfWidth.
const maxHalfWidth = 32

// Denoise returns the dose smoothed by weighted local quadratic and
// quartic (Savitzky–Golay) least-squares fits along each axis in turn, whose
// window is chosen per voxel from the noise sigma (1σ per voxel, Gy, in the
// grid's order; see the package documentation). The dose and sigma are not
// modified.
func (d *Dose) Denoise(sigma []float32, opt FilterOptions) (*volume.Grid, FilterStats, error) {
	if len(sigma) != len(d.Grid.Data) {
		return nil, FilterStats{}, fmt.Errorf("noise: %d σ values for a grid of %d voxels", len(sigma), len(d.Grid.Data))
	}
	return d.denoise(sigmaSource{m: sigma}, opt)
}

// DenoiseModel is Denoise with σ from the Monte Carlo model of ModelSigma
// (sigmaPercent % of dmax at dmax), the same values bit for bit, computed
// voxel by voxel as the filter needs them instead of held in a map of
// their own (4 bytes a voxel at the denoising's peak of memory).
func (d *Dose) DenoiseModel(sigmaPercent, dmax float64, opt FilterOptions) (*volume.Grid, FilterStats, error) {
	return d.denoise(d.model(sigmaPercent, dmax), opt)
}

// denoise is Denoise with σ from sig.
func (d *Dose) denoise(sig sigmaSource, opt FilterOptions) (*volume.Grid, FilterStats, error) {
	var st FilterStats
	g := d.Grid
	if err := opt.fill(); err != nil {
		return nil, st, err
	}
	n := len(g.Data)
	smax := float32(0)
	for i := 0; i < n; i++ {
		s := sig.at(i)
		if !(s >= 0) || math.IsInf(float64(s), 0) {
			return nil, st, fmt.Errorf("noise: σ of voxel %d is %g: want a finite value ≥ 0", i, s)
		}
		smax = max(smax, s)
	}
	dims := g.Dims()
	out := g.Clone()
	st.Detail = !opt.NoDetail && fineGrid(g)
	if st.Detail {
		for n := range out.Data {
			out.Data[n] -= d.smooth[n]
		}
	}
	v := make([]float32, n) // variance of out
	floor := opt.Floor
	counted := 0
	for i := range v {
		s := sig.at(i)
		v[i] = s * s
		if s > 0 && float64(d.smooth[i]) >= floor {
			counted++
		}
	}
	filtered := false // some axis had lines long enough to filter
	for a := 0; a < 3; a++ {
		st.MeanWidth[a] = 1
		if dims[a] < 5 {
			continue
		}
		filtered = true
		off := g.Offsets(a)
		h, _ := g.Spacing(a)
		hw := opt.MaxHalfWidth
		if opt.MaxHalfWidthMM > 0 && h > 0 {
			hw = min(hw, max(2, int(math.Floor(opt.MaxHalfWidthMM/h+1e-9))))
		}
		quarticFrom := 0
		if !st.Detail && opt.QuarticFrom > 0 && opt.QuarticFrom <= hw {
			quarticFrom = opt.QuarticFrom
		}
		if quarticFrom == 0 {
			hw = min(hw, QuadraticMaxHalfWidth)
		}
		scales := halfWidths(hw)
		ls := linesAlong(dims, a)
		widths := make([]int64, ls.count)
		parallelLines(ls, opt.Workers, 5*ls.n, func(l int, buf []float64) {
			ln := line{y: buf[:ls.n], v: buf[ls.n : 2*ls.n], t: buf[2*ls.n : 3*ls.n], guide: buf[3*ls.n : 4*ls.n], scale: buf[4*ls.n : 5*ls.n],
				threshold2: opt.Threshold * opt.Threshold, chiZ: opt.ChiZ, maxHalf: hw, scales: scales,
				quarticFrom: quarticFrom}
			s := ls.start(l)
			for i := 0; i < ls.n; i++ {
				n := s + i*ls.stride
				ln.y[i] = float64(out.Data[n])
				ln.v[i] = float64(v[n])
				ln.t[i] = off[i] / h
				ln.guide[i] = float64(d.smooth[n])
				ln.scale[i] = 0
				if sg := sig.at(n); opt.Range > 0 && sg > 0 {
					r := opt.Range * float64(sg)
					ln.scale[i] = 1 / (r * r)
				}
			}
			var wsum int64
			for i := 0; i < ls.n; i++ {
				if ln.v[i] == 0 || ln.guide[i] < floor {
					continue
				}
				e, ev, w := ln.at(i)
				n := s + i*ls.stride
				out.Data[n] = float32(e)
				v[n] = float32(ev)
				wsum += int64(w)
			}
			widths[l] = wsum
		})
		if counted > 0 {
			var total int64
			for _, w := range widths {
				total += w
			}
			st.MeanWidth[a] = float64(total) / float64(counted)
		}
	}
	if st.Detail {
		// A voxel the lines left alone (σ 0, below the floor, or no axis
		// long enough to filter) gets its own value back: the detail's
		// round trip through float32 would move it by a rounding.
		for n := range out.Data {
			if s := sig.at(n); !filtered || s*s == 0 || float64(d.smooth[n]) < floor {
				out.Data[n] = g.Data[n]
				continue
			}
			out.Data[n] += d.smooth[n]
		}
	}
	// The median without holding every ratio (8 bytes a voxel, beside
	// the dose, σ, the output and its variance: the denoising's peak).
	st.ResidualSigmaRatio = streamMedian(func(yield func(float64)) {
		for i := range v {
			if s := sig.at(i); s >= smax/10 && s > 0 && float64(d.smooth[i]) >= floor {
				yield(math.Sqrt(float64(v[i])) / float64(s))
			}
		}
	})
	return out, st, nil
}

// streamMedian returns median of the values each visits (none NaN), the
// same number bit for bit, without holding them all: each is called three
// times and must visit the same values each time. The first pass finds
// their count and range, the second counts them in medianBins equal bins,
// the third keeps only the values of the bins that hold the middle ranks.
func streamMedian(each func(yield func(float64))) float64 {
	n, lo, hi := 0, math.Inf(1), math.Inf(-1)
	each(func(x float64) {
		n++
		lo, hi = math.Min(lo, x), math.Max(hi, x)
	})
	if n <= medianBins || !(hi > lo) {
		all := make([]float64, 0, n)
		each(func(x float64) { all = append(all, x) })
		return median(all)
	}
	// bin is monotone in x, so the bins order the values.
	width := hi - lo
	bin := func(x float64) int { return min(medianBins-1, int((x-lo)/width*medianBins)) }
	var counts [medianBins]int
	each(func(x float64) { counts[bin(x)]++ })
	// The ranks median needs: n/2 and, for an even n, n/2 − 1.
	k := n / 2
	first := k
	if n%2 == 0 {
		first = k - 1
	}
	below, b0, b1 := 0, -1, -1
	for b, c := 0, 0; b < medianBins; b++ {
		if b0 < 0 && c+counts[b] > first {
			b0, below = b, c
		}
		if c+counts[b] > k {
			b1 = b
			break
		}
		c += counts[b]
	}
	var part []float64
	each(func(x float64) {
		if b := bin(x); b >= b0 && b <= b1 {
			part = append(part, x)
		}
	})
	m := selection.Kth(part, k-below)
	if n%2 == 1 {
		return m
	}
	// The largest of the lower half, as median takes it.
	prev := part[0]
	for _, x := range part[:k-below] {
		prev = math.Max(prev, x)
	}
	return (prev + m) / 2
}

// medianBins is the number of bins streamMedian counts values in.
const medianBins = 1 << 12

// line is one line of samples along an axis, with what the fit at each
// sample needs.
type line struct {
	y, v, t []float64 // values, variances, positions (units of the mean spacing)
	guide   []float64 // lightly smoothed raw dose, for the range weights
	scale   []float64 // 1/(Range·σ)² per sample; 0: no range weights
	// The window rule's parameters and the half-widths at which it is
	// applied.
	threshold2, chiZ float64
	maxHalf          int
	quarticFrom      int // half-width from which fits are quartic; 0: never
	scales           []int
}

// halfWidths returns the half-widths at which windows are tested: a
// roughly geometric set (as the scale sets of the ICI literature) up to
// and including max.
func halfWidths(max int) []int {
	var out []int
	for _, h := range []int{2, 3, 4, 6, 8, 11, 16, 22, 32} {
		if h < max {
			out = append(out, h)
		}
	}
	return append(out, max)
}

// maxOrder is the highest polynomial order of the fits.
const maxOrder = 4

// moments accumulates the weighted moments of a window about its centre:
// Σωtᵏ (k ≤ 2·maxOrder), Σωtᵏ(y−y₀) (k ≤ maxOrder), Σω(y−y₀)²,
// Σω²tᵏv (k ≤ 2·maxOrder), Σω², Σωv.
type moments struct {
	m        [2*maxOrder + 1]float64
	my       [maxOrder + 1]float64
	mv       [2*maxOrder + 1]float64
	myy      float64
	mw2, mwv float64
}

// add adds a sample at offset d from the centre with weight w, value
// deviation dy and variance v, for fits up to a quadratic: the moments a
// quartic needs beyond are left out.
func (s *moments) add(d, w, dy, v float64) {
	d2 := d * d
	w1, w2, w3, w4 := w*d, w*d2, w*d2*d, w*d2*d2
	s.m[0] += w
	s.m[1] += w1
	s.m[2] += w2
	s.m[3] += w3
	s.m[4] += w4
	wv := w * v
	s.mv[0] += w * wv
	s.mv[1] += w1 * wv
	s.mv[2] += w2 * wv
	s.mv[3] += w3 * wv
	s.mv[4] += w4 * wv
	s.my[0] += w * dy
	s.my[1] += w1 * dy
	s.my[2] += w2 * dy
	s.myy += w * dy * dy
	s.mw2 += w * w
	s.mwv += wv
}

// addQuartic is add with the moments of fits up to a quartic.
func (s *moments) addQuartic(d, w, dy, v float64) {
	var p [2*maxOrder + 1]float64
	p[0] = w
	for k := 1; k < len(p); k++ {
		p[k] = p[k-1] * d
	}
	wv := w * v
	for k, x := range p {
		s.m[k] += x
		s.mv[k] += x * wv
	}
	for k := range s.my {
		s.my[k] += p[k] * dy
	}
	s.myy += w * dy * dy
	s.mw2 += w * w
	s.mwv += wv
}

// fit is the weighted least-squares polynomial of order q−1 over a
// window: g, the first row of the inverse normal matrix (the estimate at
// the centre is Σ g_k·Σωtᵏy), and b, the coefficients.
type fit struct {
	q    int
	g, b [maxOrder + 1]float64
}

// solve fits a polynomial of order q−1 (q ≤ maxOrder+1) to the window's
// moments s, whose offsets reach about ±span; it reports false when the
// normal matrix is singular (too few samples of non-zero weight). The
// normal matrix M_kl = Σωt^(k+l) is factored by Cholesky after scaling t
// by span, which keeps it well conditioned.
func (f *fit) solve(s *moments, q int, span float64) bool {
	if q == 3 {
		return f.solveQuadratic(s)
	}
	f.q = q
	var sc [maxOrder + 1]float64
	sc[0] = 1
	for k := 1; k < q; k++ {
		sc[k] = sc[k-1] / span
	}
	var l [maxOrder + 1][maxOrder + 1]float64
	for i := 0; i < q; i++ {
		for j := 0; j <= i; j++ {
			a := s.m[i+j] * sc[i] * sc[j]
			for k := 0; k < j; k++ {
				a -= l[i][k] * l[j][k]
			}
			if i == j {
				if !(a > 1e-9*s.m[2*i]*sc[i]*sc[i]) {
					return false
				}
				l[i][i] = math.Sqrt(a)
			} else {
				l[i][j] = a / l[j][j]
			}
		}
	}
	// Solve L Lᵀ x = r for r = e₀ and r = D·my, D = diag(sc).
	var x, z [maxOrder + 1]float64
	for i := 0; i < q; i++ {
		a, c := 0.0, s.my[i]*sc[i]
		if i == 0 {
			a = 1
		}
		for k := 0; k < i; k++ {
			a -= l[i][k] * x[k]
			c -= l[i][k] * z[k]
		}
		x[i], z[i] = a/l[i][i], c/l[i][i]
	}
	for i := q - 1; i >= 0; i-- {
		a, c := x[i], z[i]
		for k := i + 1; k < q; k++ {
			a -= l[k][i] * x[k]
			c -= l[k][i] * z[k]
		}
		x[i], z[i] = a/l[i][i], c/l[i][i]
	}
	f.g, f.b = [maxOrder + 1]float64{}, [maxOrder + 1]float64{}
	for k := 0; k < q; k++ {
		f.g[k], f.b[k] = x[k]*sc[k], z[k]*sc[k]
	}
	return true
}

// solveQuadratic is solve for a quadratic, by the cofactors of the 3×3
// normal matrix.
func (f *fit) solveQuadratic(s *moments) bool {
	m, my := &s.m, &s.my
	c00 := m[2]*m[4] - m[3]*m[3]
	c01 := m[2]*m[3] - m[1]*m[4]
	c02 := m[1]*m[3] - m[2]*m[2]
	det := m[0]*c00 + m[1]*c01 + m[2]*c02
	if !(det > 1e-9*m[0]*m[2]*m[4]) {
		return false
	}
	inv := 1 / det
	c11 := m[0]*m[4] - m[2]*m[2]
	c12 := m[1]*m[2] - m[0]*m[3]
	c22 := m[0]*m[2] - m[1]*m[1]
	f.q = 3
	f.g = [maxOrder + 1]float64{c00 * inv, c01 * inv, c02 * inv}
	f.b = [maxOrder + 1]float64{
		(c00*my[0] + c01*my[1] + c02*my[2]) * inv,
		(c01*my[0] + c11*my[1] + c12*my[2]) * inv,
		(c02*my[0] + c12*my[1] + c22*my[2]) * inv,
	}
	return true
}

// covariance returns Σ a(t)·b(t)·ω²v over a window whose weighted
// v-moments Σω²tᵏv are mv, with a(t) = Σ a.g_k tᵏ and b(t) likewise: the
// covariance of the two fits' estimates at the centre when a's window is
// the one of mv and lies within b's.
func covariance(a, b *fit, mv *[2*maxOrder + 1]float64) float64 {
	if a.q == 3 && b.q == 3 {
		x, y := &a.g, &b.g
		return x[0]*y[0]*mv[0] + (x[0]*y[1]+x[1]*y[0])*mv[1] + (x[0]*y[2]+x[1]*y[1]+x[2]*y[0])*mv[2] +
			(x[1]*y[2]+x[2]*y[1])*mv[3] + x[2]*y[2]*mv[4]
	}
	c := 0.0
	for k := 0; k < a.q; k++ {
		for j := 0; j < b.q; j++ {
			c += a.g[k] * b.g[j] * mv[k+j]
		}
	}
	return c
}

// weight returns the range weight of sample j seen from a sample with
// guide value g0 and scale sc (0: none).
func (ln *line) weight(j int, g0, sc float64) float64 {
	if sc == 0 {
		return 1
	}
	d := ln.guide[j] - g0
	u := 1 - d*d*sc
	if u <= 0 {
		return 0
	}
	return u * u
}

// at returns the filtered value at sample i, its variance and the number
// of samples of the window chosen: the largest window, grown by one sample
// on each side at a time up to maxHalf (clipped at the ends of the line),
// whose weighted least-squares estimate (a quadratic, a quartic from
// half-width quarticFrom) differs from the raw value and from the previous
// window's estimate by at most threshold standard deviations of each
// difference (the pairwise comparisons of Lepski's rule, restricted to
// these two) and whose residuals are compatible with the noise (χ² test
// at chiZ standard deviations).
func (ln *line) at(i int) (est, variance float64, width int) {
	y, v, t := ln.y, ln.v, ln.t
	n := len(y)
	y0, v0 := y[i], v[i]
	est, variance, width = y0, v0, 1
	g0, sc := ln.guide[i], ln.scale[i]
	var s moments
	s.addQuartic(0, 1, 0, v0)
	// The previous window's fit, estimate (minus y0), variance and
	// v-moments, for the covariance.
	var cur, prev fit
	var pe, pev float64
	var pmv [2*maxOrder + 1]float64
	have := false
	quartic := ln.quarticFrom > 0
	count, weighted := 1, 1
	next := 0 // index in scales of the next half-width tested
	for h := 1; h <= ln.maxHalf; h++ {
		grew := false
		for _, j := range [2]int{i - h, i + h} { // the left sample, then the right
			if j < 0 || j >= n {
				continue
			}
			if w := ln.weight(j, g0, sc); w > 0 {
				if quartic {
					s.addQuartic(t[j]-t[i], w, y[j]-y0, v[j])
				} else {
					s.add(t[j]-t[i], w, y[j]-y0, v[j])
				}
				weighted++
			}
			count++
			grew = true
		}
		if !grew {
			break
		}
		if h < ln.scales[next] && h < ln.maxHalf {
			continue
		}
		next++
		q := 3
		if ln.quarticFrom > 0 && h >= ln.quarticFrom {
			q = 5
		}
		// A window with fewer than q+2 samples of non-zero weight (the
		// others lie across an edge) leaves the fit at most one degree of
		// freedom: it is not judged, and grows on.
		if weighted < q+2 {
			continue
		}
		if !cur.solve(&s, q, float64(h)) {
			continue
		}
		b0 := cur.b[0]
		ev := covariance(&cur, &cur, &s.mv)
		// Against the raw value: Var(e − y0) = Var e + v0 − 2 g₀ v0.
		if vd := ev + v0 - 2*cur.g[0]*v0; b0*b0 > ln.threshold2*vd {
			break
		}
		if have {
			d := b0 - pe
			if vd := ev + pev - 2*covariance(&prev, &cur, &pmv); d*d > ln.threshold2*vd {
				break
			}
		}
		if ln.chiZ > 0 {
			// E[Σω(y−fit)²] ≈ v̄·(Σω − qΣω²/Σω), v̄ = Σωv/Σω.
			rss := s.myy
			for k := 0; k < q; k++ {
				rss -= cur.b[k] * s.my[k]
			}
			m0 := s.m[0]
			dof := m0 - float64(q)*s.mw2/m0
			if dof > 0.5 && rss*m0 > s.mwv*(dof+ln.chiZ*math.Sqrt(2*dof)) {
				break
			}
		}
		est, variance, width = y0+b0, ev, count
		pe, pev, pmv, prev, have = b0, ev, s.mv, cur, true
	}
	return
}
