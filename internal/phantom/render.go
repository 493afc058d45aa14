package phantom

import (
	"fmt"
	"math"
	"runtime"
	"sync"

	"brightfold/internal/notice"
	"brightfold/internal/parallel"
	"brightfold/internal/volume"
)

// FieldOfViewMM returns the size of the standard (in-distribution) field of
// view in millimetres along x, y, z.
func FieldOfViewMM() [3]float64 { return [3]float64{160, 192, 160} }

// ThickSliceMM is the slice spacing and thickness of ShiftThick.
const ThickSliceMM = 6.0

// CroppedFraction is the part of the field of view (from the bottom) that ShiftCropped keeps.
const CroppedFraction = 0.6

// grid is where a case is sampled: dims, affine, and the offsets (mm along
// world z) of the sub-slices averaged into one slice.
type grid struct {
	dims   [3]int
	affine volume.Affine
	sub    []float64
}

func (g *grid) len() int { return g.dims[0] * g.dims[1] * g.dims[2] }

func gridFor(shift Shift, vox float64) (grid, error) {
	if math.IsNaN(vox) || vox < 0.5 || vox > 20 {
		return grid{}, fmt.Errorf("phantom: voxel size %g mm is outside [0.5, 20]", vox)
	}
	sp := [3]float64{vox, vox, vox}
	g := grid{sub: []float64{0}}
	for i := range g.dims {
		g.dims[i] = max(1, int(math.Round(FieldOfViewMM()[i]/vox)))
	}
	if shift == ShiftThick {
		sp[2] = ThickSliceMM
		g.dims[2] = max(1, int(math.Round(FieldOfViewMM()[2]/ThickSliceMM)))
		n := max(1, int(math.Round(ThickSliceMM/vox)))
		g.sub = make([]float64, n)
		for s := range g.sub {
			g.sub[s] = ((float64(s)+0.5)/float64(n) - 0.5) * ThickSliceMM
		}
	}
	var origin [3]float64
	for i := range origin {
		origin[i] = -float64(g.dims[i]-1) / 2 * sp[i]
	}
	if shift == ShiftCropped {
		g.dims[2] = max(1, int(math.Round(float64(g.dims[2])*CroppedFraction)))
	}
	g.affine = volume.Diag(sp, origin)
	return g, nil
}

// Render draws the subject's case.
func Render(s Subject, opts Options) (*Case, error) {
	if s.draw.fold == nil {
		return nil, fmt.Errorf("phantom: subject %s was not made by NewSubject", s.ID)
	}
	g, err := gridFor(s.Shift, opts.voxelMM())
	if err != nil {
		return nil, err
	}
	r := &renderer{s: &s, g: &g, a: newAnatomy(&s), c: newContrast(&s)}
	r.dp = r.a.toStandardDir([3]float64{g.affine[0][0], g.affine[1][0], g.affine[2][0]})
	r.fold, r.low, r.shape = s.draw.fold.steps(r.dp), s.draw.low.steps(r.dp), s.draw.shape.steps(r.dp)
	n := g.len()
	r.img = make([]float32, n)
	r.labels = make([]Tissue, n)
	r.mask = make([]uint8, n)
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	scratch := make([]*sliceScratch, workers)
	parallel.Each(g.dims[2], workers, func(w, k int) {
		if scratch[w] == nil {
			scratch[w] = newSliceScratch(g.dims)
		}
		r.drawSlice(scratch[w], k)
	})
	if len(g.sub) == 1 && g.dims[2] > 1 {
		tmp := make([]float32, n)
		smoothZ(tmp, r.img, g.dims)
		r.img = tmp
	}
	parallel.Each(g.dims[2], workers, func(_, k int) { r.finishSlice(k) })
	if s.Shift == ShiftFlipped {
		flipZ(r.img, g.dims)
		flipZ(r.labels, g.dims)
		flipZ(r.mask, g.dims)
	}
	return r.result(), nil
}

type renderer struct {
	s      *Subject
	g      *grid
	a      *anatomy
	c      contrast
	img    []float32
	labels []Tissue
	mask   []uint8

	dp               [3]float64 // one voxel step along i in the standard head frame
	fold, low, shape *rowSteps

	airOnce sync.Once
	air     []float32
}

