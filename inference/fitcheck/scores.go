// Package fitcheck holds the computations behind Brightfold's "Fit check":
// the out-of-distribution scores (maximum softmax probability, energy,
// Mahalanobis distance, Wasserstein-1 distance of intensity profiles, a
// Hounsfield-unit signature, header and head measurements), the fitting of
// their references (shared covariance with Ledoit-Wolf shrinkage,
// thresholds at a retention, temperature scaling) and the evaluation
// figures (AUROC, expected calibration error). It knows nothing of model
// cards; package inference applies the card's thresholds.
package fitcheck

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// Check is one fit-check result.
type Check struct {
	Name        string  `json:"name"`
	Value       float64 `json:"value"`
	Threshold   string  `json:"threshold"` // e.g. "≤ 12.3" or "0.8 to 4.0"
	Pass        bool    `json:"pass"`
	Required    bool    `json:"required"`
	Explanation string  `json:"explanation"`
	// Severity puts every check on one scale: above 1 exactly when the check
	// fails, larger the further the value is beyond its threshold.
	Severity float64 `json:"severity"`
}

// Verdicts.
const (
	InDistribution    = "in-distribution"
	OutOfDistribution = "out-of-distribution"
)

// Verdict is OutOfDistribution when any required check fails.
func Verdict(checks []Check) string {
	for _, c := range checks {
		if c.Required && !c.Pass {
			return OutOfDistribution
		}
	}
	return InDistribution
}

// Score is the largest severity among the required checks: the continuous
// score behind the verdict, which is out-of-distribution exactly when it
// exceeds 1 (for checks whose severity is set consistently with Pass).
func Score(checks []Check) float64 {
	s := 0.0
	for _, c := range checks {
		if c.Required && !math.IsNaN(c.Severity) {
			s = math.Max(s, c.Severity)
		}
	}
	return s
}

// Softmax returns exp(z_i/T) / Σ_j exp(z_j/T), computed stably.
func Softmax(z []float64, T float64) []float64 {
	m := math.Inf(-1)
	for _, x := range z {
		m = math.Max(m, x/T)
	}
	out := make([]float64, len(z))
	var s float64
	for i, x := range z {
		out[i] = math.Exp(x/T - m)
		s += out[i]
	}
	for i := range out {
		out[i] /= s
	}
	return out
}

// Sigmoid is 1 / (1 + exp(−x)), computed stably.
func Sigmoid(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	e := math.Exp(x)
	return e / (1 + e)
}

// LogSumExp is log Σ exp(z_i), computed stably.
func LogSumExp(z []float64) float64 {
	m := math.Inf(-1)
	for _, x := range z {
		m = math.Max(m, x)
	}
	if math.IsInf(m, 0) {
		return m
	}
	var s float64
	for _, x := range z {
		s += math.Exp(x - m)
	}
	return m + math.Log(s)
}

// BinaryLogits turns one sigmoid logit into the equivalent two-class logits
// (0, z): softmax of them is (1 − σ(z), σ(z)).
func BinaryLogits(z float64) []float64 { return []float64{0, z} }

// MSP is the maximum softmax probability max_i softmax(z/T)_i, the baseline
// detector of Hendrycks & Gimpel 2017 (ICLR), Section 2. Low values suggest an
// input unlike the training data.
func MSP(z []float64, T float64) float64 {
	best := 0.0
	for _, p := range Softmax(z, T) {
		best = math.Max(best, p)
	}
	return best
}

// Energy is the free energy E(x; f) = −T · log Σ_i exp(f_i(x)/T) of Liu et
// al. 2020 (NeurIPS), Eq. 1 (with the negative of E used as the score in
// Eq. 7): in-distribution inputs have lower energy.
func Energy(z []float64, T float64) float64 {
	s := make([]float64, len(z))
	for i, x := range z {
		s[i] = x / T
	}
	return -T * LogSumExp(s)
}

// Mahalanobis returns min_c (f − μ_c)ᵀ Σ⁻¹ (f − μ_c) over the class means,
// with precision = Σ⁻¹ shared by all classes, and the index of the closest
// class: the confidence score of Lee et al. 2018 (NeurIPS), Eq. 2 (there
// M(x) is its negative, maximised over classes).
func Mahalanobis(f []float64, means [][]float64, precision [][]float64) (float64, int, error) {
	d := len(f)
	if len(precision) != d {
		return 0, -1, fmt.Errorf("mahalanobis: features have %d values, precision is %d×%d", d, len(precision), len(precision))
	}
	best, arg := math.Inf(1), -1
	diff := make([]float64, d)
	for c, mu := range means {
		if len(mu) != d {
			return 0, -1, fmt.Errorf("mahalanobis: class %d mean has %d values, want %d", c, len(mu), d)
		}
		for i := range f {
			diff[i] = f[i] - mu[i]
		}
		var q float64
		for i := 0; i < d; i++ {
			var row float64
			for j := 0; j < d; j++ {
				row += precision[i][j] * diff[j]
			}
			q += diff[i] * row
		}
		if q < best {
			best, arg = q, c
		}
	}
	if arg < 0 {
		return 0, -1, errors.New("mahalanobis: no class means")
	}
	return best, arg, nil
}

// Wasserstein1 is the Wasserstein-1 (earth mover's) distance between the
// empirical distributions of samples a and b: ∫ |F_a(t) − F_b(t)| dt, the
// integral of the absolute difference of the two empirical CDFs (for 1D
// distributions this equals ∫₀¹ |F_a⁻¹(u) − F_b⁻¹(u)| du; Ramdas, García
// Trillos & Cuturi 2017, "On Wasserstein two-sample testing", Section 2).
func Wasserstein1(a, b []float64) float64 {
	if len(a) == 0 || len(b) == 0 {
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
		dist += math.Abs(float64(i)/na-float64(j)/nb) * (t - prev)
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
// |q_k − r_k|). See Wasserstein1 for the identity used.
func QuantileW1(levels, q, r []float64) float64 {
	n := len(levels)
	if n == 0 || len(q) != n || len(r) != n {
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

// Quantiles returns the values of sorted at the levels (in (0, 1)), with
// linear interpolation between order statistics (numpy's default),
// computed in float64.
func Quantiles[T ~float32 | ~float64](sorted []T, levels []float64) []float64 {
	out := make([]float64, len(levels))
	n := len(sorted)
	for i, u := range levels {
		if n == 0 {
			out[i] = math.NaN()
			continue
		}
		h := u * float64(n-1)
		lo := int(math.Floor(h))
		switch {
		case lo < 0:
			out[i] = float64(sorted[0])
		case lo >= n-1:
			out[i] = float64(sorted[n-1])
		default:
			a, b := float64(sorted[lo]), float64(sorted[lo+1])
			out[i] = a + (h-float64(lo))*(b-a)
		}
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
