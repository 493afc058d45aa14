package stats

import "math"

// Brier is the Brier score (Brier 1950, Monthly Weather Review 78:1–3) of
// probabilities p of the positive class against the truth: the mean of
// (p_i − y_i)², y_i = 1 for a positive case (sklearn's brier_score_loss).
// A proper scoring rule, unbiased by binning, so it is reported beside the
// ECE. NaN for no cases, different lengths, or a probability outside
// [0, 1] (NaN included).
func Brier(p []float64, truth []bool) float64 {
	if len(p) == 0 || len(p) != len(truth) {
		return math.NaN()
	}
	var s float64
	for i, x := range p {
		if !(x >= 0 && x <= 1) {
			return math.NaN()
		}
		y := 0.0
		if truth[i] {
			y = 1
		}
		s += (x - y) * (x - y)
	}
	return s / float64(len(p))
}