// span returns the voxel range [lo, hi) of a row p0 + t·dp inside the
// axis-aligned ellipsoid with semi-axes ax centred at 0, clipped to [0, n).
func span(p0, dp, ax [3]float64, n int) (int, int) {
	var qa, qb, qc float64
	for i := 0; i < 3; i++ {
		u, v := p0[i]/ax[i], dp[i]/ax[i]
		qa += v * v
		qb += 2 * u * v
		qc += u * u
	}
	qc--
	disc := qb*qb - 4*qa*qc
	if qa == 0 || disc <= 0 {
		return 0, 0
	}
	sq := math.Sqrt(disc)
	t0, t1 := (-qb-sq)/(2*qa), (-qb+sq)/(2*qa)
	lo := max(0, int(math.Ceil(t0)))
	hi := min(n, int(math.Floor(t1))+1)
	if hi < lo {
		return 0, 0
	}
	return lo, hi
}

// sliceScratch is one goroutine's working space for drawSlice.
type sliceScratch struct {
	acc, tmp         []float64
	fold, low, shape []float64
}

func newSliceScratch(dims [3]int) *sliceScratch {
	nx, ny := dims[0], dims[1]
	return &sliceScratch{acc: make([]float64, nx*ny), tmp: make([]float64, nx*ny),
		fold: make([]float64, nx), low: make([]float64, nx), shape: make([]float64, nx)}
}

// drawSlice labels slice k, maps the labels to intensities (averaging the
// sub-slices) and smooths in plane.
func (r *renderer) drawSlice(sc *sliceScratch, k int) {
	g, a := r.g, r.a
	nx, ny := g.dims[0], g.dims[1]
	acc := sc.acc
	clear(acc)
	fold, low, shape := sc.fold, sc.low, sc.shape
	dp := r.dp
	centre := len(g.sub) / 2
	wsub := 1 / float64(len(g.sub))
	for si, off := range g.sub {
		for j := 0; j < ny; j++ {
			w := g.affine.Apply([3]float64{0, float64(j), float64(k)})
			w[2] += off
			p0 := a.toStandard(w)
			h0, h1 := span(p0, dp, a.head, nx)
			b0, b1 := span(p0, dp, a.bound, nx)
			if h1 > h0 {
				r.shape.fillRow(shape[h0:h1], p0, h0)
			}
			if b1 > b0 {
				r.fold.fillRow(fold[b0:b1], p0, b0)
				r.low.fillRow(low[b0:b1], p0, b0)
			}
			row := j * nx
			off3 := k * nx * ny
			for i := 0; i < nx; i++ {
				p := [3]float64{p0[0] + float64(i)*dp[0], p0[1] + float64(i)*dp[1], p0[2] + float64(i)*dp[2]}
				var t Tissue
				var code uint8
				switch {
				case i < h0 || i >= h1:
					t = a.neck(p)
				case i < b0 || i >= b1:
					d := a.depth(p, shape[i])
					if d >= 0 { // cannot happen: the bound contains the hull
						d = -1e-9
					}
					t = a.outer(p, -d)
				default:
					fv := fieldVals{fold: fold[i], low: low[i], shape: shape[i]}
					t, code = a.classify(p, &fv)
				}
				acc[row+i] += r.c.value[t] * wsub
				if si == centre {
					r.labels[off3+row+i] = t
				}
				if code != 0 && r.mask[off3+row+i] == 0 {
					r.mask[off3+row+i] = code
				}
			}
		}
	}
	smoothXY(r.img[k*nx*ny:(k+1)*nx*ny], acc, sc.tmp, nx, ny)
}

// The point spread: a [1/4, 1/2, 1/4] kernel along each axis, about 1.2
// voxels full width at half maximum, gives partial-volume edges.
func smoothXY(out []float32, in, tmp []float64, nx, ny int) {
	for j := 0; j < ny; j++ {
		r := in[j*nx : (j+1)*nx]
		for i := 0; i < nx; i++ {
			l, h := max(i-1, 0), min(i+1, nx-1)
			tmp[j*nx+i] = 0.25*r[l] + 0.5*r[i] + 0.25*r[h]
		}
	}
	for j := 0; j < ny; j++ {
		l, h := max(j-1, 0), min(j+1, ny-1)
		for i := 0; i < nx; i++ {
			out[j*nx+i] = float32(0.25*tmp[l*nx+i] + 0.5*tmp[j*nx+i] + 0.25*tmp[h*nx+i])
		}
	}
}

