package stats

import (
	"errors"
	"fmt"
	"math"
)

// ECE is the expected calibration error of Guo et al. 2017 (ICML), Eq. 3:
// Σ_m |B_m|/n · |acc(B_m) − conf(B_m)| over bins equal-width bins of
// confidence, bin m holding confidences in ((m−1)/M, m/M] (a confidence of
// exactly 0 goes to the first bin). Guo et al. use M = 15. NaN when there
// are no cases, the lengths differ, bins < 1, or a confidence is not in
// [0, 1] (NaN included).
func ECE(confidence []float64, correct []bool, bins int) float64 {
	n := len(confidence)
	if n == 0 || n != len(correct) || bins < 1 {
		return math.NaN()
	}
	for _, c := range confidence {
		if !(c >= 0 && c <= 1) {
			return math.NaN()
		}
	}
	cnt := make([]float64, bins)
	acc := make([]float64, bins)
	conf := make([]float64, bins)
	for i, c := range confidence {
		b := int(math.Ceil(c*float64(bins))) - 1
		b = max(0, min(bins-1, b))
		cnt[b]++
		conf[b] += c
		if correct[i] {
			acc[b]++
		}
	}
	var e float64
	for b := range cnt {
		if cnt[b] > 0 {
			e += cnt[b] / float64(n) * math.Abs(acc[b]/cnt[b]-conf[b]/cnt[b])
		}
	}
	return e
}

// NLL is the mean negative log-likelihood −(1/n) Σ log softmax(z_i/T)[y_i].
// NaN when there are no cases, the lengths differ, a label is out of range,
// or T is not a positive finite number; a NaN logit gives NaN, a +Inf logit
// of a wrong class +Inf.
func NLL(logits [][]float64, labels []int, T float64) float64 {
	if len(logits) == 0 || len(logits) != len(labels) || !(T > 0) || math.IsInf(T, 1) {
		return math.NaN()
	}
	for i, z := range logits {
		if labels[i] < 0 || labels[i] >= len(z) {
			return math.NaN()
		}
	}
	var s float64
	for i, z := range logits {
		sc := make([]float64, len(z))
		for k, x := range z {
			sc[k] = x / T
		}
		s += LogSumExp(sc) - sc[labels[i]]
	}
	return s / float64(len(logits))
}

// FitTemperature finds the temperature T that minimises the NLL of the
// validation logits (temperature scaling, Guo et al. 2017, Section 4.2). The
// NLL is convex in β = 1/T, so a golden-section search over β in
// [1/20, 1/0.05] finds the minimum; tol is the tolerance on β. A NaN or
// ±Inf logit is an error.
func FitTemperature(logits [][]float64, labels []int) (float64, error) {
	if len(logits) == 0 || len(logits) != len(labels) {
		return 0, errors.New("fit temperature: need logits and labels of the same, non-zero length")
	}
	for i, z := range logits {
		if labels[i] < 0 || labels[i] >= len(z) {
			return 0, fmt.Errorf("fit temperature: label %d out of range for %d logits", labels[i], len(z))
		}
		if !allFinite(z) {
			return 0, fmt.Errorf("fit temperature: case %d has a logit that is not a finite number", i)
		}
	}
	f := func(beta float64) float64 { return NLL(logits, labels, 1/beta) }
	a, b := 1.0/20, 1/0.05
	g := (math.Sqrt(5) - 1) / 2
	c, d := b-g*(b-a), a+g*(b-a)
	fc, fd := f(c), f(d)
	for b-a > 1e-9 {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - g*(b-a)
			fc = f(c)
		} else {
			a, c, fc = c, d, fd
			d = a + g*(b-a)
			fd = f(d)
		}
	}
	return 1 / ((a + b) / 2), nil
}

// LogSumExp is log Σ exp(z_i), computed stably: NaN when any z_i is NaN,
// +Inf when one is +Inf, −Inf for no values or all −Inf.
func LogSumExp(z []float64) float64 {
	if anyNaN(z) {
		return math.NaN()
	}
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
