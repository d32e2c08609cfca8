package gamma

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"runtime/debug"
	"sync"
	"sync/atomic"

	"golang.org/x/sync/errgroup"

	"voxgamma/internal/fault"
	"voxgamma/kdtree"
	"voxgamma/volume"
)

// Method selects how the minimum over the evaluated distribution is found.
type Method int

const (
	// Fast: the exact minimum of the piecewise-linear field over every cell
	// that could still hold a smaller value, with k-d tree candidates at grid
	// nodes where the first bound is poor.
	Fast Method = iota
	// Exhaustive: every position of a fine lattice within the search
	// distance, no pruning, then finer lattices zooming in on the best
	// lattice positions. Slow; for audits and as the tests' oracle.
	Exhaustive
)

// String returns "fast" or "exhaustive".
func (m Method) String() string {
	if m == Exhaustive {
		return "exhaustive"
	}
	return "fast"
}

// Status says what happened to one reference point.
type Status uint8

const (
	// NotSelected: the caller's selection excluded the point.
	NotSelected Status = iota
	// BelowThreshold: the reference dose is below the low-dose threshold
	// (with local normalisation, also a reference dose of zero or less).
	BelowThreshold
	// Outside: the point lies outside the evaluated grid.
	Outside
	// Evaluated: Γ was found within the search distance.
	Evaluated
	// Capped: no Γ below Search/DTA exists within the search distance; Γ is
	// reported as Search/DTA and the point always fails.
	Capped
)

// String names the status.
func (s Status) String() string {
	switch s {
	case NotSelected:
		return "not selected"
	case BelowThreshold:
		return "below threshold"
	case Outside:
		return "outside evaluated grid"
	case Evaluated:
		return "evaluated"
	case Capped:
		return "capped at search distance"
	}
	return fmt.Sprintf("status(%d)", uint8(s))
}

// Point is a scattered reference point: a patient position (mm) and the
// dose measured there (Gy), e.g. one detector of an array.
type Point struct {
	Pos  [3]float64
	Dose float64
}

// Options tune how a comparison runs. Only Only and Method change which
// points are evaluated or how; Workers and Progress never change results.
type Options struct {
	// Workers is the number of goroutines; 0 means runtime.GOMAXPROCS(0).
	Workers int
	// Progress, when set, is called after each block of points with the
	// number of points done and the total to do. Calls are serialised but
	// come from worker goroutines.
	Progress func(done, total int)
	// Only, for a grid reference, restricts the evaluation to the voxels
	// set (nil: all voxels). It must have the reference grid's dimensions.
	Only *volume.Mask
	// Method selects the search; the default is Fast.
	Method Method
	// ExhaustiveStep is the lattice step (mm) of the exhaustive search; 0
	// means DTA/10 (Wendling et al., Med Phys 34 (2007) 1647: statistics
	// converge once the step is at most about Δd/10).
	ExhaustiveStep float64
	// Interpolation selects the evaluated dose between grid nodes; the
	// default (zero value) is CubicBSpline.
	Interpolation Interpolation
}

// Result is the outcome of one comparison.
type Result struct {
	// Criteria as applied: NormDose and Search are filled in.
	Criteria Criteria
	// Method used.
	Method Method
	// Interpolation of the evaluated dose used.
	Interpolation Interpolation
	// WorstTolerance is the largest amount by which a reported Γ may lie
	// above the interpolant's minimum, as the fast search certified it: 0
	// for the linear-simplex interpolant (solved exactly), 10⁻⁷ for the
	// others unless a point's search was cut short (Uncertified); 0 for
	// the exhaustive method, a sampling with no such certificate (an upper
	// bound of the minimum).
	WorstTolerance float64
	// Uncertified counts the points whose minimum the fast search could
	// certify only to a looser tolerance than 10⁻⁷ (at most
	// WorstTolerance).
	Uncertified int
	// Gamma holds Γ per reference point, in the reference's order (for a
	// grid, the order of its Data); NaN where the point was not evaluated.
	Gamma []float32
	// Status holds what happened to each reference point.
	Status []Status
	// Stats summarises all reference points.
	Stats Stats

	// workers is the comparison's worker count (Options.Workers), which
	// StatsOver uses too.
	workers int
}