func smoothZ(out, in []float32, dims [3]int) {
	plane := dims[0] * dims[1]
	for k := 0; k < dims[2]; k++ {
		l, h := max(k-1, 0), min(k+1, dims[2]-1)
		a, b, c := in[l*plane:(l+1)*plane], in[k*plane:(k+1)*plane], in[h*plane:(h+1)*plane]
		o := out[k*plane : (k+1)*plane]
		for i := range o {
			o[i] = 0.25*a[i] + 0.5*b[i] + 0.25*c[i]
		}
	}
}

// finishSlice applies the bias field and the noise to slice k and rounds to
// integers. Each slice has its own random stream, so the result does not
// depend on the number of workers.
func (r *renderer) finishSlice(k int) {
	g := r.g
	nx, ny := g.dims[0], g.dims[1]
	rng := newNormals(newRand(r.s.Seed, r.s.Index, streamNoise+uint64(k)))
	sigma, amp, rician := r.c.sigma, r.c.biasAmp, r.c.rician
	air := r.airNoise()
	img := r.img[k*nx*ny : (k+1)*nx*ny]
	bias := r.s.draw.bias
	for j := 0; j < ny; j++ {
		w0 := g.affine.Apply([3]float64{0, float64(j), float64(k)})
		y, z := w0[1]/90, w0[2]/90
		// Bias b(x) = 1 + amp·(c0 + c1·x + c2·x²) along the row, from a
		// second-order polynomial in normalised world coordinates.
		c0 := bias[1]*y + bias[2]*z + bias[4]*y*y + bias[5]*z*z + bias[7]*y*z
		c1 := bias[0] + bias[6]*y + bias[8]*z
		c2 := bias[3]
		row := img[j*nx : (j+1)*nx]
		for i, s := range row {
			if rician && s == 0 {
				// Zero signal: the Rician magnitude is Rayleigh distributed.
				row[i] = air[rng.index()]
				continue
			}
			x := (w0[0] + float64(i)*g.affine[0][0]) / 90
			v := float64(s) * clamp(1+amp*(c0+c1*x+c2*x*x), 0.6, 1.4)
			if rician {
				re, im := v+sigma*rng.next(), sigma*rng.next()
				v = math.Sqrt(re*re + im*im)
			} else {
				v += sigma * rng.next()
			}
			row[i] = float32(clamp(math.Round(v), r.c.minValue, 32767))
		}
	}
}

// airNoise is the rounded Rayleigh noise of zero-signal voxels by table index.
func (r *renderer) airNoise() []float32 {
	r.airOnce.Do(func() {
		t := rayleighTable()
		r.air = make([]float32, len(t))
		for i, q := range t {
			r.air[i] = float32(clamp(math.Round(r.c.sigma*q), r.c.minValue, 32767))
		}
	})
	return r.air
}

func flipZ[T any](d []T, dims [3]int) {
	plane := dims[0] * dims[1]
	for k := 0; k < dims[2]/2; k++ {
		a := d[k*plane : (k+1)*plane]
		b := d[(dims[2]-1-k)*plane : (dims[2]-k)*plane]
		for i := range a {
			a[i], b[i] = b[i], a[i]
		}
	}
}

// result assembles the case.
func (r *renderer) result() *Case {
	s, g := r.s, r.g
	meta := r.c.meta
	meta.SliceThicknessMm = g.affine.Spacing()[2]
	meta.DataType = "int16"
	meta.NumVolumes = 1
	meta.Description = notice.Short
	v := &volume.Volume{Data: r.img, Dims: g.dims, Affine: g.affine, Meta: meta,
		Patient: volume.Identifiers{
			Name:        fmt.Sprintf("DEMO^SUBJECT%04d", s.Index+1),
			ID:          s.ID,
			Institution: Institution,
		}}
	md := make([]float32, len(r.mask))
	for i, m := range r.mask {
		md[i] = float32(m)
	}
	mmeta := volume.Metadata{DataType: "uint8", NumVolumes: 1, Description: notice.Short,
		SeriesDescription: "atrophy pattern ground truth"}
	mv := &volume.Volume{Data: md, Dims: g.dims, Affine: g.affine, Meta: mmeta}
	sp := g.affine.Spacing()
	voxML := sp[0] * sp[1] * sp[2] / 1000
	counts := make([]int, numTissues)
	for _, t := range r.labels {
		counts[t]++
	}
	vols := make(map[Tissue]float64, numTissues)
	for t, n := range counts {
		vols[Tissue(t)] = float64(n) * voxML
	}
	return &Case{Subject: *s, Volume: v, Mask: mv, Labels: r.labels, VolumesML: vols}
}

// Institution is the invented institution of the demo scenario.
const Institution = "Harbourside Memory Research Unit"
