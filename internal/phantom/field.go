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

// rowSteps holds, for each wave of a field, the phase step and its sine and
// cosine for one voxel step dp along a row; dp is the same for every row of
// a case, so these are computed once.
type rowSteps struct {
	f            field
	step, sd, cd []float64
}

func (f field) steps(dp [3]float64) *rowSteps {
	r := &rowSteps{f: f, step: make([]float64, len(f)), sd: make([]float64, len(f)), cd: make([]float64, len(f))}
	for i, w := range f {
		r.step[i] = w.k[0]*dp[0] + w.k[1]*dp[1] + w.k[2]*dp[2]
		r.sd[i], r.cd[i] = math.Sincos(r.step[i])
	}
	return r
}

// fillRow sets out[t] to the field at p0 + (first+t)·dp for t in [0, len(out)).
func (r *rowSteps) fillRow(out []float64, p0 [3]float64, first int) {
	clear(out)
	i := 0
	for ; i+1 < len(r.f); i += 2 {
		s1, c1 := r.start(i, p0, first)
		s2, c2 := r.start(i+1, p0, first)
		sd1, cd1, sd2, cd2 := r.sd[i], r.cd[i], r.sd[i+1], r.cd[i+1]
		for t := range out {
			out[t] += s1 + s2
			s1, c1 = s1*cd1+c1*sd1, c1*cd1-s1*sd1
			s2, c2 = s2*cd2+c2*sd2, c2*cd2-s2*sd2
		}
	}
	if i < len(r.f) {
		s, c := r.start(i, p0, first)
		sd, cd := r.sd[i], r.cd[i]
		for t := range out {
			out[t] += s
			s, c = s*cd+c*sd, c*cd-s*sd
		}
	}
}

// start returns amp·sin and amp·cos of wave i's phase at voxel first of the row.
func (r *rowSteps) start(i int, p0 [3]float64, first int) (s, c float64) {
	w := &r.f[i]
	ph := w.k[0]*p0[0] + w.k[1]*p0[1] + w.k[2]*p0[2] + w.phase + float64(first)*r.step[i]
	s, c = math.Sincos(ph)
	return s * w.amp, c * w.amp
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
