// Package preprocess turns a Volume into the model-grid tensor a card's
// "preprocessing" object states (Spec), and keeps the exact transform back
// from the model grid to the scan, with the head statistics the fit checks
// use. Research use only.
package preprocess

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"sync/atomic"

	"brightfold/internal/parallel"
	"brightfold/internal/stats"
	"brightfold/internal/volume"
)

// Tensor is a model input: Data in the card's layout with Shape [N, C, ...].
// Grid is the model grid's size along x, y, z (R, A, S). HeadMask marks the
// head voxels of the model grid in grid order (x fastest), whatever the layout.
type Tensor struct {
	Data     []float32
	Shape    []int64
	Layout   string
	Grid     [3]int
	HeadMask []bool
}

// GridIndex returns the offset in Data of grid voxel (x, y, z) of batch item 0.
func (t *Tensor) GridIndex(x, y, z int) int {
	if t.Layout == LayoutNCXYZ {
		return z + t.Grid[2]*(y+t.Grid[1]*x)
	}
	return x + t.Grid[0]*(y+t.Grid[1]*z)
}

// GridValues returns the tensor's values in grid order (x fastest), copying
// only when the layout differs.
func (t *Tensor) GridValues() []float32 {
	if t.Layout != LayoutNCXYZ {
		return t.Data
	}
	out := make([]float32, len(t.Data))
	n := 0
	for z := 0; z < t.Grid[2]; z++ {
		for y := 0; y < t.Grid[1]; y++ {
			for x := 0; x < t.Grid[0]; x++ {
				out[n] = t.Data[t.GridIndex(x, y, z)]
				n++
			}
		}
	}
	return out
}

// Transform ties the model grid to the scan. GridToScan maps a model-grid
// voxel index (x, y, z, 1) to the scan's voxel index (i, j, k, 1); GridAffine
// maps it to RAS millimetres. Relevance maps made on the model grid are carried
// back to the scan with the inverse of GridToScan.
type Transform struct {
	GridToScan volume.Affine `json:"grid_to_scan"`
	GridAffine volume.Affine `json:"grid_affine"`
	GridDims   [3]int        `json:"grid_dims"`
	ScanDims   [3]int        `json:"scan_dims"`
	ScanAffine volume.Affine `json:"scan_affine"`
}

// ScanToGrid is the inverse of GridToScan.
func (t Transform) ScanToGrid() (volume.Affine, error) { return t.GridToScan.Inverse() }

// HeadStats describe the head found by the card's head-mask rule, measured on
// the anti-aliased scan (before cropping to the model grid).
type HeadStats struct {
	Threshold float64    // raw-value threshold of the head mask
	Centre    [3]float64 // centre of mass of the mask, RAS mm
	VolumeMl  float64    // mask volume in millilitres
	ExtentMm  [3]float64 // standard deviation of mask positions along the grid's R, A, S axes
	// Skewness is the third standardised moment of the mask positions
	// along R, A, S (signed towards +R, +A, +S): a head with its neck has a
	// long tail towards inferior, so an upside-down head changes its sign.
	Skewness [3]float64
	Fraction float64 // fraction of voxels in the mask
}

// Prepared is everything preprocessing learns about a scan: the tensor, the
// transform back to the scan and the head statistics the fit checks use.
type Prepared struct {
	Tensor    *Tensor
	Transform Transform
	Head      HeadStats
	// InsideFOV is the fraction of model-grid voxels whose centre lies inside
	// the scan's field of view.
	InsideFOV float64
	// ScanHeadThreshold is the card's head-mask rule applied to the scan's
	// own voxels (Head.Threshold is applied to the anti-aliased scan, whose
	// percentiles are narrower): the threshold for measurements on the raw
	// scan, such as the noise level.
	ScanHeadThreshold float64
	// Alignment is set when the card aligns scans to a template (align.go).
	Alignment *AlignmentInfo
}

