package analysis

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"voxgamma/dicomio"
	"voxgamma/internal/parallel"
)

// Scale is a factor the evaluated dose is multiplied by before the
// comparison: a per-fraction dose compared with a plan total differs by the
// number of fractions, and is scaled only when the user says so, never
// guessed.
type Scale struct {
	// Factor multiplies the evaluated dose (when Fractions is false).
	Factor float64
	// Fractions takes the factor from the RT Plan: its number of
	// fractions planned (see Loaded.Plan).
	Fractions bool
	// Given is the option as the user wrote it, for messages.
	Given string
}

// IsZero reports whether no scaling was asked for.
func (s Scale) IsZero() bool { return !s.Fractions && s.Factor == 0 }

// ParseScale reads a --scale-evaluated value: "fractions", a factor above 0
// ("30", "0.5") or a reciprocal "1/N".
func ParseScale(v string) (Scale, error) {
	t := strings.ToLower(strings.TrimSpace(v))
	want := fmt.Errorf("--scale-evaluated %s: want fractions (the RT Plan's number of fractions), a factor above 0 such as 30, or 1/N such as 1/30", v)
	if t == "fractions" {
		return Scale{Fractions: true, Given: "--scale-evaluated fractions"}, nil
	}
	f := 0.0
	if num, den, ok := strings.Cut(t, "/"); ok {
		a, err1 := strconv.ParseFloat(strings.TrimSpace(num), 64)
		b, err2 := strconv.ParseFloat(strings.TrimSpace(den), 64)
		if err1 != nil || err2 != nil || !(b > 0) {
			return Scale{}, want
		}
		f = a / b
	} else {
		x, err := strconv.ParseFloat(t, 64)
		if err != nil {
			return Scale{}, want
		}
		f = x
	}
	if !(f > 0) || math.IsInf(f, 0) {
		return Scale{}, want
	}
	return Scale{Factor: f, Given: "--scale-evaluated " + strings.TrimSpace(v)}, nil
}

// ScaleSample is the part of the reference the dose ratio of
// [Prepared.DoseRatio] is taken over: the reference points at or above this
// fraction of the reference maximum (as dicomio.HighDoseFraction).
const ScaleSample = dicomio.HighDoseFraction

// meanChunk is how many reference voxels each part of doseMeans covers.
const meanChunk = 1 << 16

// doseMeans returns the mean reference and mean evaluated dose over the
// reference points at or above ScaleSample of the reference maximum that
// the evaluated dose covers, and how many points that is (0 when none). A
// uniform scale k of the evaluated dose makes their ratio exactly 1/k. The
// evaluated dose is sampled (trilinearly) at those points only, not
// resampled onto the whole reference grid.
func (p *Prepared) doseMeans() (ref, eval float64, n int) {
	var sr, se float64
	if p.Reference != nil {
		peak, at := p.Reference.Max()
		if at < 0 || !(peak > 0) {
			return 0, 0, 0
		}
		thr := float32(ScaleSample) * peak
		// Fixed parts of the grid on the cores; their sums are added in
		// order, so the means do not depend on the cores.
		data := p.Reference.Data
		type part struct {
			sr, se float64
			n      int
		}
		parts := make([]part, (len(data)+meanChunk-1)/meanChunk)
		parallel.Ranges(len(parts), 0, func(_, c0, c1 int) {
			for c := c0; c < c1; c++ {
				var pt part
				for i := c * meanChunk; i < min(len(data), (c+1)*meanChunk); i++ {
					r := data[i]
					if r < thr {
						continue
					}
					x, y, z := p.Reference.IJK(i)
					if e, ok := p.Evaluated.Sample(p.Reference.WorldOf(x, y, z)); ok && e == e {
						pt.sr += float64(r)
						pt.se += float64(float32(e)) // as a resampled grid would hold it
						pt.n++
					}
				}
				parts[c] = pt
			}
		})
		for _, pt := range parts {
			sr, se, n = sr+pt.sr, se+pt.se, n+pt.n
		}
	} else {
		peak := p.referenceMax()
		if !(peak > 0) {
			return 0, 0, 0
		}
		for _, pt := range p.Points {
			if pt.Dose < ScaleSample*peak {
				continue
			}
			if e, ok := p.Evaluated.Sample(pt.Pos); ok {
				sr += pt.Dose
				se += e
				n++
			}
		}
	}
	if n == 0 {
		return 0, 0, 0
	}
	return sr / float64(n), se / float64(n), n
}

