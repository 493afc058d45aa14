// Package fitcheck holds the computations behind Brightfold's "Fit check":
// the out-of-distribution scores (maximum softmax probability, energy,
// squared Mahalanobis distance, Wasserstein-1 distance of intensity profiles, a
// Hounsfield-unit signature, header and head measurements) and the parts of
// fitting their references that are specific to it (class means, thresholds
// at a retention). The numeric kernels it builds on (Ledoit-Wolf shrinkage,
// temperature scaling, AUROC, expected calibration error, quantiles) live in
// internal/stats. It knows nothing of model cards; package inference applies
// the card's thresholds.
package fitcheck

import (
	"errors"
	"fmt"
	"math"

	"brightfold/internal/stats"
)

// Check is one fit-check result.
type Check struct {
	Name        string  `json:"name"`
	Value       float64 `json:"value"`
	Threshold   string  `json:"threshold"` // e.g. "≤ 12.3" or "0.8 to 4.0"
	Pass        bool    `json:"pass"`
	Required    bool    `json:"required"`
	Explanation string  `json:"explanation"`
	// Severity is the factor by which the value is beyond its threshold:
	// above 1 exactly when the check fails, at most 1 when it passes
	// (package inference defines it per check).
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
	return -T * stats.LogSumExp(s)
}

// Mahalanobis returns the squared Mahalanobis distance
// min_c (f − μ_c)ᵀ Σ⁻¹ (f − μ_c) over the class means,
// with precision = Σ⁻¹ shared by all classes, and the index of the closest
// class: the confidence score of Lee et al. 2018 (NeurIPS), Eq. 2 (there
// M(x) is its negative, maximised over classes).
func Mahalanobis(f []float64, means [][]float64, precision [][]float64) (float64, int, error) {
	d := len(f)
	if len(precision) != d {
		return 0, -1, fmt.Errorf("mahalanobis: features have %d values, precision is %d×%d", d, len(precision), len(precision))
	}
	for i, x := range f {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return 0, -1, fmt.Errorf("mahalanobis: feature %d is not a finite number", i)
		}
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
		if q < best || arg < 0 {
			best, arg = q, c
		}
	}
	if arg < 0 {
		return 0, -1, errors.New("mahalanobis: no class means")
	}
	return best, arg, nil
}