// Passed reports whether reference point n was evaluated and passed
// (Γ ≤ 1, not capped).
func (r *Result) Passed(n int) bool { return r.Status[n] == Evaluated && r.Gamma[n] <= 1 }

// CompareGrids computes Γ for every voxel of the reference grid against the
// evaluated grid. The grids must be in the same patient coordinates (same
// frame of reference); they may differ in spacing, offset, extent and axis
// directions. The reference is not resampled.
func CompareGrids(ctx context.Context, ref, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	if opt.Only != nil && opt.Only.Dims() != ref.Dims() {
		return nil, fmt.Errorf("gamma: selection mask %v does not match the reference grid %v", opt.Only.Dims(), ref.Dims())
	}
	return compare(ctx, &gridSource{ref: ref}, eval, c, opt)
}

// ComparePoints computes Γ for scattered reference points (a detector array)
// against the evaluated grid, in the evaluated grid's patient coordinates.
func ComparePoints(ctx context.Context, pts []Point, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	if opt.Only != nil {
		return nil, errors.New("gamma: a selection mask applies to grid references only")
	}
	for n, p := range pts {
		for a := 0; a < 3; a++ {
			if math.IsNaN(p.Pos[a]) || math.IsInf(p.Pos[a], 0) {
				return nil, fmt.Errorf("gamma: reference point %d has a non-finite position %v", n, p.Pos)
			}
		}
		if math.IsNaN(p.Dose) || math.IsInf(p.Dose, 0) {
			return nil, fmt.Errorf("gamma: reference point %d has a non-finite dose", n)
		}
	}
	return compare(ctx, &pointSource{pts: pts}, eval, c, opt)
}

// source yields reference points in the evaluated field's frame.
type source interface {
	// bind prepares positions in field f's canonical frame.
	bind(f *field, dta float64)
	len() int
	// at returns point n's position (DTA units, canonical frame) and dose.
	at(n int) ([3]float64, float64)
	selected(n int, only *volume.Mask) bool
	maxDose() float64
}

type gridSource struct {
	ref *volume.Grid
	// tab[a][m] is the canonical coordinate (DTA units) along patient axis
	// a of reference index m along reference axis from[a].
	tab  [3][]float64
	from [3]int
}

func (s *gridSource) bind(f *field, dta float64) {
	ro := s.ref.Origin()
	for a := 0; a < 3; a++ {
		b := s.ref.AxisAlong(a)
		rb := s.ref.Axis(b)
		s.from[a] = b
		off := s.ref.Offsets(b)
		s.tab[a] = make([]float64, len(off))
		for m, o := range off {
			world := ro[a] + rb.Sign*o
			s.tab[a][m] = (world - f.origin[a]) / dta
		}
	}
}

func (s *gridSource) len() int { return len(s.ref.Data) }

func (s *gridSource) at(n int) ([3]float64, float64) {
	i, j, k := s.ref.IJK(n)
	ijk := [3]int{i, j, k}
	return [3]float64{s.tab[0][ijk[s.from[0]]], s.tab[1][ijk[s.from[1]]], s.tab[2][ijk[s.from[2]]]}, float64(s.ref.Data[n])
}

func (s *gridSource) selected(n int, only *volume.Mask) bool { return only == nil || only.Bits[n] }

func (s *gridSource) maxDose() float64 {
	m, at := s.ref.Max()
	if at < 0 {
		return math.NaN()
	}
	return float64(m)
}

type pointSource struct {
	pts []Point
	f   *field
	dta float64
}

func (s *pointSource) bind(f *field, dta float64) { s.f, s.dta = f, dta }

func (s *pointSource) len() int { return len(s.pts) }

