package gamma

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"

	"golang.org/x/sync/errgroup"

	"voxgamma/kdtree"
	"voxgamma/volume"
)

// Method selects how the minimum over the evaluated distribution is found.
type Method int

const (
	// Fast: k-d tree candidates at grid nodes, then the exact minimum of the
	// trilinear field in every cell that could still hold a smaller value.
	Fast Method = iota
	// Exhaustive: every position of a fine lattice within the search
	// distance, no pruning, then a local pattern search around the best
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
}

// Result is the outcome of one comparison.
type Result struct {
	// Criteria as applied: NormDose and Search are filled in.
	Criteria Criteria
	// Method used.
	Method Method
	// Gamma holds Γ per reference point, in the reference's order (for a
	// grid, the order of its Data); NaN where the point was not evaluated.
	Gamma []float32
	// Status holds what happened to each reference point.
	Status []Status
	// Stats summarises all reference points.
	Stats Stats
}

// Passed reports whether reference point n was evaluated and passed
// (Γ ≤ 1, not capped).
func (r *Result) Passed(n int) bool { return r.Status[n] == Evaluated && r.Gamma[n] <= 1 }

// ErrNothingAboveThreshold is returned when no reference point reaches the
// low-dose threshold.
var ErrNothingAboveThreshold = errors.New("no reference point is at or above the low-dose threshold")

// CompareGrids computes Γ for every voxel of the reference grid against the
// evaluated grid. The grids must be in the same patient coordinates (same
// frame of reference); they may differ in spacing, offset, extent and axis
// directions. The reference is not resampled.
func CompareGrids(ctx context.Context, ref, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	if opt.Only != nil && opt.Only.Dims() != ref.Dims() {
		return nil, fmt.Errorf("gamma: selection mask %v does not match the reference grid %v", opt.Only.Dims(), ref.Dims())
	}
	src := newGridSource(ref, eval, c.DTA)
	return compare(ctx, src, eval, c, opt)
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
	return compare(ctx, &pointSource{pts: pts, eval: eval, dta: c.DTA}, eval, c, opt)
}

// source yields reference points in the evaluated grid's working frame.
type source interface {
	len() int
	// at returns point n's position (DTA units, evaluated local frame) and dose.
	at(n int) ([3]float64, float64)
	selected(n int, only *volume.Mask) bool
	maxDose() float64
}

type gridSource struct {
	ref *volume.Grid
	// tab[a][m] is the evaluated local coordinate (DTA units) along eval
	// axis a of reference index m along reference axis from[a].
	tab  [3][]float64
	from [3]int
}

func newGridSource(ref, eval *volume.Grid, dta float64) *gridSource {
	s := &gridSource{ref: ref}
	ro, eo := ref.Origin(), eval.Origin()
	for a := 0; a < 3; a++ {
		ea := eval.Axis(a)
		for b := 0; b < 3; b++ {
			rb := ref.Axis(b)
			if rb.Patient != ea.Patient {
				continue
			}
			s.from[a] = b
			off := ref.Offsets(b)
			s.tab[a] = make([]float64, len(off))
			for m, o := range off {
				world := ro[ea.Patient] + rb.Sign*o
				s.tab[a][m] = ea.Sign * (world - eo[ea.Patient]) / dta
			}
		}
	}
	return s
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
	pts  []Point
	eval *volume.Grid
	dta  float64
}

func (s *pointSource) len() int { return len(s.pts) }