// Preprocess turns a scan into the model input exactly as p states: closest
// canonical RAS axes (volume.ClosestAxes, as volume.Reorient), resampling to
// p.SpacingMm (after block-mean anti-aliasing when asked), a p.Shape grid
// centred on the head's centre of mass, and intensity normalisation.
// Reorientation and resampling are done as one trilinear resampling
// (volume.ResampleFill) onto the model grid, whose axes are the reoriented
// scan's axes, so voxels are interpolated once. It is the one implementation for the
// command line, the app, training and evaluation.
func Preprocess(v *volume.Volume, p Spec) (*Tensor, Transform, error) {
	pr, err := Prepare(v, p)
	if err != nil {
		return nil, Transform{}, err
	}
	return pr.Tensor, pr.Transform, nil
}

// Prepare is Preprocess with the head statistics and field-of-view coverage.
func Prepare(v *volume.Volume, p Spec) (*Prepared, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if err := checkVolume(v); err != nil {
		return nil, err
	}
	frame, err := canonicalFrame(v.Affine)
	if err != nil {
		return nil, err
	}
	src := v
	if p.Antialias == "block-mean" {
		src = BlockMean(v, blockFactors(v, frame, p.SpacingMm))
	}
	lo, hi := percentilePair(src.Data, p.HeadMask.LowPercentile, p.HeadMask.HighPercentile)
	if !(hi > lo) {
		return nil, errors.New("no head found: the image has (nearly) constant intensity")
	}
	thr := lo + p.HeadMask.Fraction*(hi-lo)
	scanThr := thr
	if src != v {
		rlo, rhi := percentilePair(v.Data, p.HeadMask.LowPercentile, p.HeadMask.HighPercentile)
		scanThr = rlo + p.HeadMask.Fraction*(rhi-rlo)
	}
	head, err := headStats(src, frame, thr)
	if err != nil {
		return nil, err
	}
	grid := gridAffine(frame, p.SpacingMm, p.Shape, head.Centre)
	vals, inside, err := sampleGrid(src, grid, p.Shape, float32(lo))
	if err != nil {
		return nil, err
	}
	mask := make([]bool, len(vals))
	for i, x := range vals {
		mask[i] = float64(x) > thr
	}
	if err := normalise(vals, mask, p.Intensity); err != nil {
		return nil, err
	}
	if err := checkTensorFinite(vals); err != nil {
		return nil, err
	}
	scanInv, err := v.Affine.Inverse()
	if err != nil {
		return nil, fmt.Errorf("scan affine: %w", err)
	}
	t := &Tensor{Layout: LayoutNCDHW, Grid: p.Shape, HeadMask: mask,
		Data: vals, Shape: []int64{1, 1, int64(p.Shape[2]), int64(p.Shape[1]), int64(p.Shape[0])}}
	return &Prepared{
		Tensor:    t,
		Transform: Transform{GridToScan: scanInv.Mul(grid), GridAffine: grid, GridDims: p.Shape, ScanDims: v.Dims, ScanAffine: v.Affine},
		Head:      head,
		InsideFOV: inside,

		ScanHeadThreshold: scanThr,
	}, nil
}

// ToLayout rearranges t (made by Prepare in NCDHW) into layout.
func (t *Tensor) ToLayout(layout string) *Tensor {
	if layout == t.Layout || layout != LayoutNCXYZ {
		return t
	}
	out := &Tensor{Layout: layout, Grid: t.Grid, HeadMask: t.HeadMask,
		Shape: []int64{t.Shape[0], t.Shape[1], int64(t.Grid[0]), int64(t.Grid[1]), int64(t.Grid[2])},
		Data:  make([]float32, len(t.Data))}
	n := 0
	for z := 0; z < t.Grid[2]; z++ {
		for y := 0; y < t.Grid[1]; y++ {
			for x := 0; x < t.Grid[0]; x++ {
				out.Data[out.GridIndex(x, y, z)] = t.Data[n]
				n++
			}
		}
	}
	return out
}

func checkVolume(v *volume.Volume) error {
	if v == nil {
		return errors.New("no volume")
	}
	n, err := volume.CheckedProduct(v.Dims[:], volume.MaxVoxels)
	if err != nil {
		return fmt.Errorf("volume dims: %w", err)
	}
	if len(v.Data) != n {
		return fmt.Errorf("volume holds %d values for dims %v", len(v.Data), v.Dims)
	}
	if err := v.Affine.Validate(); err != nil {
		return fmt.Errorf("volume affine: %w", err)
	}
	return nil
}