func (s *pointSource) at(n int) ([3]float64, float64) {
	return s.f.local(s.pts[n].Pos, s.dta), s.pts[n].Dose
}

func (s *pointSource) selected(int, *volume.Mask) bool { return true }

func (s *pointSource) maxDose() float64 {
	m := math.NaN()
	for _, p := range s.pts {
		if !(p.Dose <= m) {
			m = p.Dose
		}
	}
	return m
}

// maxDoseRatio bounds dose/ΔD: beyond it Γ² could overflow float64.
const maxDoseRatio = 1e100

// blockSize is the number of reference points a worker takes at a time.
const blockSize = 4096

// compare computes Γ for every point of src against eval and summarises it.
func compare(ctx context.Context, src source, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	res, err := search(ctx, src, eval, c, opt)
	if err != nil {
		return nil, err
	}
	// The search's structures (the spline's coefficients and cell bounds,
	// the k-d tree: 6 bytes and more per evaluated voxel) are garbage now;
	// collecting them lets the statistics' copy of Γ reuse their memory
	// rather than raise the process's peak (BENCHMARKS.md, "Fast when it
	// matters").
	runtime.GC()
	res.Stats = res.StatsAll()
	return res, nil
}

// search computes Γ (without the statistics) for compare.
func search(ctx context.Context, src source, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	if opt.Interpolation < CubicBSpline || opt.Interpolation > LinearSimplex {
		return nil, fmt.Errorf("gamma: unknown interpolation %v", opt.Interpolation)
	}
	if c.NormDose == 0 {
		c.NormDose = src.maxDose()
		if !(c.NormDose > 0) {
			return nil, fmt.Errorf("gamma: the reference has no positive dose (maximum %g Gy) to normalise to", c.NormDose)
		}
	}
	c.Search = c.SearchRadius()
	// Every interpolant would carry a sample that is not a number into its
	// neighbours (the cubic spline's prefilter along whole lines), and no Γ
	// near it could be trusted: refuse the grid.
	if n, bad := firstNonFinite(eval.Data); bad {
		i, j, k := eval.IJK(n)
		return nil, fmt.Errorf("gamma: the evaluated dose has a sample that is not a finite number (%v) at voxel (%d, %d, %d): refusing to interpolate it", eval.Data[n], i, j, k)
	}
	// Γ's dose term is (D_e − D_r)/ΔD. A ΔD so small against the doses
	// that this term overflows float64 when squared (a normalisation dose of
	// 1e-300 Gy, say) gives no number at all: refuse it.
	if emax, _ := eval.Max(); math.Max(math.Abs(float64(emax)), src.maxDose())/(c.DosePercent/100*c.NormDose) > maxDoseRatio {
		return nil, fmt.Errorf("gamma: the dose criterion ΔD = %g %% of %.4g = %.4g is too small for doses up to %.4g: Γ cannot be computed (check the normalisation dose and the criteria)",
			c.DosePercent, c.NormDose, c.DosePercent/100*c.NormDose, math.Max(float64(emax), src.maxDose()))
	}
	if opt.ExhaustiveStep < 0 || math.IsNaN(opt.ExhaustiveStep) {
		return nil, fmt.Errorf("gamma: exhaustive step %g mm: want a positive step", opt.ExhaustiveStep)
	}
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}

	f, err := newField(eval, c.DTA, opt.Interpolation, workers)
	if err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	// The fast search reads the interpolant only: a caller that does not
	// keep the evaluated grid frees it now. Its pages go back to the
	// system at once: Γ and the status made next are placed in the heap's
	// lowest free pages, which need not be these, and the pages left
	// behind stayed resident for the rest of the search (42 MiB above the
	// first comparison's peak on the 256 × 256 × 160 noisy case of
	// BENCHMARKS.md).
	if opt.Method != Exhaustive && f.releaseSamples() {
		debug.FreeOSMemory()
	}
	src.bind(f, c.DTA)
	n := src.len()
	res := &Result{Criteria: c, Method: opt.Method, Interpolation: opt.Interpolation, Gamma: make([]float32, n), Status: make([]Status, n), workers: opt.Workers}
	threshold := c.ThresholdPercent / 100 * c.NormDose
	wGlobal := 1 / (c.DosePercent / 100 * c.NormDose)

	// classify sets point i's status (Evaluated: still to be searched).
	classify := func(i int) bool {
		res.Gamma[i] = float32(math.NaN())
		q, d := src.at(i)
		switch {
		case !src.selected(i, opt.Only):
			res.Status[i] = NotSelected
		case d < threshold || (c.Normalisation == Local && !(d > 0)):
			res.Status[i] = BelowThreshold
		case !f.inside(q):
			res.Status[i] = Outside
		default:
			res.Status[i] = Evaluated
			return true
		}
		return false
	}
	s := &searcher{f: f, sp: f.sp, rn: c.Search / c.DTA, treeFrom: treeFrom}
	weight := func(d float64) float64 {
		if c.Normalisation == Local {
			return 1 / (c.DosePercent / 100 * d)
		}
		return wGlobal
	}
	// finish stores the minimum Γ² found for point i.
	finish := func(i int, g2 float64) {
		if g2 >= s.rn*s.rn {
			res.Status[i] = Capped
			res.Gamma[i] = float32(s.rn)
		} else {
			res.Status[i] = Evaluated
			res.Gamma[i] = float32(math.Sqrt(g2))
		}
	}
	p := &pool{ctx: ctx, n: n, workers: workers, progress: opt.Progress}
	p.total, err = p.run(false, func(i int, _ *scratch) bool { return classify(i) })
	if err == nil && p.total > 0 && opt.Method == Exhaustive {
		step := opt.ExhaustiveStep
		if step == 0 {
			step = c.DTA / 10
		}
		s.latStep = step / c.DTA
		s.grid = f.canonicalGrid()
		s.dta = c.DTA
		_, err = p.run(true, func(i int, sc *scratch) bool {
			if res.Status[i] != Evaluated {
				return false
			}
			q, d := src.at(i)
			finish(i, s.exhaustive(q, d, weight(d)))
			return true
		})
	} else if err == nil && p.total > 0 {
		// Pass 1: each point from its home (the cell holding it, and for a
		// tensor-product interpolant the local minimum Newton's method
		// reaches from it), then, where that bound already passes, the
		// search that settles the minimum. A tensor-product point failing
		// at home starts again from the best offset of its neighbour (the
		// last point of the same block settled, when near: neighbouring
		// minima are coherent) and is settled here too, so that a failing
		// region is settled point after point. Points failing at home
		// with no such neighbour (a block's first, a row's first above
		// the threshold, every linear-simplex point) keep the bound as Γ²
		// in Gamma and are marked for the k-d tree.
		_, err = p.run(true, func(i int, sc *scratch) bool {
			if res.Status[i] != Evaluated {
				return false
			}
			q, d := src.at(i)
			w := weight(d)
			// Only a point of the same block may lend its offset: blocks
			// are fixed, whatever worker takes them, so Γ does not depend
			// on the worker count.
			block := i / blockSize
			var b2 float64
			if s.sp != nil {
				s.tensorHome(&sc.pt, q, d, w)
				b2 = sc.pt.best2
				if b2 > s.treeFrom && sc.warm && sc.warmBlock == block && dist2(q, sc.warmQ) <= warmReach*warmReach {
					s.warmStart(&sc.pt, sc.warmOff)
					b2 = 0 // settled here, from the neighbour's offset
				}
			} else {
				b2 = s.home(q, d, w)
			}
			if b2 > s.treeFrom {
				res.Gamma[i] = float32(b2)
				res.Status[i] = needsTree
				return false
			}
			if s.sp != nil {
				s.certify(&sc.pt, &sc.ts)
				sc.record(&sc.pt)
				b2 = sc.pt.best2
				sc.warm, sc.warmBlock, sc.warmQ = true, block, q
				for a := 0; a < 3; a++ {
					sc.warmOff[a] = sc.pt.p[a] - q[a]
				}
			} else {
				b2 = s.rest(q, d, w, b2, false, sc)
			}
			finish(i, b2)
			return true
		})
		if err == nil {
			// The tree covers the evaluated nodes within the search
			// distance of the marked points only.
			s.buildTree(src, res.Status, wGlobal)
			// Pass 2: the marked points, from the tree's nearest node and
			// then every cell that could beat the bound.
			_, err = p.run(true, func(i int, sc *scratch) bool {
				if res.Status[i] != needsTree {
					return false
				}
				q, d := src.at(i)
				w := weight(d)
				if s.sp != nil {
					s.tensorHome(&sc.pt, q, d, w)
					s.treeSeed(&sc.pt)
					s.certify(&sc.pt, &sc.ts)
					sc.record(&sc.pt)
					finish(i, sc.pt.best2)
				} else {
					finish(i, s.rest(q, d, w, float64(res.Gamma[i]), true, sc))
				}
				return true
			})
		}
	}
	for _, sc := range p.scratches {
		res.Uncertified += sc.uncertified
		res.WorstTolerance = math.Max(res.WorstTolerance, sc.worstGap)
	}
	if s.sp != nil && opt.Method == Fast {
		res.WorstTolerance = math.Max(res.WorstTolerance, certTol)
	}
	if err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	return res, nil
}