func (s *pointSource) at(n int) ([3]float64, float64) {
	u := s.eval.WorldToLocal(s.pts[n].Pos)
	return [3]float64{u[0] / s.dta, u[1] / s.dta, u[2] / s.dta}, s.pts[n].Dose
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

// blockSize is the number of reference points a worker takes at a time.
const blockSize = 4096

func compare(ctx context.Context, src source, eval *volume.Grid, c Criteria, opt Options) (*Result, error) {
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	if c.NormDose == 0 {
		c.NormDose = src.maxDose()
		if !(c.NormDose > 0) {
			return nil, fmt.Errorf("gamma: the reference has no positive dose (maximum %g Gy) to normalise to", c.NormDose)
		}
	}
	c.Search = c.SearchRadius()
	if opt.ExhaustiveStep < 0 || math.IsNaN(opt.ExhaustiveStep) {
		return nil, fmt.Errorf("gamma: exhaustive step %g mm: want a positive step", opt.ExhaustiveStep)
	}
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}

	f := newField(eval, c.DTA)
	n := src.len()
	res := &Result{Criteria: c, Method: opt.Method, Gamma: make([]float32, n), Status: make([]Status, n)}
	threshold := c.ThresholdPercent / 100 * c.NormDose
	wGlobal := 1 / (c.DosePercent / 100 * c.NormDose)

	// Classify every point and find the box of those to search around.
	todo := 0
	boxLo := [3]float64{math.Inf(1), math.Inf(1), math.Inf(1)}
	boxHi := [3]float64{math.Inf(-1), math.Inf(-1), math.Inf(-1)}
	for i := 0; i < n; i++ {
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
			res.Status[i] = Evaluated // provisional: to be searched
			todo++
			for a := 0; a < 3; a++ {
				boxLo[a] = math.Min(boxLo[a], q[a])
				boxHi[a] = math.Max(boxHi[a], q[a])
			}
		}
	}
	if todo == 0 {
		res.Stats = res.StatsOver(nil)
		return res, nil
	}

	s := &searcher{f: f, rn: c.Search / c.DTA}
	if opt.Method == Exhaustive {
		step := opt.ExhaustiveStep
		if step == 0 {
			step = c.DTA / 10
		}
		s.latStep = step / c.DTA
		s.grid = eval
		s.dta = c.DTA
	} else {
		s.buildTree(boxLo, boxHi, wGlobal)
	}

	// Blocks of point indices; each block's results land in its own slots,
	// so the output does not depend on scheduling.
	blocks := (n + blockSize - 1) / blockSize
	var mu sync.Mutex
	done := 0
	g, gctx := errgroup.WithContext(ctx)
	g.SetLimit(workers)
	for b := 0; b < blocks; b++ {
		if gctx.Err() != nil {
			break
		}
		lo, hi := b*blockSize, min((b+1)*blockSize, n)
		g.Go(func() error {
			if err := gctx.Err(); err != nil {
				return err
			}
			count := 0
			for i := lo; i < hi; i++ {
				if res.Status[i] != Evaluated {
					continue
				}
				q, d := src.at(i)
				w := wGlobal
				if c.Normalisation == Local {
					w = 1 / (c.DosePercent / 100 * d)
				}
				var g2 float64
				if opt.Method == Exhaustive {
					g2 = s.exhaustive(q, d, w)
				} else {
					g2 = s.search(q, d, w)
				}
				if g2 >= s.rn*s.rn {
					res.Status[i] = Capped
					res.Gamma[i] = float32(s.rn)
				} else {
					res.Gamma[i] = float32(math.Sqrt(g2))
				}
				count++
			}
			if opt.Progress != nil {
				mu.Lock()
				done += count
				opt.Progress(done, todo)
				mu.Unlock()
			}
			return nil
		})
	}
	if err := g.Wait(); err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("gamma: %w", err)
	}
	res.Stats = res.StatsOver(nil)
	return res, nil
}

// maxSorted is how many candidate cells the search sorts by lower bound;
// beyond that, cells are minimised in scan order (still exact, less pruned).
const maxSorted = 64

type candidate struct {
	lb float64
	c  [3]int32
}

// searcher holds what the per-point search reads; it is shared read-only.
type searcher struct {
	f  *field
	rn float64 // search distance in DTA units

	// Fast method: k-d tree over the evaluated nodes in a box.
	tree   *kdtree.Tree
	boxMin [3]int
	boxN   [3]int

	// Exhaustive method.
	grid    *volume.Grid
	dta     float64
	latStep float64
}