// frame is the closest canonical RAS frame of a scan: for grid axis g (R, A,
// S), Axis[g] is the scan voxel axis that points most along it and Dir[g] the
// unit world vector of that voxel axis, signed to point towards +R, +A or +S.
type frame struct {
	Axis [3]int
	Dir  [3][3]float64
	Sign [3]float64 // +1 when scan axis Axis[g] runs towards +R, +A or +S
}

func canonicalFrame(a volume.Affine) (frame, error) {
	m, err := volume.ClosestAxes(a)
	if err != nil {
		return frame{}, fmt.Errorf("affine has no clear orientation: %w", err)
	}
	var f frame
	for ax := 0; ax < 3; ax++ {
		g := m.World[ax]
		sign := 1.0
		if m.Flip[ax] {
			sign = -1
		}
		norm := math.Sqrt(a[0][ax]*a[0][ax] + a[1][ax]*a[1][ax] + a[2][ax]*a[2][ax])
		f.Axis[g] = ax
		f.Sign[g] = sign
		for r := 0; r < 3; r++ {
			f.Dir[g][r] = sign * a[r][ax] / norm
		}
	}
	return f, nil
}

// gridAffine is the model grid's voxel→RAS affine: axes along the frame,
// the given spacing, and its centre voxel at centre.
func gridAffine(f frame, spacing [3]float64, shape [3]int, centre [3]float64) volume.Affine {
	g := volume.Identity()
	for r := 0; r < 3; r++ {
		o := centre[r]
		for ax := 0; ax < 3; ax++ {
			g[r][ax] = f.Dir[ax][r] * spacing[ax]
			o -= g[r][ax] * float64(shape[ax]-1) / 2
		}
		g[r][3] = o
	}
	return g
}

// blockFactors is, per scan voxel axis, how many voxels one anti-aliasing
// block averages: the whole number of scan voxels in one target voxel.
func blockFactors(v *volume.Volume, f frame, target [3]float64) [3]int {
	sp := v.Spacing()
	var out [3]int
	for g := 0; g < 3; g++ {
		ax := f.Axis[g]
		k := int(math.Floor(target[g]/sp[ax] + 1e-6))
		k = max(1, min(k, v.Dims[ax]))
		out[ax] = k
	}
	return out
}

// BlockMean averages non-overlapping blocks of f voxels (non-finite values
// are skipped), dropping incomplete blocks at the far edges so that the new
// affine is exact: new voxel I is centred on old voxel f·I + (f−1)/2.
func BlockMean(v *volume.Volume, f [3]int) *volume.Volume {
	if f == [3]int{1, 1, 1} && allFinite32(v.Data) {
		return v // blocks of one voxel: the scan itself (callers only read it)
	}
	nd := [3]int{v.Dims[0] / f[0], v.Dims[1] / f[1], v.Dims[2] / f[2]}
	out := &volume.Volume{Dims: nd, Meta: v.Meta, Data: make([]float32, nd[0]*nd[1]*nd[2])}
	s := volume.Identity()
	for a := 0; a < 3; a++ {
		s[a][a] = float64(f[a])
		s[a][3] = float64(f[a]-1) / 2
	}
	out.Affine = v.Affine.Mul(s)
	parallel.Chunks(nd[2], func(k0, k1 int) {
		acc := make([]float64, nd[0])
		for K := k0; K < k1; K++ {
			for J := 0; J < nd[1]; J++ {
				clear(acc)
				for k := K * f[2]; k < (K+1)*f[2]; k++ {
					for j := J * f[1]; j < (J+1)*f[1]; j++ {
						row := v.Data[v.Index(0, j, k):]
						for I := range acc {
							var s float32
							for _, x := range row[I*f[0] : (I+1)*f[0]] {
								s += x
							}
							acc[I] += float64(s)
						}
					}
				}
				o := out.Index(0, J, K)
				n := float64(f[0] * f[1] * f[2])
				for I, s := range acc {
					if math.IsNaN(s) || math.IsInf(s, 0) { // a NaN or Inf in the block: average its finite voxels
						s, n := blockFinite(v, f, I, J, K)
						if n > 0 {
							out.Data[o+I] = float32(s / n)
						}
						continue
					}
					out.Data[o+I] = float32(s / n)
				}
			}
		}
	})
	return out
}

