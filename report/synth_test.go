package report

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"math"
	"slices"
	"testing"

	"voxgamma/gamma"
	"voxgamma/result"
	"voxgamma/volume"
)

// Invented test data: a phantom, not a patient. Every number of the
// synthetic result is computed from the synthetic grids, as the real
// pipeline would.

type synthOptions struct {
	Dims      [3]int
	Spacing   [3]float64
	Direction [3][3]float64
	// Fail adds a failing region (and a capped one); without it every
	// point passes.
	Fail bool
	// ExtraROIs adds that many small spherical organs at risk, for cases
	// with as many structures as a clinical plan.
	ExtraROIs int
}

type synthShape struct {
	name, kind, interpreted string
	color                   [3]uint8
	inside                  func(p [3]float64) bool
}

const (
	synthNormDose = 60.0
	synthDTA      = 2.0
	synthSearch   = 5.0
)

func synthShapes() []synthShape {
	sphere := func(c [3]float64, r float64) func([3]float64) bool {
		return func(p [3]float64) bool {
			d := 0.0
			for a := range p {
				d += (p[a] - c[a]) * (p[a] - c[a])
			}
			return d <= r*r
		}
	}
	return []synthShape{
		{"PTV_60", "target", "PTV", [3]uint8{220, 30, 30}, sphere([3]float64{0, 0, 0}, 25)},
		{"SPINAL_CORD", "oar", "ORGAN", [3]uint8{255, 255, 0}, func(p [3]float64) bool {
			return (p[0])*(p[0])+(p[1]-45)*(p[1]-45) <= 36 && math.Abs(p[2]) <= 60
		}},
		{"PAROTID_L", "oar", "ORGAN", [3]uint8{0, 150, 255}, sphere([3]float64{40, 0, 20}, 12)},
		{"BODY", "body", "EXTERNAL", [3]uint8{0, 190, 0}, func(p [3]float64) bool {
			return p[0]*p[0]/(140*140)+p[1]*p[1]/(110*110)+p[2]*p[2]/(115*115) <= 1
		}},
	}
}

func synthDose(p [3]float64) float64 {
	r := math.Sqrt(p[0]*p[0] + p[1]*p[1] + p[2]*p[2])
	return math.Max(0, synthNormDose/(1+math.Pow(r/30, 8))+8*math.Exp(-(r/80)*(r/80))+0.02*p[0])
}

var (
	synthFailCentre   = [3]float64{18, -10, 6}
	synthCappedCentre = [3]float64{-30, 15, -10}
)

func dist(a, b [3]float64) float64 {
	return math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
}