// maxSorted is how many candidate cells the search sorts by lower bound;
// beyond that, cells are minimised in scan order (still exact, less pruned).
const maxSorted = 64

// scratch holds one worker's candidate cells: their lower bounds, indices
// and corner doses, and their order by lower bound. It is reused from point
// to point, so the search allocates and clears nothing per point.
type scratch struct {
	lb      [maxSorted]float64
	ds2     [maxSorted]float64
	cell    [maxSorted][3]int32
	corners [maxSorted][8]float64
	order   [maxSorted]uint8

	// The tensor-product search: the point's state and the worker's
	// candidate heap and box stack.
	pt tpoint
	ts tscratch
	// warm is set when warmQ and warmOff hold the last point this worker
	// settled, in block warmBlock, and the offset of its minimum from it.
	warm      bool
	warmBlock int
	warmQ     [3]float64
	warmOff   [3]float64
	// uncertified counts the points whose minimum could be certified only
	// to a looser tolerance than certTol; worstGap is the loosest.
	uncertified int
	worstGap    float64
}

// record adds point pt's certification to the worker's tally.
func (sc *scratch) record(pt *tpoint) {
	if pt.gap > certTol {
		sc.uncertified++
		sc.worstGap = math.Max(sc.worstGap, pt.gap)
	}
}

