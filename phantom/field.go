package phantom

import (
	"math"
	"math/rand/v2"
)

// wave is one plane wave amp·sin(k·p + phase) of a smooth random field.
type wave struct {
	k          [3]float64 // radians per millimetre
	phase, amp float64
}

// field is a band-limited random field: a sum of plane waves with random
// directions, wavelengths in a band and random phases, scaled to unit
// variance. Along a row of voxels each wave is advanced by a rotation, so
// a voxel costs a few multiplications per wave instead of a sine.
type field []wave

// newField draws n waves with wavelengths in [minMM, maxMM].
func newField(r *rand.Rand, n int, minMM, maxMM float64) field {
	f := make(field, n)
	amp := math.Sqrt(2 / float64(n))
	for i := range f {
		dir := unitVector(r)
		lambda := minMM + (maxMM-minMM)*r.Float64()
		kk := 2 * math.Pi / lambda
		f[i] = wave{k: [3]float64{dir[0] * kk, dir[1] * kk, dir[2] * kk},
			phase: 2 * math.Pi * r.Float64(), amp: amp}
	}
	return f
}

// unitVector is uniform on the sphere.
func unitVector(r *rand.Rand) [3]float64 {
	z := 2*r.Float64() - 1
	phi := 2 * math.Pi * r.Float64()
	s := math.Sqrt(1 - z*z)
	return [3]float64{s * math.Cos(phi), s * math.Sin(phi), z}
}

// at evaluates the field at p.
func (f field) at(p [3]float64) float64 {
	var v float64
	for _, w := range f {
		v += w.amp * math.Sin(w.k[0]*p[0]+w.k[1]*p[1]+w.k[2]*p[2]+w.phase)
	}
	return v
}

// fillRow sets out[t] to the field at p0 + (first+t)·dp for t in [0, len(out)).
func (f field) fillRow(out []float64, p0, dp [3]float64, first int) {
	clear(out)
	i := 0
	for ; i+1 < len(f); i += 2 {
		s1, c1, sd1, cd1 := f[i].start(p0, dp, first)
		s2, c2, sd2, cd2 := f[i+1].start(p0, dp, first)
		for t := range out {
			out[t] += s1 + s2
			s1, c1 = s1*cd1+c1*sd1, c1*cd1-s1*sd1
			s2, c2 = s2*cd2+c2*sd2, c2*cd2-s2*sd2
		}
	}
	if i < len(f) {
		s, c, sd, cd := f[i].start(p0, dp, first)
		for t := range out {
			out[t] += s
			s, c = s*cd+c*sd, c*cd-s*sd
		}
	}
}

// start returns amp·sin and amp·cos of the phase at voxel first of the row,
// and the sine and cosine of the phase step per voxel.
func (w *wave) start(p0, dp [3]float64, first int) (s, c, sd, cd float64) {
	step := w.k[0]*dp[0] + w.k[1]*dp[1] + w.k[2]*dp[2]
	ph := w.k[0]*p0[0] + w.k[1]*p0[1] + w.k[2]*p0[2] + w.phase + float64(first)*step
	s, c = math.Sincos(ph)
	sd, cd = math.Sincos(step)
	return s * w.amp, c * w.amp, sd, cd
}

// rmsK is the root mean square wavenumber (radians per millimetre), the
// r.m.s. gradient of the unit-variance field.
func (f field) rmsK() float64 {
	var s float64
	for _, w := range f {
		s += w.k[0]*w.k[0] + w.k[1]*w.k[1] + w.k[2]*w.k[2]
	}
	return math.Sqrt(s / float64(len(f)))
}