// blockFinite sums the finite voxels of block (I, J, K) and counts them.
func blockFinite(v *volume.Volume, f [3]int, I, J, K int) (sum, n float64) {
	for k := K * f[2]; k < (K+1)*f[2]; k++ {
		for j := J * f[1]; j < (J+1)*f[1]; j++ {
			for i := I * f[0]; i < (I+1)*f[0]; i++ {
				if x := v.At(i, j, k); finite32(x) {
					sum += float64(x)
					n++
				}
			}
		}
	}
	return sum, n
}

// checkTensorFinite refuses a model-grid tensor holding NaN or Inf, which values
// beyond float32's range (or NaN voxels next to the head) can produce; the
// model must never see them.
func checkTensorFinite(vals []float32) error {
	if !allFinite32(vals) {
		return errors.New("the scan's values are not finite numbers or too large to normalise (NaN, Inf or near the float32 limit)")
	}
	return nil
}

// allFinite32 reports whether data holds no NaN or Inf, checking on all
// cores.
func allFinite32(data []float32) bool {
	var bad atomic.Bool
	parallel.Chunks(len(data), func(lo, hi int) {
		for _, x := range data[lo:hi] {
			if !finite32(x) {
				bad.Store(true)
				return
			}
		}
	})
	return !bad.Load()
}

func finite32(x float32) bool { return !math.IsNaN(float64(x)) && !math.IsInf(float64(x), 0) }

// maxPercentileSample bounds the values sorted for a percentile; larger
// inputs are subsampled with a fixed stride (deterministic).
const maxPercentileSample = 1 << 20

// percentilePair returns two percentiles (0–100, linear interpolation between
// order statistics as numpy's default) of the finite values of data, by
// selection in linear time.
func percentilePair(data []float32, p1, p2 float64) (float64, float64) {
	stride := 1 + len(data)/maxPercentileSample
	vals := make([]float64, 0, len(data)/stride+1)
	for i := 0; i < len(data); i += stride {
		if finite32(data[i]) {
			vals = append(vals, float64(data[i]))
		}
	}
	if len(vals) == 0 {
		return math.NaN(), math.NaN()
	}
	return stats.SelectQuantile(vals, p1/100), stats.SelectQuantile(vals, p2/100)
}

// headStats measures the mask {value > thr} of v in the frame's axes.
func headStats(v *volume.Volume, f frame, thr float64) (HeadStats, error) {
	m := maskMoments(v, thr)
	if m.n == 0 {
		return HeadStats{}, errors.New("no head found: no voxel above the head-mask threshold")
	}
	n := float64(m.n)
	var mean, m2, m3 [3]float64 // central moments per voxel axis (sums, not means)
	for a := 0; a < 3; a++ {
		mu := float64(m.s1[a]) / n
		e2, e3 := float64(m.s2[a])/n, float64(m.s3[a])/n
		mean[a] = mu
		m2[a] = n * math.Max(0, e2-mu*mu)
		m3[a] = n * (e3 - 3*mu*e2 + 2*mu*mu*mu)
	}
	sp := v.Spacing()
	h := HeadStats{Threshold: thr, Centre: v.Affine.Apply(mean), Fraction: n / float64(v.Len())}
	h.VolumeMl = n * math.Abs(v.Affine.Det()) / 1000
	for g := 0; g < 3; g++ {
		ax := f.Axis[g]
		sd := math.Sqrt(m2[ax] / n)
		h.ExtentMm[g] = sd * sp[ax]
		if sd > 0 {
			h.Skewness[g] = f.Sign[g] * m3[ax] / n / (sd * sd * sd)
		}
	}
	return h, nil
}

