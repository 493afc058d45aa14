package register

import (
	"math"
)

// mattes holds the binning of Mattes mutual information on one level.
type mattes struct {
	bins       int
	fbin       []uint8 // template bin of each level voxel (box window)
	mMin, mInv float64 // scan value → B-spline bin coordinate: (m − mMin)·mInv + 2
	table      []float64
}

func newMattes(fixed, moving *image, mask []bool, bins int) *mattes {
	fmin, fmax := math.Inf(1), math.Inf(-1)
	for i, f := range fixed.data {
		if mask != nil && !mask[i] {
			continue
		}
		fmin, fmax = math.Min(fmin, float64(f)), math.Max(fmax, float64(f))
	}
	mmin, mmax := math.Inf(1), math.Inf(-1)
	for _, m := range moving.data {
		mmin, mmax = math.Min(mmin, float64(m)), math.Max(mmax, float64(m))
	}
	mt := &mattes{bins: bins, fbin: make([]uint8, fixed.len()), mMin: mmin, table: make([]float64, bins*bins)}
	if mmax > mmin {
		// the cubic B-spline reaches 2 bins either side: keep bins 2..bins−3 for the centres
		mt.mInv = float64(bins-5) / (mmax - mmin)
	}
	fs := 0.0
	if fmax > fmin {
		fs = float64(bins) / (fmax - fmin)
	}
	for i, f := range fixed.data {
		b := int((float64(f) - fmin) * fs)
		mt.fbin[i] = uint8(min(max(b, 0), bins-1))
	}
	return mt
}

// bspline3 is the cubic B-spline and its derivative.
func bspline3(t float64) (float64, float64) {
	a := math.Abs(t)
	switch {
	case a < 1:
		return (4 - 6*a*a + 3*a*a*a) / 6, -2*t + 1.5*t*a
	case a < 2:
		u := 2 - a
		d := -0.5 * u * u
		if t < 0 {
			d = -d
		}
		return u * u * u / 6, d
	}
	return 0, 0
}

// prepare builds the joint histogram of the current samples and returns
// −MI and the per-sample derivative of −MI with respect to the scan value,
// d MI/d m_x = 1/(N·Δ) Σ_κ β3′(κ − b(m_x)) · log(p(ι_x, κ)/p_m(κ)) (Mattes
// et al. 2003, eq. 12 with the template's marginal fixed).
func (mt *mattes) prepare(e *evaluator) (float64, func(int) float64) {
	B := mt.bins
	plane := e.fixed.dims[0] * e.fixed.dims[1]
	h := e.sliceSums(B*B+1, func(k int, acc []float64) {
		for idx := k * plane; idx < (k+1)*plane; idx++ {
			m := float64(e.mv[idx])
			if m != m {
				continue
			}
			acc[B*B]++
			row := int(mt.fbin[idx]) * B
			b := (m-mt.mMin)*mt.mInv + 2
			k0 := int(b)
			for kk := k0 - 1; kk <= k0+2; kk++ {
				if kk < 0 || kk >= B {
					continue
				}
				w, _ := bspline3(float64(kk) - b)
				acc[row+kk] += w
			}
		}
	})
	if h[B*B] < 16 {
		return 0, nil
	}
	pm := make([]float64, B)
	pf := make([]float64, B)
	var total float64
	for i := 0; i < B; i++ {
		for k := 0; k < B; k++ {
			pm[k] += h[i*B+k]
			pf[i] += h[i*B+k]
			total += h[i*B+k]
		}
	}
	var mi float64
	for i := 0; i < B; i++ {
		for k := 0; k < B; k++ {
			p := h[i*B+k]
			mt.table[i*B+k] = 0
			if p <= 0 {
				continue
			}
			mt.table[i*B+k] = math.Log(p / pm[k])
			mi += p / total * math.Log(p*total/(pf[i]*pm[k]))
		}
	}
	scale := mt.mInv / total
	w := func(idx int) float64 {
		m := float64(e.mv[idx])
		row := int(mt.fbin[idx]) * B
		b := (m-mt.mMin)*mt.mInv + 2
		k0 := int(b)
		var s float64
		for kk := k0 - 1; kk <= k0+2; kk++ {
			if kk < 0 || kk >= B {
				continue
			}
			_, d := bspline3(float64(kk) - b)
			// d/dm of β3(κ − b(m)) = −β3′(κ − b)·mInv
			s -= d * mt.table[row+kk]
		}
		return -s * scale
	}
	return -mi, w
}