// searcher holds what the per-point search reads; it is shared read-only.
type searcher struct {
	f  *field
	sp *spline // the tensor-product interpolant; nil for linear-simplex
	rn float64 // search distance in DTA units

	// Fast method: k-d tree over the evaluated nodes near the points whose
	// bound after the home cell exceeds treeFrom (Γ², DTA units); nodes[i]
	// is the grid position of the tree's point i.
	tree     *kdtree.Tree
	nodes    []int32
	treeFrom float64

	// Exhaustive method.
	grid    *volume.Grid
	dta     float64
	latStep float64
}

// warmReach is how near (DTA units) the last point settled must be for a
// point failing at home to start again from its minimum's offset.
const warmReach = 1.5

func dist2(a, b [3]float64) float64 {
	dx, dy, dz := a[0]-b[0], a[1]-b[1], a[2]-b[2]
	return dx*dx + dy*dy + dz*dz
}

// needsTree marks, between the passes of the fast search, a point whose
// bound after its home cell is above treeFrom. It never leaves compare.
const needsTree Status = 255

// treeFrom is the Γ² above which the bound from a point's home cell is
// tightened with the k-d tree. Below it the bound spans only the home cell's
// near neighbours, and building and querying the tree costs more than it
// saves (measured on the benchmark cases: see BENCHMARKS.md); above it (a
// point that fails at its home cell) the search ball can hold thousands of
// cells, and the tree's node bound shrinks it.
const treeFrom = 1.0