// moments are the count and the raw moments Σp, Σp², Σp³ of the voxel
// indices of the voxels above a threshold, per axis. Integer sums are exact
// (Σp³ < 2⁶³ for any volume under volume.MaxVoxels with axes below 2¹⁵), so
// the result does not depend on the order the slices are summed in.
type moments struct {
	n          int64
	s1, s2, s3 [3]int64
}

func (m *moments) add(o moments) {
	m.n += o.n
	for a := 0; a < 3; a++ {
		m.s1[a] += o.s1[a]
		m.s2[a] += o.s2[a]
		m.s3[a] += o.s3[a]
	}
}

// maskMoments sums the moments of the voxels of v above thr, one slice per
// task on all cores.
func maskMoments(v *volume.Volume, thr float64) moments {
	per := make([]moments, v.Dims[2])
	parallel.Each(v.Dims[2], 0, func(_, k int) {
		var m moments
		kk := int64(k)
		for j := 0; j < v.Dims[1]; j++ {
			o := v.Index(0, j, k)
			var c, si, si2, si3 int64
			for i, x := range v.Data[o : o+v.Dims[0]] {
				if float64(x) > thr {
					ii := int64(i)
					c++
					si += ii
					si2 += ii * ii
					si3 += ii * ii * ii
				}
			}
			jj := int64(j)
			m.n += c
			m.s1[0] += si
			m.s2[0] += si2
			m.s3[0] += si3
			m.s1[1] += c * jj
			m.s2[1] += c * jj * jj
			m.s3[1] += c * jj * jj * jj
		}
		m.s1[2] = m.n * kk
		m.s2[2] = m.n * kk * kk
		m.s3[2] = m.n * kk * kk * kk
		per[k] = m
	})
	var total moments
	for _, m := range per {
		total.add(m)
	}
	return total
}

// sampleGrid resamples v (trilinear, volume.ResampleFill) onto the grid
// with affine grid and dims, giving points outside v's voxel centres the
// value fill; it returns the values and the fraction of points inside v.
func sampleGrid(v *volume.Volume, grid volume.Affine, dims [3]int, fill float32) ([]float32, float64, error) {
	r, err := volume.ResampleFill(v, grid, dims, volume.Trilinear, float32(math.NaN()))
	if err != nil {
		return nil, 0, err
	}
	inside := 0
	for i, x := range r.Data {
		if math.IsNaN(float64(x)) {
			r.Data[i] = fill
		} else {
			inside++
		}
	}
	return r.Data, float64(inside) / float64(len(r.Data)), nil
}

// normalise applies the intensity normalisation in place, with statistics
// over the masked voxels.
func normalise(vals []float32, mask []bool, in Intensity) error {
	head := make([]float64, 0, len(vals))
	for i, x := range vals {
		if mask[i] {
			head = append(head, float64(x))
		}
	}
	if len(head) < 8 {
		return fmt.Errorf("no head found: only %d model-grid voxels above the head-mask threshold", len(head))
	}
	switch in.Method {
	case NormZScoreHead:
		var s, s2 float64
		for _, x := range head {
			s += x
		}
		mean := s / float64(len(head))
		for _, x := range head {
			s2 += (x - mean) * (x - mean)
		}
		sd := math.Sqrt(s2 / float64(len(head)))
		if !(sd > 0) {
			return errors.New("head voxels have no intensity spread")
		}
		for i, x := range vals {
			z := (float64(x) - mean) / sd
			if in.Clip > 0 {
				z = math.Max(-in.Clip, math.Min(in.Clip, z))
			}
			vals[i] = float32(z)
		}
	case NormPercentileMinMax:
		sort.Float64s(head)
		lo, hi := stats.Quantile(head, in.LowPercentile/100), stats.Quantile(head, in.HighPercentile/100)
		if !(hi > lo) {
			return errors.New("head voxels have no intensity spread between the normalisation percentiles")
		}
		for i, x := range vals {
			vals[i] = float32(math.Max(0, math.Min(1, (float64(x)-lo)/(hi-lo))))
		}
	default:
		return fmt.Errorf("unknown intensity normalisation %q", in.Method)
	}
	return nil
}
