package analysis

import (
	"context"
	"fmt"
	"math"
	"runtime/debug"
	"runtime/metrics"
	"strings"

	"voxgamma/gamma"
	"voxgamma/roi"
	"voxgamma/structure"
	"voxgamma/volume"
)

// MaxSubGridPoints bounds the points of one ROI's sub-grid.
const MaxSubGridPoints = 50_000_000

// What one ROI's sub-grid comparison takes (bytes), on top of what the
// comparison already holds: per point its position and dose (32), Γ and
// its status (5), its copy for the statistics (4) and a margin of 7 for
// the k-d tree's nodes near it; per evaluated voxel a second spline of the
// evaluated dose (4), its cell bounds (2) and the tree's margin (3), as in
// job.EstimateBytes.
const (
	subGridBytesPerPoint          = 32 + 4 + 1 + 4 + 7
	subGridBytesPerEvaluatedVoxel = 4 + 2 + 3
)

// subGridPlan is one ROI's sub-grid of reference points: the lattice of
// the given step over the ROI's box and the ROI rasterised on it.
type subGridPlan struct {
	step    float64
	lattice *volume.Grid // positions only: its Data is nil
	inside  *volume.Runs // the lattice positions inside the ROI
}

// planSubGrids lays out the sub-grid of every ROI asked for, before any
// comparison runs, so that a step asking for too many points or for more
// memory than the budget holds is refused at once rather than after the
// comparison (which the ROI's sub-grid follows). The plans are kept for
// Run.
func (p *Prepared) planSubGrids(s Settings) error {
	want := map[string]bool{}
	for _, name := range s.SubGridROIs {
		want[strings.ToLower(name)] = true
	}
	if len(want) == 0 {
		return nil
	}
	for _, reg := range p.regions {
		src := p.sources[reg]
		if src == nil || !want[strings.ToLower(reg.Name)] || reg.Centres.Len() == 0 {
			continue
		}
		pl, err := p.subGridPlan(s, src, reg)
		if err != nil {
			return err
		}
		if err := checkSubGridMemory(src.Name, pl.step, pl.inside.Len(), p.Evaluated); err != nil {
			return err
		}
	}
	return nil
}

// subGridPlan returns the sub-grid of ROI src (rasterised on the reference
// grid as reg) at the step of s, laid out by planSubGrids or now. The
// point count is checked before anything is allocated; the memory budget
// is checked by its callers, each at its own moment.
func (p *Prepared) subGridPlan(s Settings, src *structure.ROI, reg *roi.Region) (*subGridPlan, error) {
	step := s.SubGridStep
	if step <= 0 {
		step = 0.5
	}
	if pl := p.subGrids[reg]; pl != nil && pl.step == step {
		return pl, nil
	}
	ref := p.Reference
	lo := ref.WorldOf(reg.Box.Lo[0], reg.Box.Lo[1], reg.Box.Lo[2])
	hi := ref.WorldOf(reg.Box.Hi[0], reg.Box.Hi[1], reg.Box.Hi[2])
	var origin [3]float64
	var dims [3]int
	// The point count is computed in float64 and checked before any int
	// conversion or allocation: a step of 1e-12 mm asks for 10^40 points,
	// which overflows int and once reached Go's fatal "out of memory".
	count := 1.0
	var n [3]float64
	for a := 0; a < 3; a++ {
		l, h := math.Min(lo[a], hi[a]), math.Max(lo[a], hi[a])
		// Half a reference voxel beyond the box on each side.
		sp, _ := ref.Spacing(ref.Axis(a).Patient)
		l -= sp / 2
		h += sp / 2
		origin[a] = l
		n[a] = math.Floor((h-l)/step) + 1
		count *= n[a]
		if n[a] < 2 {
			return nil, fmt.Errorf("%w: --subgrid-step %g mm: the sub-grid of ROI %q (%.4g mm across along patient %c) would have a single point along that axis; use a smaller step",
				ErrBadInput, step, src.Name, h-l, "xyz"[a])
		}
	}
	if !(count <= MaxSubGridPoints) {
		return nil, fmt.Errorf("%w: --subgrid-step %g mm: ROI %q would need %.3g sub-grid points, more than the %d allowed; use a larger step",
			ErrBadInput, step, src.Name, count, MaxSubGridPoints)
	}
	for a := 0; a < 3; a++ {
		dims[a] = int(n[a])
	}
	lattice, err := volume.NewUniformGeometry(dims, origin, [3]float64{step, step, step}, volume.Identity)
	if err != nil {
		return nil, err
	}
	z, err := roi.NewRasteriser(lattice, s.Raster)
	if err != nil {
		return nil, err
	}
	fine, err := z.Rasterise(src, reg.Kind)
	if err != nil {
		return nil, err
	}
	pl := &subGridPlan{step: step, lattice: lattice, inside: &fine.Centres}
	if p.subGrids == nil {
		p.subGrids = map[*roi.Region]*subGridPlan{}
	}
	p.subGrids[reg] = pl
	return pl, nil
}