// pool runs a function over all reference points in fixed blocks on a
// bounded number of goroutines. Each block writes only its own points'
// slots, so results do not depend on scheduling.
type pool struct {
	ctx      context.Context
	n        int
	workers  int
	progress func(done, total int)
	total    int
	// done counts the points evaluated so far by the runs that report.
	done int
	// scratches are the worker memories of every run, for their tallies.
	scratches []*scratch
}

// run calls fn for every point; fn reports whether it evaluated the point
// (for progress, reported when report is set). It returns how many points
// fn evaluated. Each worker goroutine takes the next block from a shared
// counter and keeps one scratch for all its blocks.
func (p *pool) run(report bool, fn func(i int, sc *scratch) bool) (int, error) {
	var mu sync.Mutex
	var next atomic.Int64
	done := 0
	if report {
		done = p.done
	}
	blocks := (p.n + blockSize - 1) / blockSize
	g, gctx := errgroup.WithContext(p.ctx)
	for w := 0; w < min(p.workers, blocks); w++ {
		g.Go(func() (err error) {
			// A panic in a worker would end the whole process, whatever
			// the caller's recovery: turn it into this comparison's error.
			defer func() {
				if r := recover(); r != nil {
					err = fmt.Errorf("internal error in the gamma search: %v", r)
				}
			}()
			sc := new(scratch)
			mu.Lock()
			p.scratches = append(p.scratches, sc)
			mu.Unlock()
			for {
				b := int(next.Add(1)) - 1
				if b >= blocks {
					return nil
				}
				fault.Point(fault.GammaWorker)
				if err := gctx.Err(); err != nil {
					return err
				}
				count := 0
				for i := b * blockSize; i < min((b+1)*blockSize, p.n); i++ {
					if fn(i, sc) {
						count++
					}
				}
				mu.Lock()
				done += count
				if report && p.progress != nil {
					p.progress(done, p.total)
				}
				mu.Unlock()
			}
		})
	}
	err := g.Wait()
	if report {
		n := done - p.done
		p.done = done
		return n, err
	}
	return done, err
}

// buildTree builds the k-d tree over the evaluated nodes within the search
// distance of the points marked needsTree: the nodes of the marked points'
// cells, dilated along each axis by the search distance (a box, slightly
// larger than the sphere).
func (s *searcher) buildTree(src source, status []Status, wHint float64) {
	f := s.f
	s.nodes = nil
	// One bit a node: a byte each would be a tenth of the evaluated
	// grid's size again, at the engine's peak.
	mask := newBitset(f.n[0] * f.n[1] * f.n[2])
	// Seeds, and the box that holds them and their dilation.
	lo := [3]int{f.n[0], f.n[1], f.n[2]}
	hi := [3]int{-1, -1, -1}
	for i, st := range status {
		if st != needsTree {
			continue
		}
		q, _ := src.at(i)
		var c [3]int
		for a := 0; a < 3; a++ {
			c[a] = f.cell(a, q[a])
			lo[a], hi[a] = min(lo[a], c[a]), max(hi[a], c[a])
		}
		mask.set(c[0] + f.n[0]*(c[1]+f.n[1]*c[2]))
	}
	if hi[0] < 0 {
		s.tree = kdtree.Build(nil, wHint)
		return
	}
	// The seed is each point's lower cell corner; the dilation covers the
	// cell's far corner plus the search distance.
	var span [3]int
	for a := 0; a < 3; a++ {
		// At most the grid's length: a search distance beyond the grid
		// (--search 1e300) must not overflow the conversion to int.
		span[a] = int(math.Min(math.Ceil(s.rn/f.minStep(a)), float64(f.n[a]))) + 1
		lo[a] = max(0, lo[a]-span[a])
		hi[a] = min(f.n[a]-1, hi[a]+span[a])
	}
	for a := 0; a < 3; a++ {
		dilate(mask, f.n, lo, hi, a, span[a])
	}
	count := 0
	for k := lo[2]; k <= hi[2]; k++ {
		for j := lo[1]; j <= hi[1]; j++ {
			row := f.n[0] * (j + f.n[1]*k)
			for i := lo[0]; i <= hi[0]; i++ {
				if mask.has(row + i) {
					count++
				}
			}
		}
	}
	s.nodes = make([]int32, 0, count)
	for k := lo[2]; k <= hi[2]; k++ {
		for j := lo[1]; j <= hi[1]; j++ {
			row := f.n[0] * (j + f.n[1]*k)
			for i := lo[0]; i <= hi[0]; i++ {
				if n := row + i; mask.has(n) {
					s.nodes = append(s.nodes, int32(n))
				}
			}
		}
	}
	// The tree asks for each node's coordinates once, in order: they are
	// computed as it asks rather than held in a list of their own beside
	// the tree (16 bytes a node, at the engine's peak).
	s.tree = kdtree.BuildFunc(len(s.nodes), func(m int) [4]float32 {
		n := int(s.nodes[m])
		i, j, k := n%f.n[0], n/f.n[0]%f.n[1], n/(f.n[0]*f.n[1])
		return [4]float32{float32(f.off[0][i]), float32(f.off[1][j]), float32(f.off[2][k]), float32(f.nodeDose(n, [3]int{i, j, k}))}
	}, wHint)
}

