// Package register aligns a scan to a template volume with a rigid (6
// degrees of freedom) or affine (12) transform: centres-of-mass
// initialisation, a multi-resolution pyramid with Gaussian smoothing per
// level, normalised cross-correlation or Mattes mutual information with
// analytic gradients, and L-BFGS (gonum's optimize package, chosen for its
// line searches and convergence tests rather than a home-grown optimiser).
// Work is spread over voxels on all cores, and the result does not depend on
// the number of cores: partial sums are added in a fixed order.
//
// Convention: the transform A maps template world coordinates (RAS mm) to
// scan world coordinates. A point x of the template's world corresponds to
// A·x in the scan's world, so the scan resampled onto the template grid is
// scan(A·x) for each template voxel centre x.
package register

import (
	"context"
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/optimize"

	"brightfold/internal/volume"
)

// Convention states the direction of Result.Transform in words.
const Convention = "template RAS mm -> scan RAS mm: a point x in the template's world corresponds to A·x in the scan's world"

// Options control a registration. The zero value is an affine NCC
// registration over 8, 4 and 2 mm levels from the centres of mass.
type Options struct {
	DOF    int    // 6 (rigid) or 12 (affine, after a rigid stage); 0 means 12
	Metric Metric // NCC (same contrast) or MI (different contrasts)
	// LevelsMM are the pyramid's sampling distances, coarse to fine; nil means 8, 4, 2.
	LevelsMM []float64
	// MaxIterations bounds the L-BFGS iterations per stage at each level
	// (same length as LevelsMM); nil means 100 at the coarsest level, halving per level (at least 25).
	MaxIterations []int
	// Mask, when set, limits the template voxels that count (nonzero = in);
	// it may be on any grid and is read by nearest neighbour.
	Mask *volume.Volume
	// Start, when set, replaces the centres-of-mass initialisation.
	Start *volume.Affine
	// Bins is the number of histogram bins for MI; 0 means 32.
	Bins int
	// Progress, when set, is called after each stage of each level.
	Progress func(Stage)
}

// Stage reports one optimisation stage at one pyramid level.
type Stage struct {
	LevelMM     float64 `json:"level_mm"`
	DOF         int     `json:"dof"`
	Iterations  int     `json:"iterations"`
	Evaluations int     `json:"evaluations"`
	Value       float64 `json:"value"` // the metric (higher is better) at the end of the stage
	// Skipped is set when the overlap at this level held too few samples to
	// optimise (fewer than 512 for NCC, 16 per histogram bin for MI).
	Skipped bool `json:"skipped,omitempty"`
}

// Result is the outcome of Register.
type Result struct {
	// Transform maps template world to scan world (see Convention).
	Transform volume.Affine
	// Aligned is the scan resampled (trilinear) onto the template grid.
	Aligned *volume.Volume
	Metric  Metric
	// Value is the final metric on the finest level: Pearson's r for NCC,
	// mutual information in nats for MI.
	Value float64
	// Overlap is the fraction of template samples (in the mask) that fell inside the scan at the end.
	Overlap float64
	Stages  []Stage
}

// ErrNoOverlap is returned when the scan and the template do not overlap enough to compare.
var ErrNoOverlap = errors.New("the scan and the template do not overlap")

