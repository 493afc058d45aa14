package stats

import "math"

// Brier is the Brier score (Brier 1950, Monthly Weather Review 78:1–3) of
// probabilities p of the positive class against the truth: the mean of
// (p_i − y_i)², y_i = 1 for a positive case. NaN for no cases.
func Brier(p []float64, truth []bool) float64 {
	if len(p) == 0 || len(p) != len(truth) {
		return math.NaN()
	}
	var s float64
	for i, x := range p {
		y := 0.0
		if truth[i] {
			y = 1
		}
		s += (x - y) * (x - y)
	}
	return s / float64(len(p))
}