// bitset is a set of small non-negative integers, one bit each.
type bitset []uint64

// newBitset returns an empty set for the integers 0 … n−1.
func newBitset(n int) bitset { return make(bitset, (n+63)/64) }

// has reports whether i is in the set.
func (b bitset) has(i int) bool { return b[i>>6]&(1<<(i&63)) != 0 }

// set adds i to the set.
func (b bitset) set(i int) { b[i>>6] |= 1 << (i & 63) }

// dilate sets every element of mask (a grid of dims n) within span samples
// of a set element along axis a, within the box lo..hi (inclusive), in one
// pass per line: the steps since the last set element seen from either side.
func dilate(mask bitset, n, lo, hi [3]int, a, span int) {
	stride := [3]int{1, n[0], n[0] * n[1]}
	// The two axes other than a index the lines.
	b, c := (a+1)%3, (a+2)%3
	out := make([]bool, hi[a]-lo[a]+1)
	for ib := lo[b]; ib <= hi[b]; ib++ {
		for ic := lo[c]; ic <= hi[c]; ic++ {
			base := ib*stride[b] + ic*stride[c]
			last := -span - 1
			for i := lo[a]; i <= hi[a]; i++ {
				if mask.has(base + i*stride[a]) {
					last = i
				}
				out[i-lo[a]] = i-last <= span
			}
			last = hi[a] + span + 1
			for i := hi[a]; i >= lo[a]; i-- {
				if mask.has(base + i*stride[a]) {
					last = i
				}
				if last-i <= span {
					out[i-lo[a]] = true
				}
			}
			// out holds every element already set: setting is enough.
			for i := lo[a]; i <= hi[a]; i++ {
				if out[i-lo[a]] {
					mask.set(base + i*stride[a])
				}
			}
		}
	}
}

// home returns an upper bound of min Γ² for the reference point at q (DTA
// units) with dose dr and dose weight w = 1/ΔD: the smaller of the value at
// q itself and the exact minimum over the cell holding q, which usually is
// the minimum.
func (s *searcher) home(q [3]float64, dr, w float64) float64 {
	f := s.f
	var c [3]int
	var t [3]float64
	for a := 0; a < 3; a++ {
		c[a] = f.cell(a, q[a])
		if f.n[a] > 1 {
			lo, hi := f.off[a][c[a]], f.off[a][c[a]+1]
			t[a] = clamp01((q[a] - lo) / (hi - lo))
		}
	}
	var corners [8]float64
	f.corners(c[0], c[1], c[2], &corners)
	e0 := plValue(&corners, t)
	d0 := w * (e0 - dr)
	best2 := d0 * d0
	if best2 == 0 || doseGap2(&corners, dr, w) >= best2 {
		return best2
	}
	return f.cellMin(c[0], c[1], c[2], &corners, q, dr, w, 0, best2)
}

