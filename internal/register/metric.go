package register

import (
	"fmt"
	"math"

	"brightfold/internal/parallel"
	"brightfold/internal/volume"
)

// Metric is the similarity measure that registration maximises.
type Metric int

const (
	// NCC is the normalised cross-correlation (Pearson's r between template
	// and scan over the overlap), for scans of the same contrast.
	NCC Metric = iota
	// MI is Mattes mutual information (Mattes et al., IEEE TMI 22(1), 2003:
	// joint histogram with a cubic B-spline Parzen window for the scan and a
	// box window for the template), for scans of different contrasts.
	MI
)

// String is the metric's name as the command line spells it.
func (m Metric) String() string {
	switch m {
	case NCC:
		return "ncc"
	case MI:
		return "mi"
	}
	return fmt.Sprintf("Metric(%d)", int(m))
}

// ParseMetric reads "ncc" or "mi".
func ParseMetric(s string) (Metric, error) {
	switch s {
	case "ncc":
		return NCC, nil
	case "mi":
		return MI, nil
	}
	return 0, fmt.Errorf("unknown metric %q (want ncc or mi)", s)
}

// evaluator computes a metric and its gradient with respect to the
// transform on one pyramid level. The template voxels are the samples; the
// scan is interpolated at the transformed points.
type evaluator struct {
	fixed, moving *image
	mask          []bool // level voxels of the template to use; nil means all
	metric        Metric
	centre        [3]float64 // transform centre c in template world (mm)
	k             [3][4]float64
	// per-voxel scratch: scan value (NaN outside the template mask; where
	// the point falls outside the scan, NaN for NCC and for MI the scan's
	// background, its minimum, so that MI does not drift out of the overlap)
	// and its voxel-axis gradient (zero outside)
	mv     []float32
	gu     [][3]float32
	inside []bool
	bg     float32
	mi     *mattes
}

func newEvaluator(fixed, moving *image, mask []bool, metric Metric, centre [3]float64, bins int) *evaluator {
	e := &evaluator{fixed: fixed, moving: moving, mask: mask, metric: metric, centre: centre,
		mv: make([]float32, fixed.len()), gu: make([][3]float32, fixed.len()), inside: make([]bool, fixed.len())}
	e.bg = moving.data[0]
	for _, v := range moving.data {
		e.bg = min(e.bg, v)
	}
	// x − c = K·(i, j, k, 1) for template voxel (i, j, k)
	for r := 0; r < 3; r++ {
		for c := 0; c < 4; c++ {
			e.k[r][c] = fixed.affine[r][c]
		}
		e.k[r][3] -= centre[r]
	}
	if metric == MI {
		e.mi = newMattes(fixed, moving, mask, bins)
	}
	return e
}

// minSamples is the fewest overlapping samples a level needs: 512 (8³)
// for NCC, so that a level far coarser than a small template is skipped
// rather than fitted to a handful of blurred voxels, and for MI 16 per
// histogram bin (so that the joint histogram is not mostly empty).
func (e *evaluator) minSamples() int {
	if e.metric == MI {
		return 16 * e.mi.bins
	}
	return 512
}

// gradient is d(metric)/d(transform): gL[r][c] for the linear part L and
// gT[r] for the translation t of y = L·(x − c) + c + t.
type gradient struct {
	gL [3][3]float64
	gT [3]float64
}

// eval returns the cost (the negated metric, to be minimised), its gradient
// and the number of template samples that fell inside the scan.
func (e *evaluator) eval(a volume.Affine) (cost float64, g gradient, n int) {
	e.sample(a)
	n = e.countInside()
	var w func(idx int) float64
	switch e.metric {
	case MI:
		cost, w = e.mi.prepare(e)
	default:
		cost, w = e.ncc()
	}
	if n < 16 || w == nil {
		return math.Inf(1), g, n
	}
	return cost, e.accumulate(w), n
}