// synthGrid returns an empty grid centred on the patient origin.
func synthGrid(t testing.TB, dims [3]int, spacing [3]float64, dir [3][3]float64) *volume.Grid {
	t.Helper()
	var origin [3]float64
	for a := 0; a < 3; a++ {
		for p := 0; p < 3; p++ {
			origin[p] -= dir[a][p] * float64(dims[a]-1) * spacing[a] / 2
		}
	}
	g, err := volume.NewUniform(dims, origin, spacing, dir)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// synthCase builds a page: reference dose, Γ grid, masks and a result whose
// numbers are computed from them.
func synthCase(t testing.TB, o synthOptions) Page {
	t.Helper()
	if o.Direction == ([3][3]float64{}) {
		o.Direction = volume.Identity
	}
	ref := synthGrid(t, o.Dims, o.Spacing, o.Direction)
	gam := ref.EmptyLike()
	eval := ref.EmptyLike()
	gcap := float32(synthSearch / synthDTA)
	below := 0
	pos := make([][3]float64, ref.Len())
	for n := range ref.Data {
		i, j, k := ref.IJK(n)
		p := ref.WorldOf(i, j, k)
		pos[n] = p
		d := synthDose(p)
		ref.Data[n] = float32(d)
		eval.Data[n] = float32(d * 1.015)
		if d < 0.1*synthNormDose {
			gam.Data[n] = float32(math.NaN())
			below++
			continue
		}
		g := 0.15 + 0.6*(0.5+0.5*math.Sin(p[0]/7)*math.Cos(p[1]/9))
		if o.Fail {
			if r := dist(p, synthFailCentre); r < 8 {
				g = 1.3 + 0.8*(1-r/8)
				eval.Data[n] = float32(d * 1.08)
			}
			if dist(p, synthCappedCentre) < 3 {
				g = float64(gcap)
			}
		}
		gam.Data[n] = float32(g)
	}
	voxelCC := o.Spacing[0] * o.Spacing[1] * o.Spacing[2] / 1000

	r := &result.Result{
		SchemaVersion: result.SchemaVersion,
		Version:       "0.0.0-test",
		Caution:       result.Caution,
		Criteria: result.Criteria{
			DosePercent: 3, DTAmm: synthDTA, Normalisation: "global", NormDoseGy: synthNormDose,
			NormDoseSource: "prescription", ThresholdPercent: 10, SearchMM: synthSearch, Method: "fast",
			Label: "3%/2mm global",
		},
		Protocol: map[string]any{"name": "synthetic test protocol", "target_pass_rate": 95.0, "oar_pass_rate": 90.0},
		Warnings: []string{"Synthetic data: an invented phantom, not a patient."},
		Notes:    []string{"A voxel counts inside an ROI when its centre is inside."},
		Inputs: []result.Input{
			synthInput("reference", "ref/RD.phantom.dcm", o),
			synthInput("evaluated", "eval/RD.recalc.dcm", o),
			{Role: "structures", Path: "ref/RS.phantom.dcm", SHA256: sha("structures"), Modality: "RTSTRUCT",
				FrameOfReferenceUID: "2.25.81985529216486895", PatientID: "PHANTOM-001", PatientName: "PHANTOM^HEAD"},
		},
		Run: result.Run{Started: "2001-01-01T00:00:00Z", Seconds: 1.25, GammaSeconds: 0.75, Workers: 2},
	}
	all := func(int) bool { return true }
	r.Overall = synthStats(gam, all)
	r.Overall.BelowThreshold = below

	var page Page
	page.Result, page.Reference, page.Gamma = r, ref, gam
	page.Difference = ref.EmptyLike()
	for n := range ref.Data {
		page.Difference.Data[n] = eval.Data[n] - ref.Data[n]
	}
	page.Generated = "2001-01-01"
	masks := map[string]*volume.Mask{}
	shapes := synthShapes()
	for e := 0; e < o.ExtraROIs; e++ {
		a := 2 * math.Pi * float64(e) / float64(o.ExtraROIs)
		c := [3]float64{55 * math.Cos(a), 55 * math.Sin(a), float64(e%5-2) * 15}
		shapes = append(shapes, synthShape{
			name: fmt.Sprintf("OAR_%02d", e+1), kind: "oar", interpreted: "ORGAN",
			color:  [3]uint8{uint8(40 * e % 256), uint8(255 - 30*e%256), uint8(90 + 50*e%166)},
			inside: func(p [3]float64) bool { return dist(p, c) <= 9 },
		})
	}
	for _, s := range shapes {
		m := volume.NewMask(ref)
		for n := range m.Bits {
			m.Bits[n] = s.inside(pos[n])
		}
		masks[s.name] = m
		page.ROIs = append(page.ROIs, PageROI{Name: s.name, Mask: m})
		roi := result.ROI{
			Name: s.name, Number: len(r.ROIs) + 1, Kind: s.kind, InterpretedType: s.interpreted,
			Source: "structure set", Voxels: m.Count(), Status: "evaluated",
		}
		roi.VolumeCC = float64(roi.Voxels) * voxelCC
		roi.GammaStats = synthStats(gam, func(n int) bool { return m.Bits[n] })
		failing := 0
		var sum [3]float64
		for n, in := range m.Bits {
			if in && gam.Data[n] > 1 {
				failing++
				for a := range sum {
					sum[a] += pos[n][a]
				}
			}
		}
		roi.FailingVolumeCC = float64(failing) * voxelCC
		if failing > 0 {
			roi.WorstCentroidMM = &[3]float64{sum[0] / float64(failing), sum[1] / float64(failing), sum[2] / float64(failing)}
		}
		roi.DVH = synthDVH(ref, eval, m)
		r.ROIs = append(r.ROIs, roi)
	}
	// A derived ROI without a mask on the page, and one that could not be
	// evaluated at all.
	hi := volume.Threshold(ref, float32(0.95*synthNormDose))
	derived := result.ROI{Name: "isodose 95 %", Kind: "other", Source: "isodose", Voxels: hi.Count(), Status: "evaluated"}
	derived.VolumeCC = float64(derived.Voxels) * voxelCC
	derived.GammaStats = synthStats(gam, func(n int) bool { return hi.Bits[n] })
	derived.DVH = synthDVH(ref, eval, hi)
	r.ROIs = append(r.ROIs, derived)
	r.ROIs = append(r.ROIs, result.ROI{Name: "MARKER_1", Number: 9, Kind: "other", InterpretedType: "MARKER",
		Source: "structure set", Status: "points only", GammaStats: result.GammaStats{PassRateText: result.FormatPercent(math.NaN(), 1)}})

	if o.Fail {
		for _, c := range []struct {
			centre [3]float64
			radius float64
		}{{synthFailCentre, 8}, {synthCappedCentre, 3}} {
			var sum [3]float64
			count, gmax := 0, 0.0
			touched := map[string]bool{}
			for n, v := range gam.Data {
				if v > 1 && dist(pos[n], c.centre) < c.radius {
					count++
					for a := range sum {
						sum[a] += pos[n][a]
					}
					gmax = math.Max(gmax, float64(v))
					for name, m := range masks {
						if m.Bits[n] {
							touched[name] = true
						}
					}
				}
			}
			if count == 0 {
				continue
			}
			cl := result.Cluster{VolumeCC: float64(count) * voxelCC, Voxels: count, GammaMax: gmax}
			for a := range sum {
				cl.CentroidMM[a] = sum[a] / float64(count)
			}
			for _, s := range synthShapes() {
				if touched[s.name] {
					cl.ROIs = append(cl.ROIs, s.name)
				}
			}
			r.Clusters = append(r.Clusters, cl)
		}
	}

	addRule := func(rule, level, subject string, value *float64, limit float64) {
		ro := result.RuleOutcome{Rule: rule, Level: level, Subject: subject, Value: value, Limit: limit}
		ro.Met = value != nil && *value >= limit
		ro.Outcome = result.NotMet
		if ro.Met {
			ro.Outcome = result.Met
		}
		if value == nil {
			ro.Reason = "nothing evaluated"
		}
		r.Rules = append(r.Rules, ro)
	}
	addRule("overall: pass rate ≥ 95 %", "tolerance", "overall", r.Overall.PassRate, 95)
	for _, roi := range r.ROIs {
		switch roi.Kind {
		case "target":
			addRule("every target: pass rate ≥ 95 %", "tolerance", roi.Name, roi.PassRate, 95)
			addRule("every target: pass rate ≥ 99.5 %", "action", roi.Name, roi.PassRate, 99.5)
		case "oar":
			addRule("every organ at risk: pass rate ≥ 90 %", "tolerance", roi.Name, roi.PassRate, 90)
		}
	}
	r.Verdict = "pass"
	for _, ro := range r.Rules {
		if !ro.Met {
			r.Verdict = "fail"
		}
	}
	return page
}

func sha(s string) string {
	h := sha256.Sum256([]byte(s))
	return hex.EncodeToString(h[:])
}

func synthInput(role, path string, o synthOptions) result.Input {
	return result.Input{
		Role: role, Path: path, SHA256: sha(role), Modality: "RTDOSE",
		SOPInstanceUID: "2.25.1" + role, FrameOfReferenceUID: "2.25.81985529216486895",
		PatientID: "PHANTOM-001", PatientName: "PHANTOM^HEAD",
		DoseUnits: "GY", DoseType: "PHYSICAL", DoseSummationType: "PLAN",
		Grid: &result.GridInfo{Dims: o.Dims, SpacingMM: o.Spacing, Direction: o.Direction, UniformFrames: true, MaxDoseGy: synthNormDose},
	}
}

// synthStats summarises Γ over the non-NaN voxels selected by in.
func synthStats(g *volume.Grid, in func(n int) bool) result.GammaStats {
	var v []float64
	passed, capped := 0, 0
	gcap := float32(synthSearch / synthDTA)
	for n, x := range g.Data {
		if x != x || !in(n) {
			continue
		}
		v = append(v, float64(x))
		if x == gcap {
			capped++
		} else if x <= 1 {
			passed++
		}
	}
	s := result.GammaStats{Evaluated: len(v), Passed: passed, Capped: capped}
	if len(v) == 0 {
		s.PassRateText = result.FormatPercent(math.NaN(), 1)
		return s
	}
	slices.Sort(v)
	sum, above := 0.0, 0
	for _, x := range v {
		sum += x
		if x > 1.5 {
			above++
		}
	}
	n := float64(len(v))
	rate := 100 * float64(passed) / n
	s.PassRate = result.Ptr(rate)
	s.PassRateText = result.FormatPercent(rate, 1)
	s.GammaMean = result.Ptr(sum / n)
	s.GammaMedian = result.Ptr(gamma.Percentile(v, 50))
	s.GammaP95 = result.Ptr(gamma.Percentile(v, 95))
	s.GammaP99 = result.Ptr(gamma.Percentile(v, 99))
	s.GammaMax = result.Ptr(v[len(v)-1])
	s.AboveOneHalfPercent = result.Ptr(100 * float64(above) / n)
	return s
}

func synthDVH(ref, eval *volume.Grid, m *volume.Mask) *result.DVHPair {
	var rd, ed []float64
	for n, in := range m.Bits {
		if in {
			rd = append(rd, float64(ref.Data[n]))
			ed = append(ed, float64(eval.Data[n]))
		}
	}
	if len(rd) == 0 {
		return nil
	}
	stats := func(d []float64) result.DVHStats {
		s := slices.Clone(d)
		slices.Sort(s)
		slices.Reverse(s) // hottest first
		at := func(pct float64) *float64 {
			i := int(math.Ceil(pct/100*float64(len(s)))) - 1
			return result.Ptr(s[max(i, 0)])
		}
		sum := 0.0
		for _, x := range s {
			sum += x
		}
		return result.DVHStats{
			MeanGy: result.Ptr(sum / float64(len(s))), MaxGy: result.Ptr(s[0]), MinGy: result.Ptr(s[len(s)-1]),
			D98Gy: at(98), D95Gy: at(95), D50Gy: at(50), D2Gy: at(2),
		}
	}
	p := &result.DVHPair{Reference: stats(rd), Evaluated: stats(ed)}
	diff := func(a, b *float64, pct bool) *float64 {
		if pct {
			if *a == 0 {
				return nil
			}
			return result.Ptr(100 * (*b - *a) / *a)
		}
		return result.Ptr(*b - *a)
	}
	for _, pct := range []bool{false, true} {
		d := result.DVHStats{
			MeanGy: diff(p.Reference.MeanGy, p.Evaluated.MeanGy, pct),
			MaxGy:  diff(p.Reference.MaxGy, p.Evaluated.MaxGy, pct),
			MinGy:  diff(p.Reference.MinGy, p.Evaluated.MinGy, pct),
			D98Gy:  diff(p.Reference.D98Gy, p.Evaluated.D98Gy, pct),
			D95Gy:  diff(p.Reference.D95Gy, p.Evaluated.D95Gy, pct),
			D50Gy:  diff(p.Reference.D50Gy, p.Evaluated.D50Gy, pct),
			D2Gy:   diff(p.Reference.D2Gy, p.Evaluated.D2Gy, pct),
		}
		if pct {
			p.DifferencePercent = d
		} else {
			p.DifferenceGy = d
		}
	}
	top := math.Max(*p.Reference.MaxGy, *p.Evaluated.MaxGy) * 1.05
	c := &result.DVHCurves{}
	for dose := 0.0; dose <= top; dose += 0.25 {
		c.DoseGy = append(c.DoseGy, dose)
		c.ReferencePercent = append(c.ReferencePercent, percentAtLeast(rd, dose))
		c.EvaluatedPercent = append(c.EvaluatedPercent, percentAtLeast(ed, dose))
	}
	p.Curves = c
	return p
}

func percentAtLeast(d []float64, dose float64) float64 {
	n := 0
	for _, x := range d {
		if x >= dose {
			n++
		}
	}
	return 100 * float64(n) / float64(len(d))
}