// buildTree builds the k-d tree over the evaluated nodes within the search
// distance of the box [lo, hi] (DTA units) holding every point to search.
func (s *searcher) buildTree(lo, hi [3]float64, wHint float64) {
	f := s.f
	for a := 0; a < 3; a++ {
		first := f.cell(a, lo[a]-s.rn)
		last := f.cell(a, hi[a]+s.rn) + 1
		if last > f.n[a]-1 {
			last = f.n[a] - 1
		}
		s.boxMin[a] = first
		s.boxN[a] = last - first + 1
	}
	count := s.boxN[0] * s.boxN[1] * s.boxN[2]
	coords := make([]float32, 0, 4*count)
	for k := 0; k < s.boxN[2]; k++ {
		kk := s.boxMin[2] + k
		for j := 0; j < s.boxN[1]; j++ {
			jj := s.boxMin[1] + j
			row := f.n[0] * (jj + f.n[1]*kk)
			for i := 0; i < s.boxN[0]; i++ {
				ii := s.boxMin[0] + i
				coords = append(coords, float32(f.off[0][ii]), float32(f.off[1][jj]), float32(f.off[2][kk]), f.data[row+ii])
			}
		}
	}
	s.tree = kdtree.Build(coords, wHint)
}

// search returns min Γ² for the reference point at q (DTA units) with dose
// dr and dose weight w = 1/ΔD, or a value ≥ rn² when the minimum within the
// search distance is not below rn.
func (s *searcher) search(q [3]float64, dr, w float64) float64 {
	f := s.f
	// Upper bound 1: the evaluated dose at the reference position itself.
	e0 := f.sample(q)
	best2 := w * w * (e0 - dr) * (e0 - dr)
	if best2 == 0 {
		return 0
	}
	// Upper bound 2: the nearest evaluated node in (x, y, z, D) space
	// (Yuan and Chen, Med Phys 37 (2010) 4868). Its exact value is
	// recomputed in float64 from the grid: the tree stores float32.
	if idx, _, ok := s.tree.Nearest([4]float64{q[0], q[1], q[2], dr}, w, best2); ok {
		bi := idx % s.boxN[0]
		bj := (idx / s.boxN[0]) % s.boxN[1]
		bk := idx / (s.boxN[0] * s.boxN[1])
		i, j, k := s.boxMin[0]+bi, s.boxMin[1]+bj, s.boxMin[2]+bk
		dx, dy, dz := f.off[0][i]-q[0], f.off[1][j]-q[1], f.off[2][k]-q[2]
		dd := w * (float64(f.data[i+f.n[0]*(j+f.n[1]*k)]) - dr)
		if v := dx*dx + dy*dy + dz*dz + dd*dd; v < best2 {
			best2 = v
		}
	}
	// Exact refinement. The cell holding q first: it usually holds the
	// minimum, and the tighter bound then prunes its neighbours. Then the
	// cells within the bound (and the search distance), in increasing order
	// of their lower bounds, until a bound cannot beat the minimum found.
	var home [3]int
	for a := 0; a < 3; a++ {
		home[a] = f.cell(a, q[a])
	}
	if f.cellBound(home[0], home[1], home[2], q, dr, w, best2) < best2 {
		best2 = math.Min(best2, f.cellMin(home[0], home[1], home[2], q, dr, w))
	}
	rho := math.Min(math.Sqrt(best2), s.rn)
	var c0, c1 [3]int
	for a := 0; a < 3; a++ {
		c0[a] = f.cell(a, q[a]-rho)
		c1[a] = f.cell(a, q[a]+rho)
	}
	var cand [maxSorted]candidate
	nc := 0
	for ck := c0[2]; ck <= c1[2]; ck++ {
		for cj := c0[1]; cj <= c1[1]; cj++ {
			for ci := c0[0]; ci <= c1[0]; ci++ {
				if ci == home[0] && cj == home[1] && ck == home[2] {
					continue
				}
				lb := f.cellBound(ci, cj, ck, q, dr, w, best2)
				if lb >= best2 {
					continue
				}
				if nc == maxSorted {
					// Too many to sort: take this one at once.
					best2 = math.Min(best2, f.cellMin(ci, cj, ck, q, dr, w))
					continue
				}
				// Insertion into the sorted list.
				at := nc
				for at > 0 && cand[at-1].lb > lb {
					cand[at] = cand[at-1]
					at--
				}
				cand[at] = candidate{lb, [3]int32{int32(ci), int32(cj), int32(ck)}}
				nc++
			}
		}
	}
	for _, cd := range cand[:nc] {
		if cd.lb >= best2 {
			break
		}
		best2 = math.Min(best2, f.cellMin(int(cd.c[0]), int(cd.c[1]), int(cd.c[2]), q, dr, w))
	}
	return best2
}