// Register aligns moving (the scan) to fixed (the template).
func Register(ctx context.Context, fixed, moving *volume.Volume, opts Options) (*Result, error) {
	o, err := opts.withDefaults()
	if err != nil {
		return nil, err
	}
	for _, v := range []*volume.Volume{fixed, moving} {
		if len(v.Data) != v.Len() || v.Len() == 0 {
			return nil, fmt.Errorf("register: volume holds %d voxels, dims %v need %d", len(v.Data), v.Dims, v.Len())
		}
		if err := v.Affine.Validate(); err != nil {
			return nil, fmt.Errorf("register: %w", err)
		}
	}
	fc, radius := centreOfMass(fixed)
	start := volume.Identity()
	if o.Start != nil {
		start = *o.Start
	} else {
		mc, _ := centreOfMass(moving)
		for r := 0; r < 3; r++ {
			start[r][3] = mc[r] - fc[r]
		}
	}
	res := &Result{Metric: o.Metric}
	a := start
	var last *evaluator
	levels := make([]*evaluator, len(o.LevelsMM)) // built once, when first needed
	rigidDone := false                            // an affine registration starts with one rigid stage that was not skipped
	for li, lv := range o.LevelsMM {
		if levels[li] == nil {
			if levels[li], err = newLevel(fixed, moving, o, lv, fc); err != nil {
				return nil, err
			}
		}
		ev := levels[li]
		last = ev
		var dofs []int
		switch {
		case o.DOF == 6:
			dofs = []int{6}
		case !rigidDone:
			dofs = []int{6, 12}
		default:
			dofs = []int{12}
		}
		for _, dof := range dofs {
			st, next, err := optimiseStage(ctx, ev, dof, a, fc, radius, o.MaxIterations[li])
			if err != nil {
				return nil, err
			}
			st.LevelMM = lv
			a = next
			res.Stages = append(res.Stages, st)
			if dof == 6 && !st.Skipped {
				rigidDone = true
			}
			if o.Progress != nil {
				o.Progress(st)
			}
		}
	}
	cost, _, n := last.eval(a)
	if math.IsInf(cost, 1) {
		return nil, ErrNoOverlap
	}
	res.Value = -cost
	res.Overlap = float64(n) / float64(countMask(last))
	res.Transform = a
	res.Aligned, err = Apply(moving, fixed, a)
	if err != nil {
		return nil, err
	}
	return res, nil
}

// Apply resamples the scan onto the template grid through a (template world
// → scan world); template voxels that fall outside the scan get the scan's
// lowest finite value (its background: 0 for most MR, −1000 HU for CT).
func Apply(scan, template *volume.Volume, a volume.Affine) (*volume.Volume, error) {
	lo, _, _ := scan.Stats()
	if math.IsNaN(lo) {
		lo = 0
	}
	out, err := volume.ResampleFill(scan, a.Mul(template.Affine), template.Dims, volume.Trilinear, float32(lo))
	if err != nil {
		return nil, fmt.Errorf("register: resample: %w", err)
	}
	out.Affine = template.Affine
	return out, nil
}

func countMask(e *evaluator) int {
	if e.mask == nil {
		return e.fixed.len()
	}
	n := 0
	for _, m := range e.mask {
		if m {
			n++
		}
	}
	return max(n, 1)
}

func (o Options) withDefaults() (Options, error) {
	if o.DOF == 0 {
		o.DOF = 12
	}
	if o.DOF != 6 && o.DOF != 12 {
		return o, fmt.Errorf("register: %d degrees of freedom (want 6 or 12)", o.DOF)
	}
	if o.Metric != NCC && o.Metric != MI {
		return o, fmt.Errorf("register: unknown metric %v", o.Metric)
	}
	if len(o.LevelsMM) == 0 {
		o.LevelsMM = []float64{8, 4, 2}
	}
	for _, l := range o.LevelsMM {
		if !(l > 0) || math.IsInf(l, 0) {
			return o, fmt.Errorf("register: pyramid level %v mm is not positive", l)
		}
	}
	if o.MaxIterations == nil {
		it := 100
		for range o.LevelsMM {
			o.MaxIterations = append(o.MaxIterations, it)
			it = max(25, it/2)
		}
	}
	if len(o.MaxIterations) != len(o.LevelsMM) {
		return o, fmt.Errorf("register: %d iteration limits for %d levels", len(o.MaxIterations), len(o.LevelsMM))
	}
	if o.Bins == 0 {
		o.Bins = 32
	}
	if o.Bins < 8 || o.Bins > 256 {
		return o, fmt.Errorf("register: %d histogram bins (want 8 to 256)", o.Bins)
	}
	return o, nil
}

func newLevel(fixed, moving *volume.Volume, o Options, levelMM float64, centre [3]float64) (*evaluator, error) {
	m, err := levelImage(moving, levelMM, 0)
	if err != nil {
		return nil, fmt.Errorf("register: scan: %w", err)
	}
	f, err := levelImage(fixed, levelMM, interpolationBlurMM(m.affine.Spacing()))
	if err != nil {
		return nil, fmt.Errorf("register: template: %w", err)
	}
	return newEvaluator(f, m, levelMask(o.Mask, f), o.Metric, centre, o.Bins), nil
}

