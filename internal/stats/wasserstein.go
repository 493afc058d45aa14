package stats

import (
	"math"
	"sort"
)

// Wasserstein1 is the Wasserstein-1 (earth mover's) distance between the
// empirical distributions of samples a and b: ∫ |F_a(t) − F_b(t)| dt, the
// integral of the absolute difference of the two empirical CDFs (for 1D
// distributions this equals ∫₀¹ |F_a⁻¹(u) − F_b⁻¹(u)| du; Ramdas, García
// Trillos & Cuturi 2017, "On Wasserstein two-sample testing", Section 2).
// NaN when either sample is empty or holds a NaN or ±Inf (the distance to a
// distribution with mass at infinity is not a finite number; a NaN has no
// place in a CDF). +Inf when finite samples lie so far apart that the
// distance overflows float64.
func Wasserstein1(a, b []float64) float64 {
	if len(a) == 0 || len(b) == 0 || !allFinite(a) || !allFinite(b) {
		return math.NaN()
	}
	sa := append([]float64(nil), a...)
	sb := append([]float64(nil), b...)
	sort.Float64s(sa)
	sort.Float64s(sb)
	var dist float64
	i, j := 0, 0
	prev := math.Min(sa[0], sb[0])
	na, nb := float64(len(sa)), float64(len(sb))
	for i < len(sa) || j < len(sb) {
		var t float64
		switch {
		case j >= len(sb) || (i < len(sa) && sa[i] <= sb[j]):
			t = sa[i]
		default:
			t = sb[j]
		}
		// A step where the two distribution functions agree adds nothing;
		// skipping it keeps 0 · (t − prev) from becoming NaN when the step
		// overflows (values near ±MaxFloat64).
		if w := math.Abs(float64(i)/na - float64(j)/nb); w != 0 {
			dist += w * (t - prev)
		}
		prev = t
		for i < len(sa) && sa[i] == t {
			i++
		}
		for j < len(sb) && sb[j] == t {
			j++
		}
	}
	return dist
}

// QuantileW1 approximates the Wasserstein-1 distance from two quantile
// functions sampled at the same levels: the trapezoid-free midpoint sum
// Σ_k |q_k − r_k| · Δu_k, where Δu_k is the width of the level interval
// around level k (levels spread evenly in (0, 1) give the plain mean of
// |q_k − r_k|). See Wasserstein1 for the identity used. NaN when the
// lengths differ or are zero, or when any value is NaN or ±Inf.
func QuantileW1(levels, q, r []float64) float64 {
	n := len(levels)
	if n == 0 || len(q) != n || len(r) != n || !allFinite(levels) || !allFinite(q) || !allFinite(r) {
		return math.NaN()
	}
	var s, wsum float64
	for k := 0; k < n; k++ {
		lo := 0.0
		if k > 0 {
			lo = (levels[k-1] + levels[k]) / 2
		}
		hi := 1.0
		if k < n-1 {
			hi = (levels[k] + levels[k+1]) / 2
		}
		s += math.Abs(q[k]-r[k]) * (hi - lo)
		wsum += hi - lo
	}
	return s / wsum
}