// checkSubGridMemory refuses a sub-grid of points points against eval when
// it would take the process beyond its memory budget: the Go runtime's
// soft memory limit, which every command sets to its budget (--max-memory,
// or a share of the available memory). The sub-grid's need is not in the
// estimate made from the dose headers before the comparison, which cannot
// know the ROIs. It is checked twice: when the sub-grid is laid out,
// before the comparison (against the memory then in use), and when its
// comparison starts (against the memory in use then, which the
// comparison's results have grown). No limit set (a library caller), no
// check.
func checkSubGridMemory(name string, step float64, points int, eval *volume.Grid) error {
	limit := debug.SetMemoryLimit(-1)
	if limit == math.MaxInt64 {
		return nil
	}
	need := int64(points)*subGridBytesPerPoint + int64(len(eval.Data))*subGridBytesPerEvaluatedVoxel
	sample := []metrics.Sample{{Name: "/gc/heap/live:bytes"}}
	metrics.Read(sample)
	var live int64
	if sample[0].Value.Kind() == metrics.KindUint64 {
		live = int64(sample[0].Value.Uint64())
	}
	if live+need <= limit {
		return nil
	}
	return fmt.Errorf("%w: --subgrid-step %g mm: ROI %q on its sub-grid (%d points) needs about %s of memory more, with %s in use, against a budget of %s (--max-memory, or 70 %% of the available memory); use a larger step or raise --max-memory",
		ErrBadInput, step, name, points, mib(need), mib(live), mib(limit))
}

// mib formats a byte count in MiB.
func mib(b int64) string { return fmt.Sprintf("%.0f MiB", float64(b)/(1<<20)) }

// subGrid evaluates ROI src on a finer grid of reference points inside it,
// against the evaluated dose eval: the ROI is rasterised on a lattice of
// the given step over its bounding box (subGridPlan), and the reference
// dose is interpolated at every centre inside.
func (p *Prepared) subGrid(ctx context.Context, s Settings, src *structure.ROI, reg *roi.Region, c gamma.Criteria, eval *volume.Grid) (gamma.Stats, float64, error) {
	pl, err := p.subGridPlan(s, src, reg)
	if err != nil {
		return gamma.Stats{}, 0, err
	}
	if err := checkSubGridMemory(src.Name, pl.step, pl.inside.Len(), eval); err != nil {
		return gamma.Stats{}, 0, err
	}
	ref := p.Reference
	pts := make([]gamma.Point, 0, pl.inside.Len())
	for n := range pl.inside.All() {
		i, j, k := pl.lattice.IJK(int(n))
		w := pl.lattice.WorldOf(i, j, k)
		d, ok := ref.Sample(w)
		if !ok {
			continue
		}
		pts = append(pts, gamma.Point{Pos: w, Dose: d})
	}
	if len(pts) == 0 {
		return gamma.Stats{}, 0, fmt.Errorf("%w: ROI %q has no sub-grid point inside the reference grid", ErrBadInput, src.Name)
	}
	gr, err := gamma.ComparePoints(ctx, pts, eval, c, gamma.Options{Workers: s.Workers, Method: s.Method, Interpolation: s.Interpolation})
	if err != nil {
		return gamma.Stats{}, 0, err
	}
	return gr.Stats, pl.step, nil
}