// rest finishes the search from the bound best2 that home returned: the
// nearest evaluated node in (x, y, z, D) space (Yuan and Chen, Med Phys 37
// (2010) 4868) when useTree, then, exactly, every other cell within the
// bound (and the search distance) in increasing order of its lower bound,
// until a bound cannot beat the minimum found. It returns min Γ², or a value
// ≥ rn² when the minimum within the search distance is not below rn.
func (s *searcher) rest(q [3]float64, dr, w, best2 float64, useTree bool, sc *scratch) float64 {
	f := s.f
	if best2 == 0 {
		return 0
	}
	if useTree {
		// The node's exact value is recomputed in float64 from the grid:
		// the tree stores float32.
		if idx, _, ok := s.tree.Nearest([4]float64{q[0], q[1], q[2], dr}, w, best2); ok {
			n := int(s.nodes[idx])
			i := n % f.n[0]
			j := (n / f.n[0]) % f.n[1]
			k := n / (f.n[0] * f.n[1])
			dx, dy, dz := f.off[0][i]-q[0], f.off[1][j]-q[1], f.off[2][k]-q[2]
			dd := w * (float64(f.data[n]) - dr)
			if v := dx*dx + dy*dy + dz*dz + dd*dd; v < best2 {
				best2 = v
			}
		}
	}
	var home [3]int
	for a := 0; a < 3; a++ {
		home[a] = f.cell(a, q[a])
	}
	rho := math.Min(math.Sqrt(best2), s.rn)
	var c0, c1 [3]int
	for a := 0; a < 3; a++ {
		c0[a] = f.cell(a, q[a]-rho)
		c1[a] = f.cell(a, q[a]+rho)
	}
	var c [8]float64
	nc := 0
	for ck := c0[2]; ck <= c1[2]; ck++ {
		dz := f.slabDist2(2, ck, q[2])
		if dz >= best2 {
			continue
		}
		for cj := c0[1]; cj <= c1[1]; cj++ {
			dyz := dz + f.slabDist2(1, cj, q[1])
			if dyz >= best2 {
				continue
			}
			for ci := c0[0]; ci <= c1[0]; ci++ {
				if ci == home[0] && cj == home[1] && ck == home[2] {
					continue
				}
				ds2 := dyz + f.slabDist2(0, ci, q[0])
				if ds2 >= best2 {
					continue
				}
				f.corners(ci, cj, ck, &c)
				lb := ds2 + doseGap2(&c, dr, w)
				if lb >= best2 {
					continue
				}
				if nc == maxSorted {
					// Too many to sort: take this one at once.
					best2 = f.cellMin(ci, cj, ck, &c, q, dr, w, ds2, best2)
					continue
				}
				// Keep the candidate; its rank goes into the sorted order.
				sc.lb[nc], sc.ds2[nc], sc.cell[nc], sc.corners[nc] = lb, ds2, [3]int32{int32(ci), int32(cj), int32(ck)}, c
				at := nc
				for at > 0 && sc.lb[sc.order[at-1]] > lb {
					sc.order[at] = sc.order[at-1]
					at--
				}
				sc.order[at] = uint8(nc)
				nc++
			}
		}
	}
	for _, i := range sc.order[:nc] {
		if sc.lb[i] >= best2 {
			break
		}
		cl := sc.cell[i]
		best2 = f.cellMin(int(cl[0]), int(cl[1]), int(cl[2]), &sc.corners[i], q, dr, w, sc.ds2[i], best2)
	}
	return best2
}
