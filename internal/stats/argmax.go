package stats

// Argmax is the index of the largest value of x, the first of equals (0 for
// no values; a NaN is never larger): the predicted class of a probability
// or logit vector.
func Argmax(x []float64) int {
	best := 0
	for k := range x {
		if x[k] > x[best] {
			best = k
		}
	}
	return best
}
