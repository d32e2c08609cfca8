package report

import (
	"bytes"
	"math"
	"strings"
	"testing"

	"voxgamma/result"
	"voxgamma/volume"
)

func gridOf(t *testing.T, values []float32) *volume.Grid {
	t.Helper()
	g, err := volume.NewUniform([3]int{len(values), 1, 1}, [3]float64{}, [3]float64{1, 1, 1}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	copy(g.Data, values)
	return g
}

func TestHistogramBins(t *testing.T) {
	nan := float32(math.NaN())
	above1 := math.Nextafter32(1, 2)
	// Each value with the bin it must land in (bin b holds (b/10, (b+1)/10],
	// bin 0 also 0). Worked out by hand.
	values := []struct {
		v   float32
		bin int
	}{
		{0, 0},
		{0.0625, 0},
		{0.1, 0},      // float32(0.1) = 0.10000000149: still on the edge of bin 0
		{0.100001, 1}, // clearly above 0.1
		{0.25, 2},     // (0.2, 0.3]
		{0.3, 2},      // float32(0.3) = 0.30000001: on the edge, (0.2, 0.3]
		{0.5, 4},      // (0.4, 0.5]
		{1, 9},        // passes: (0.9, 1.0]
		{above1, 10},  // the first float32 above 1 fails: (1.0, 1.1]
		{1.5, 14},     // (1.4, 1.5]
		{2.5, 24},     // the cap (5 mm / 2 mm): last of 25 bins
		{3.0, 24},     // above the cap: clamped into the last bin
		{nan, -1},     // not evaluated: not counted
		{nan, -1},
	}
	var data []float32
	want := make([]int, 25)
	total, failing := 0, 0
	for _, v := range values {
		data = append(data, v.v)
		if v.bin >= 0 {
			want[v.bin]++
			total++
			if v.v > 1 {
				failing++
			}
		}
	}
	g := gridOf(t, data)
	gcap := gammaCap(result.Criteria{DTAmm: 2, SearchMM: 5}, g)
	if gcap != 2.5 {
		t.Fatalf("cap = %g, want 2.5", gcap)
	}
	h, err := histogramOf(g, nil, gcap)
	if err != nil {
		t.Fatal(err)
	}
	if len(h.Counts) != 25 {
		t.Fatalf("%d bins, want 25", len(h.Counts))
	}
	for b := range want {
		if h.Counts[b] != want[b] {
			t.Errorf("bin %d (%.1f, %.1f]: %d values, want %d", b, float64(b)/10, float64(b+1)/10, h.Counts[b], want[b])
		}
	}
	if h.Total != total || h.Failing != failing {
		t.Errorf("total %d failing %d, want %d and %d", h.Total, h.Failing, total, failing)
	}
	passing := 0
	for b := 0; b < 10; b++ {
		passing += h.Counts[b]
	}
	if passing != total-failing {
		t.Errorf("bins up to Γ = 1 hold %d values, want the %d passing ones", passing, total-failing)
	}

	// With a mask: only the voxels set count.
	m := volume.NewMask(g)
	m.Bits[0], m.Bits[8], m.Bits[12] = true, true, true // 0, first above 1, NaN
	hm, err := histogramOf(g, m, gcap)
	if err != nil {
		t.Fatal(err)
	}
	if hm.Total != 2 || hm.Counts[0] != 1 || hm.Counts[10] != 1 || hm.Failing != 1 {
		t.Errorf("masked histogram: total %d, bin 0 %d, bin 10 %d, failing %d; want 2, 1, 1, 1", hm.Total, hm.Counts[0], hm.Counts[10], hm.Failing)
	}
}

func TestHistogramCapNotMultipleOfBin(t *testing.T) {
	// Search 10 mm, DTA 3 mm: cap 3.33, bins up to 3.4; a capped point
	// (stored as float32(10/3)) lands in the last bin.
	gcap := gammaCap(result.Criteria{DTAmm: 3, SearchMM: 10}, gridOf(t, []float32{0}))
	h := newGammaHistogram(gcap)
	if len(h.Counts) != 34 {
		t.Fatalf("%d bins, want 34", len(h.Counts))
	}
	h.add(float32(10.0 / 3.0))
	if h.Counts[33] != 1 {
		t.Errorf("capped value not in the last bin: %v", h.Counts)
	}
	// Criteria without a search distance: the grid's maximum stands in.
	if c := gammaCap(result.Criteria{}, gridOf(t, []float32{0.2, 2.26, float32(math.NaN())})); math.Abs(c-2.26) > 1e-6 {
		t.Errorf("cap without criteria = %g, want 2.26", c)
	}
}

func TestMaskDimensionMismatch(t *testing.T) {
	g := gridOf(t, []float32{1, 2, 3})
	other := gridOf(t, []float32{1, 2})
	if _, err := histogramOf(g, volume.NewMask(other), 2); err == nil {
		t.Fatal("histogram over a mask of other dimensions: no error")
	}
}

func TestPageRefusesInconsistentInputs(t *testing.T) {
	base := func() Page {
		return synthCase(t, synthOptions{Dims: [3]int{20, 18, 16}, Spacing: [3]float64{4, 4, 4}, Fail: true})
	}

	p := base()
	p.Result.Overall.Evaluated++ // the result is not from this Γ grid
	var buf bytes.Buffer
	err := RenderHTML(&buf, p)
	if err == nil || !strings.Contains(err.Error(), "not from the same comparison") {
		t.Errorf("Γ grid and result disagree: error %v", err)
	}
	if buf.Len() != 0 {
		t.Errorf("a refused page wrote %d bytes", buf.Len())
	}

	p = base()
	p.Gamma = gridOf(t, []float32{1})
	if err := RenderHTML(&buf, p); err == nil || !strings.Contains(err.Error(), "geometry") {
		t.Errorf("Γ grid of another geometry: error %v", err)
	}

	p = base()
	p.ROIs[0].Mask = volume.NewMask(gridOf(t, []float32{1}))
	if err := RenderHTML(&buf, p); err == nil || !strings.Contains(err.Error(), p.ROIs[0].Name) {
		t.Errorf("mask of other dimensions: error %v", err)
	}

	p = base()
	p.Reference = nil
	if err := RenderHTML(&buf, p); err == nil {
		t.Error("no reference grid: no error")
	}
	if err := RenderHTML(&buf, Page{}); err == nil {
		t.Error("no result: no error")
	}
}
