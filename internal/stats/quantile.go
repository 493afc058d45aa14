// Package stats holds Brightfold's numeric kernels: numbers in, numbers
// out, no I/O. Each function names the published definition it follows and
// the reference library its test checks it against.
package stats

import (
	"math"
	"sort"
)

// Quantile returns the u-quantile (u in [0, 1], clamped) of sorted values
// by linear interpolation between order statistics: position
// h = u·(n − 1), value x[⌊h⌋] + (h − ⌊h⌋)·(x[⌊h⌋+1] − x[⌊h⌋]) — definition 7
// of Hyndman & Fan 1996 (Am. Stat. 50(4):361–365), numpy.quantile's default
// ("linear"), computed in float64. NaN for no values, a NaN level, or NaN
// values: sorted as sort.Float64s and slices.Sort sort, NaNs come first, so
// a NaN at either end is found in constant time. It is the one quantile
// rule of Brightfold; a percentile p (0–100) is Quantile(sorted, p/100).
func Quantile[T ~float32 | ~float64](sorted []T, u float64) float64 {
	n := len(sorted)
	if n == 0 || math.IsNaN(u) || math.IsNaN(float64(sorted[0])) || math.IsNaN(float64(sorted[n-1])) {
		return math.NaN()
	}
	k, frac := quantilePosition(n, u)
	if frac == 0 {
		return float64(sorted[k])
	}
	return quantileLerp(float64(sorted[k]), float64(sorted[k+1]), frac)
}

// quantilePosition splits the position h = u·(n − 1) of level u (clamped to
// [0, 1]) into the order statistic k = ⌊h⌋ and the fraction h − k, which is
// 0 at the last order statistic.
func quantilePosition(n int, u float64) (int, float64) {
	h := math.Max(0, math.Min(1, u)) * float64(n-1)
	k := int(math.Floor(h))
	if k >= n-1 {
		return n - 1, 0
	}
	return k, h - float64(k)
}

// quantileLerp interpolates between neighbouring order statistics a ≤ b.
// Between an infinity and another value it returns the infinity (the limit
// of the interpolation; numpy returns NaN there), and between equal values
// that value.
func quantileLerp(a, b, frac float64) float64 {
	switch {
	case a == b || math.IsInf(a, 0):
		return a
	case math.IsInf(b, 0):
		return b
	}
	return a + frac*(b-a)
}

// Quantiles returns Quantile(sorted, u) for each of the levels.
func Quantiles[T ~float32 | ~float64](sorted []T, levels []float64) []float64 {
	out := make([]float64, len(levels))
	for i, u := range levels {
		out[i] = Quantile(sorted, u)
	}
	return out
}

// EvenLevels returns n quantile levels (k − 0.5)/n, k = 1..n.
func EvenLevels(n int) []float64 {
	out := make([]float64, n)
	for k := range out {
		out[k] = (float64(k) + 0.5) / float64(n)
	}
	return out
}

// SelectQuantile returns Quantile(sort(x), u) in expected linear time by
// selection instead of sorting; it reorders x. NaN for no values, a NaN
// level or any NaN value.
func SelectQuantile(x []float64, u float64) float64 {
	n := len(x)
	if n == 0 || math.IsNaN(u) || anyNaN(x) {
		return math.NaN()
	}
	k, frac := quantilePosition(n, u)
	lo := quantileSelectK(x, k)
	if frac == 0 {
		return lo
	}
	hi := x[k+1]
	for _, v := range x[k+2:] { // after quantileSelectK, x[k+1:] holds values ≥ x[k]
		hi = math.Min(hi, v)
	}
	return quantileLerp(lo, hi, frac)
}

// quantileSelectK reorders x so that x[k] is the k-th smallest, everything before
// it no larger and everything after it no smaller (Hoare's selection with a
// median-of-three pivot), and returns x[k].
func quantileSelectK(x []float64, k int) float64 {
	lo, hi := 0, len(x)-1
	for hi > lo {
		if hi-lo < 16 {
			sort.Float64s(x[lo : hi+1])
			return x[k]
		}
		mid := lo + (hi-lo)/2
		if x[mid] < x[lo] {
			x[mid], x[lo] = x[lo], x[mid]
		}
		if x[hi] < x[lo] {
			x[hi], x[lo] = x[lo], x[hi]
		}
		if x[hi] < x[mid] {
			x[hi], x[mid] = x[mid], x[hi]
		}
		p := x[mid]
		i, j := lo, hi
		for i <= j {
			for x[i] < p {
				i++
			}
			for x[j] > p {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return x[k]
		}
	}
	return x[k]
}