// sample interpolates the scan at every template voxel of the level.
func (e *evaluator) sample(a volume.Affine) {
	m := e.moving.inv.Mul(a).Mul(e.fixed.affine)
	d := e.fixed.dims
	parallel.Each(d[2], 0, func(_, k int) {
		for j := 0; j < d[1]; j++ {
			row := d[0] * (j + d[1]*k)
			fj, fk := float64(j), float64(k)
			for i := 0; i < d[0]; i++ {
				idx := row + i
				if e.mask != nil && !e.mask[idx] {
					e.mv[idx] = float32(math.NaN())
					e.inside[idx] = false
					continue
				}
				fi := float64(i)
				x := m[0][0]*fi + m[0][1]*fj + m[0][2]*fk + m[0][3]
				y := m[1][0]*fi + m[1][1]*fj + m[1][2]*fk + m[1][3]
				z := m[2][0]*fi + m[2][1]*fj + m[2][2]*fk + m[2][3]
				v, gr, ok := e.moving.sampleGrad(x, y, z)
				e.inside[idx] = ok
				if !ok && e.metric == NCC {
					// NCC leaves the sample out: a head partly outside the
					// scan's field of view at the true position is then not
					// pulled inwards (the background moved the optimum by up to
					// 2 mm when 1 % of the head fell outside)
					e.mv[idx] = float32(math.NaN())
					continue
				}
				if !ok {
					e.mv[idx] = e.bg
					e.gu[idx] = [3]float32{}
					continue
				}
				e.mv[idx] = float32(v)
				e.gu[idx] = [3]float32{float32(gr[0]), float32(gr[1]), float32(gr[2])}
			}
		}
	})
}

// countInside is the number of template samples that fell inside the scan.
func (e *evaluator) countInside() int {
	n := 0
	for _, in := range e.inside {
		if in {
			n++
		}
	}
	return n
}

// sliceSums runs f over every template slice in parallel, each into its own
// accumulator of width n, and adds the accumulators in slice order, so that
// the total does not depend on the number of cores.
func (e *evaluator) sliceSums(n int, f func(k int, acc []float64)) []float64 {
	nz := e.fixed.dims[2]
	parts := make([]float64, nz*n)
	parallel.Each(nz, 0, func(_, k int) { f(k, parts[k*n:(k+1)*n]) })
	tot := make([]float64, n)
	for k := 0; k < nz; k++ {
		for i := 0; i < n; i++ {
			tot[i] += parts[k*n+i]
		}
	}
	return tot
}

// ncc returns −r and the per-sample derivative of −r with respect to the
// scan value: d r/d m_x = (f_x − f̄)/sqrt(Sff·Smm) − r·(m_x − m̄)/Smm.
func (e *evaluator) ncc() (float64, func(int) float64) {
	plane := e.fixed.dims[0] * e.fixed.dims[1]
	fd := e.fixed.data
	s := e.sliceSums(6, func(k int, acc []float64) {
		for idx := k * plane; idx < (k+1)*plane; idx++ {
			m := float64(e.mv[idx])
			if m != m {
				continue
			}
			f := float64(fd[idx])
			acc[0]++
			acc[1] += f
			acc[2] += m
			acc[3] += f * f
			acc[4] += m * m
			acc[5] += f * m
		}
	})
	n := s[0]
	if n < 16 {
		return 0, nil
	}
	fm, mm := s[1]/n, s[2]/n
	sff := s[3] - n*fm*fm
	smm := s[4] - n*mm*mm
	sfm := s[5] - n*fm*mm
	if sff <= 0 || smm <= 0 {
		return 0, func(int) float64 { return 0 }
	}
	den := math.Sqrt(sff * smm)
	r := sfm / den
	w := func(idx int) float64 {
		return -((float64(fd[idx])-fm)/den - r*(float64(e.mv[idx])-mm)/smm)
	}
	return -r, w
}

// accumulate sums w(x)·∇m(x) ⊗ (x − c) over the samples and converts the
// voxel-axis gradient of the scan to world millimetres.
func (e *evaluator) accumulate(w func(int) float64) gradient {
	d := e.fixed.dims
	s := e.sliceSums(12, func(k int, acc []float64) {
		for j := 0; j < d[1]; j++ {
			row := d[0] * (j + d[1]*k)
			for i := 0; i < d[0]; i++ {
				idx := row + i
				if e.mv[idx] != e.mv[idx] {
					continue
				}
				wi := w(idx)
				h := [4]float64{float64(i), float64(j), float64(k), 1}
				for r := 0; r < 3; r++ {
					gr := wi * float64(e.gu[idx][r])
					for c := 0; c < 4; c++ {
						acc[4*r+c] += gr * h[c]
					}
				}
			}
		}
	})
	// voxel gradient → world: ∂m/∂y = Ginvᵀ ∂m/∂u with Ginv the scan's
	// world→voxel linear part; Σ w g (x−c)ᵀ = Ginvᵀ·S·Kᵀ.
	var sk [3][3]float64
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			for q := 0; q < 4; q++ {
				sk[r][c] += s[4*r+q] * e.k[c][q]
			}
		}
	}
	inv := e.moving.inv
	var g gradient
	for r := 0; r < 3; r++ {
		for q := 0; q < 3; q++ {
			g.gT[r] += inv[q][r] * s[4*q+3]
			for c := 0; c < 3; c++ {
				g.gL[r][c] += inv[q][r] * sk[q][c]
			}
		}
	}
	return g
}
