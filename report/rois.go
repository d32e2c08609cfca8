package report

import (
	"encoding/json"
	"image/color"
	"math"
	"sort"
	"strconv"
	"strings"

	"voxgamma/result"
	"voxgamma/volume"
)

// outcome is how a rule's outcome is shown: a CSS class and a mark in a
// symbol and words.
type outcome struct {
	class, mark string
	notMet      bool
}

// outcomeOf reads a rule's outcome: met, not met, or not applicable (which
// reads as such, never as met). A result without Outcome (written before
// outcomes had three values) is read from Met.
func outcomeOf(r result.RuleOutcome) outcome {
	state := r.Outcome
	if state == "" {
		state = result.NotMet
		if r.Met {
			state = result.Met
		}
	}
	return outcome{class: outcomeClass(state), mark: outcomeMark(state), notMet: state == result.NotMet}
}

// metMark is the word-and-symbol mark of a rule outcome.
func metMark(r result.RuleOutcome) string { return outcomeOf(r).mark }

// outcomeMark is the word-and-symbol mark of a rule outcome: not
// applicable reads as such, never as met.
func outcomeMark(o result.RuleState) string {
	switch o {
	case result.Met:
		return "✔ met"
	case result.NotApplicable:
		return "– not applicable"
	}
	return "✘ not met"
}

// outcomeClass is the CSS class of a rule outcome.
func outcomeClass(o result.RuleState) string {
	switch o {
	case result.Met:
		return "met"
	case result.NotApplicable:
		return "na"
	}
	return "notmet"
}

// statusText is an ROI's status with its detail.
func statusText(roi result.ROI) string {
	s := string(roi.Status)
	if roi.StatusDetail != "" {
		s += " (" + roi.StatusDetail + ")"
	}
	return s
}

// levelRank orders rule levels by seriousness: an action level not met is
// worse than a tolerance level not met (TG-218's action limit is where a
// plan is not delivered as it is); other levels rank with tolerance.
func levelRank(level string) int {
	if strings.EqualFold(strings.TrimSpace(level), "action") {
		return 2
	}
	return 1
}

// roiGoto is where the slice browser centres for an ROI.
type roiGoto struct {
	at     [3]float64
	extent float64
}

// extraMask is a mask given for an ROI the result does not list.
type extraMask struct {
	mask  *PageROI
	color color.RGBA
}

// roiLayout is how the page lists the result's ROIs: which rows, in which
// order, with which colours and masks.
type roiLayout struct {
	// order lists the result indices of the ROIs shown, failing ROIs first
	// (the worst first), then the others in result order.
	order []int
	// worst is the ROI the per-ROI panel opens on.
	worst int
	// id, color, mask, failing, goTo are per result index.
	id      []string
	color   []color.RGBA
	mask    []*PageROI
	failing []bool
	goTo    map[int]roiGoto
	// merged[i] lists the derived ROIs shown in i's row because their
	// numbers are i's (the derived "body" of a single BODY).
	merged map[int][]int
	// hidden marks ROIs shown in another's row.
	hidden []bool
	// extra are masks of ROIs the result does not list.
	extra []extraMask
}

