package stats

import "fmt"

// ECEInterval is a percentile bootstrap interval at level (e.g. 0.95) for
// the binned ECE of ECE(confidence, correct, bins): BootstrapPairs resamples the
// cases with replacement resamples times (Efron & Tibshirani 1993, An
// Introduction to the Bootstrap, Section 13.3), from a PCG generator seeded
// with seed so that the interval is reproducible, and the ECE of each
// resample is computed; the interval is the (1 − level)/2 and (1 + level)/2
// quantiles (stats.Quantile) of those ECEs. Binned ECE is biased upwards for
// well-calibrated models and small samples (Kumar et al. 2019, NeurIPS,
// "Verified uncertainty calibration", Section 5; Roelofs et al. 2022,
// AISTATS, "Mitigating bias in calibration error estimation"), so the
// interval says how far a single ECE can be trusted, not where the true
// calibration error lies: the lower end can sit above a true error of 0.
// An error for no cases, different lengths, a confidence outside [0, 1]
// (NaN included), fewer than 10 resamples or a level outside (0, 1).
func ECEInterval(confidence []float64, correct []bool, bins, resamples int, seed uint64, level float64) (lo, hi float64, err error) {
	n := len(confidence)
	switch {
	case n == 0 || n != len(correct):
		return 0, 0, fmt.Errorf("ECE interval: need confidences and outcomes of the same, non-zero length, got %d and %d", n, len(correct))
	case bins < 1 || resamples < 10:
		return 0, 0, fmt.Errorf("ECE interval: need at least 1 bin and 10 resamples, got %d and %d", bins, resamples)
	case !(level > 0 && level < 1):
		return 0, 0, fmt.Errorf("ECE interval: level %v is not in (0, 1)", level)
	}
	for i, c := range confidence {
		if !(c >= 0 && c <= 1) {
			return 0, 0, fmt.Errorf("ECE interval: confidence %d is %v, not in [0, 1]", i, c)
		}
	}
	b, err := BootstrapPairs(confidence, correct, resamples, seed, level, func(c []float64, ok []bool) float64 {
		return ECE(c, ok, bins)
	})
	if err != nil {
		return 0, 0, fmt.Errorf("ECE interval: %w", err)
	}
	return b.Lo, b.Hi, nil
}