// applyScale multiplies the evaluated dose by the factor asked for (the
// plan's number of fractions for Scale.Fractions), and refuses doses whose
// ratio is close to a whole number of 2 or more: a per-fraction dose
// against a plan total (or the reverse) is never compared silently, and the
// likely factor is named. The band (within 5 % of a whole number, as for
// the normalisation dose) is this tool's choice.
func (p *Prepared) applyScale(s Scale) error {
	factor, source := 1.0, ""
	switch {
	case s.Fractions:
		n, from, err := p.fractionsPlanned()
		if err != nil {
			return err
		}
		factor, source = float64(n), fmt.Sprintf("%s: %d fractions planned (%s)", s.Given, n, from)
	case s.Factor > 0:
		factor, source = s.Factor, s.Given
	}
	if factor != 1 {
		f32 := float32(factor)
		for i := range p.Evaluated.Data {
			p.Evaluated.Data[i] *= f32
		}
		p.scale, p.scaleSource = factor, source
		p.warnings = append(p.warnings, fmt.Sprintf("the evaluated dose was multiplied by %s before the comparison (%s)", num(factor), source))
	} else if source != "" {
		p.scale, p.scaleSource = 1, source
		p.notes = append(p.notes, fmt.Sprintf("the evaluated dose was left as read: %s gives a factor of 1", source))
	}
	mr, me, n := p.doseMeans()
	if n == 0 || !(mr > 0) || !(me > 0) {
		return nil
	}
	ratio := mr / me
	unit := " Gy"
	if p.EvaluatedInfo != nil && p.EvaluatedInfo.Relative() {
		unit = " (relative)"
	}
	means := fmt.Sprintf("mean %.4g%s against %.4g%s over the %d reference points at or above %g %% of the reference maximum", mr, unit, me, unit, n, ScaleSample*100)
	after := ""
	if factor != 1 {
		after = fmt.Sprintf(" after multiplying it by %s (%s)", num(factor), source)
	}
	labels := p.summationEvidence()
	cgy := ""
	if r := math.Max(ratio, 1/ratio); r >= 30 && r <= 300 {
		cgy = " (or a dose in cGy read as Gy)"
	}
	switch {
	case nearWhole(ratio):
		k, why := p.likelyFactor(ratio)
		return badInput("the reference is %.4g × the evaluated dose%s (%s)%s: a per-fraction evaluated dose against a plan-total reference%s? The likely factor is %d (%s). "+
			"If so, pass --scale-evaluated fractions (the RT Plan's number of fractions) or --scale-evaluated %d, the plan's number of fractions and not the ratio measured here, which the dose differences being checked move; voxgamma never scales a dose unasked",
			ratio, after, means, labels, cgy, k, why, k)
	case ratio < 1 && nearWhole(1/ratio):
		k, why := p.likelyFactor(1 / ratio)
		return badInput("the evaluated dose is %.4g × the reference%s (%s)%s: a plan-total evaluated dose against a per-fraction reference%s? The likely factor is 1/%d (%s). "+
			"If so, pass --scale-evaluated 1/%d with the plan's number of fractions; voxgamma never scales a dose unasked",
			1/ratio, after, means, labels, cgy, k, why, k)
	}
	return nil
}

// likelyFactor names the whole number a dose ratio r (≥ 2, near a whole
// number) most likely stands for: the RT Plan's number of fractions when
// the plan states one within 5 % of r, else the nearest whole number.
func (p *Prepared) likelyFactor(r float64) (int, string) {
	if n, _, err := p.fractionsPlanned(); err == nil && n >= 2 && math.Abs(r-float64(n)) <= 0.05*float64(n) {
		return n, fmt.Sprintf("the RT Plan %q plans %d fractions", p.Plan.Label, n)
	}
	return int(math.Round(r)), "the nearest whole number; the plan's number of fractions decides"
}

// summationEvidence says what the files' DoseSummationTypes say about
// sessions and courses, for the messages of applyScale; "" when they say
// nothing.
func (p *Prepared) summationEvidence() string {
	var parts []string
	for _, d := range []struct {
		role string
		info *dicomio.DoseInfo
	}{{"reference", p.ReferenceInfo}, {"evaluated dose", p.EvaluatedInfo}} {
		if d.info == nil || d.info.DoseSummationType == "" {
			continue
		}
		what := "the whole course of what it covers"
		if dicomio.PerSession(d.info.DoseSummationType) {
			what = "a single session (fraction)"
		}
		parts = append(parts, fmt.Sprintf("the %s is DoseSummationType %s, %s", d.role, d.info.DoseSummationType, what))
	}
	if len(parts) == 0 {
		return ""
	}
	return "; " + strings.Join(parts, ", ") + " (PS3.3 C.8.8.3)"
}

// num writes a number in its shortest form.
func num(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