// layoutROIs decides the page's ROI rows. A derived ROI (source "derived")
// whose numbers (voxels, volume, Γ statistics, DVH) equal those of an ROI
// of the structure set of the same kind is shown in that ROI's row, not
// again (the derived "body" of a structure set with one BODY is BODY).
// Failing ROIs come first, ordered by the most serious level of their
// rules not met (action before tolerance), then by the number of rules not
// met, then by pass rate (lowest first); the others follow in result
// order. The panel opens on the first failing ROI or, when none fails, on
// the evaluated ROI with the lowest pass rate (targets first).
func layoutROIs(r *result.Result, ref *volume.Grid, masks []PageROI) *roiLayout {
	n := len(r.ROIs)
	lay := &roiLayout{
		id: make([]string, n), color: make([]color.RGBA, n), mask: make([]*PageROI, n),
		failing: make([]bool, n), hidden: make([]bool, n),
		goTo: map[int]roiGoto{}, merged: map[int][]int{},
	}
	taken := make([]bool, len(masks))
	for i, roi := range r.ROIs {
		lay.id[i] = "roi-" + strconv.Itoa(i)
		for j := range masks {
			if !taken[j] && masks[j].Name == roi.Name {
				taken[j] = true
				lay.mask[i] = &masks[j]
				break
			}
		}
	}
	// Duplicates.
	for i, roi := range r.ROIs {
		if roi.Source != "derived" {
			continue
		}
		for j, other := range r.ROIs {
			if j != i && other.Source == "structure set" && other.Kind == roi.Kind && !lay.hidden[j] && sameNumbers(roi, other) {
				lay.hidden[i] = true
				lay.merged[j] = append(lay.merged[j], i)
				break
			}
		}
	}
	// Colours in result order, skipping merged rows, so that a colour
	// belongs to an ROI whatever its outcome.
	k := 0
	for i := range r.ROIs {
		if lay.hidden[i] {
			continue
		}
		lay.color[i] = roiColor(k)
		k++
	}
	for j := range masks {
		if !taken[j] {
			lay.extra = append(lay.extra, extraMask{mask: &masks[j], color: roiColor(k)})
			k++
		}
	}

	// Rule outcomes per ROI.
	type badness struct{ level, count int }
	bad := make([]badness, n)
	for i, roi := range r.ROIs {
		subjects := []string{roi.Name}
		for _, j := range lay.merged[i] {
			subjects = append(subjects, r.ROIs[j].Name)
		}
		for _, rule := range r.Rules {
			if !outcomeOf(rule).notMet {
				continue
			}
			for _, s := range subjects {
				if rule.Subject == s {
					bad[i].count++
					bad[i].level = max(bad[i].level, levelRank(rule.Level))
				}
			}
		}
		lay.failing[i] = bad[i].count > 0
	}
	rate := func(i int) float64 {
		if p := r.ROIs[i].PassRate; p != nil {
			return *p
		}
		return math.Inf(1)
	}
	var failing, rest []int
	for i := range r.ROIs {
		switch {
		case lay.hidden[i]:
		case lay.failing[i]:
			failing = append(failing, i)
		default:
			rest = append(rest, i)
		}
	}
	sort.SliceStable(failing, func(a, b int) bool {
		x, y := failing[a], failing[b]
		if bad[x].level != bad[y].level {
			return bad[x].level > bad[y].level
		}
		if bad[x].count != bad[y].count {
			return bad[x].count > bad[y].count
		}
		return rate(x) < rate(y)
	})
	lay.order = append(failing, rest...)
	switch {
	case len(failing) > 0:
		lay.worst = failing[0]
	case len(rest) > 0:
		lay.worst = rest[0]
		for _, i := range rest {
			w := lay.worst
			ti, tw := r.ROIs[i].Kind == "target", r.ROIs[w].Kind == "target"
			if (ti && !tw) || (ti == tw && rate(i) < rate(w)) {
				lay.worst = i
			}
		}
	}

	// Where the slice browser goes for each ROI: its failing voxels'
	// centroid, else the centre of its mask.
	for i, roi := range r.ROIs {
		if roi.WorstCentroidMM != nil {
			lay.goTo[i] = roiGoto{at: *roi.WorstCentroidMM, extent: clusterExtent(roi.FailingVolumeCC)}
			continue
		}
		if pr := lay.mask[i]; pr != nil {
			if at, ext, ok := maskCentre(ref, pr.Mask); ok {
				lay.goTo[i] = roiGoto{at: at, extent: ext}
			}
		}
	}
	return lay
}

// sameNumbers reports whether two ROIs have the same numbers in every
// column the page shows (and the same DVH).
func sameNumbers(a, b result.ROI) bool {
	if a.Voxels != b.Voxels || a.VolumeCC != b.VolumeCC || a.FailingVolumeCC != b.FailingVolumeCC || statusText(a) != statusText(b) {
		return false
	}
	ja, err1 := json.Marshal([]any{a.GammaStats, a.DVH, a.WorstCentroidMM, a.SubGridMM, a.CoveredPercent})
	jb, err2 := json.Marshal([]any{b.GammaStats, b.DVH, b.WorstCentroidMM, b.SubGridMM, b.CoveredPercent})
	return err1 == nil && err2 == nil && string(ja) == string(jb)
}

// maskCentre returns the centre of the voxel of m (on grid g) nearest to its centroid
// (a centroid may lie outside a curved ROI), and the largest extent of its
// bounding box (mm, at least 20), or false for an empty mask.
func maskCentre(g *volume.Grid, m *volume.Mask) ([3]float64, float64, bool) {
	var sum [3]float64
	count := 0
	lo := [3]float64{math.Inf(1), math.Inf(1), math.Inf(1)}
	hi := [3]float64{math.Inf(-1), math.Inf(-1), math.Inf(-1)}
	for n, in := range m.Bits {
		if !in {
			continue
		}
		i, j, k := g.IJK(n)
		p := g.WorldOf(i, j, k)
		for a := 0; a < 3; a++ {
			sum[a] += p[a]
			lo[a], hi[a] = math.Min(lo[a], p[a]), math.Max(hi[a], p[a])
		}
		count++
	}
	if count == 0 {
		return [3]float64{}, 0, false
	}
	var c [3]float64
	for a := range c {
		c[a] = sum[a] / float64(count)
	}
	best, bestD := [3]float64{}, math.Inf(1)
	for n, in := range m.Bits {
		if !in {
			continue
		}
		i, j, k := g.IJK(n)
		p := g.WorldOf(i, j, k)
		d := (p[0]-c[0])*(p[0]-c[0]) + (p[1]-c[1])*(p[1]-c[1]) + (p[2]-c[2])*(p[2]-c[2])
		if d < bestD {
			best, bestD = p, d
		}
	}
	ext := 20.0
	for a := 0; a < 3; a++ {
		ext = math.Max(ext, 1.2*(hi[a]-lo[a]))
	}
	return best, ext, true
}