// optimiseStage runs L-BFGS on one level with dof parameters from start.
func optimiseStage(ctx context.Context, ev *evaluator, dof int, start volume.Affine, centre [3]float64, radius float64, maxIter int) (Stage, volume.Affine, error) {
	p := newParams(dof, start, centre, radius)
	var cacheX, cacheG []float64
	var cacheF float64
	evals := 0
	compute := func(x []float64) {
		if cacheX != nil && equal(cacheX, x) {
			return
		}
		cost, g, _ := ev.eval(p.affine(x))
		evals++
		cacheX = append(cacheX[:0], x...)
		cacheF = cost
		cacheG = make([]float64, len(x))
		p.chain(x, g, cacheG)
	}
	prob := optimize.Problem{
		Func: func(x []float64) float64 { compute(x); return cacheF },
		Grad: func(grad, x []float64) { compute(x); copy(grad, cacheG) },
		Status: func() (optimize.Status, error) {
			if err := ctx.Err(); err != nil {
				return optimize.Failure, err
			}
			return optimize.NotTerminated, nil
		},
	}
	x0 := make([]float64, p.size())
	f0 := prob.Func(x0)
	if math.IsInf(f0, 1) {
		return Stage{}, start, ErrNoOverlap
	}
	if _, _, n := ev.eval(p.affine(x0)); n < ev.minSamples() {
		// too few samples for a meaningful metric at this level (a thin slab at a coarse level)
		return Stage{DOF: dof, Evaluations: evals, Value: -f0, Skipped: true}, start, nil
	}
	best, bestF, iters := x0, f0, 0
	// L-BFGS with a backtracking (Armijo) line search may build a
	// non-descent direction where the metric is not convex; it then stops,
	// and a restart from the best point with a fresh memory goes on.
	for restart := 0; restart < 10 && iters < maxIter; restart++ {
		settings := &optimize.Settings{
			MajorIterations:   maxIter - iters,
			FuncEvaluations:   3 * (maxIter - iters),
			GradientThreshold: 1e-9,
			Converger:         &optimize.FunctionConverge{Absolute: 1e-7, Relative: 1e-7, Iterations: 6},
		}
		method := &optimize.LBFGS{Store: 10, Linesearcher: &optimize.Backtracking{}}
		r, err := optimize.Minimize(prob, best, settings, method)
		if cerr := ctx.Err(); cerr != nil {
			return Stage{}, start, cerr
		}
		if r == nil {
			return Stage{}, start, fmt.Errorf("register: optimiser: %w", err)
		}
		iters += max(1, r.Stats.MajorIterations)
		improved := r.F < bestF-1e-7*math.Abs(bestF) && !math.IsNaN(r.F)
		if r.F < bestF {
			best, bestF = append([]float64(nil), r.X...), r.F
		}
		if err == nil || !improved {
			break
		}
	}
	return Stage{DOF: dof, Iterations: iters, Evaluations: evals, Value: -bestF}, p.affine(best), nil
}

func equal(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// centreOfMass returns the intensity-weighted centre (mm) of the voxels
// brighter than the volume's mean, weighted by their excess over the mean
// (so that air and noise do not pull it), and the radius of gyration about it.
func centreOfMass(v *volume.Volume) ([3]float64, float64) {
	var mean float64
	n := 0
	for _, x := range v.Data {
		if f := float64(x); !math.IsNaN(f) && !math.IsInf(f, 0) {
			mean += f
			n++
		}
	}
	if n > 0 {
		mean /= float64(n)
	}
	var s [3]float64
	var w, ss float64
	d := v.Dims
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				f := float64(v.Data[v.Index(i, j, k)])
				if !(f > mean) || math.IsInf(f, 0) {
					continue
				}
				wi := f - mean
				p := v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
				for r := 0; r < 3; r++ {
					s[r] += wi * p[r]
				}
				ss += wi * (p[0]*p[0] + p[1]*p[1] + p[2]*p[2])
				w += wi
			}
		}
	}
	if w == 0 {
		c := v.Affine.Apply([3]float64{float64(d[0]-1) / 2, float64(d[1]-1) / 2, float64(d[2]-1) / 2})
		return c, 50
	}
	for r := 0; r < 3; r++ {
		s[r] /= w
	}
	rad := math.Sqrt(max(ss/w-(s[0]*s[0]+s[1]*s[1]+s[2]*s[2]), 1))
	return s, rad
}
