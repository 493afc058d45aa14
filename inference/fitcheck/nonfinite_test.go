package fitcheck

import (
	"math"
	"testing"
)

// A NaN score has no order: fitting a threshold on it is an error, not a
// threshold chosen by where sort put the NaN; NaN features are an error of
// the Mahalanobis score, not a silent "no class means".
func TestNonFiniteScores(t *testing.T) {
	if _, _, err := ThresholdAt([]float64{1, math.NaN(), 2}, 0.95, "max"); err == nil {
		t.Error("ThresholdAt accepted a NaN")
	}
	prec := [][]float64{{1, 0}, {0, 1}}
	means := [][]float64{{0, 0}, {1, 1}}
	for _, f := range [][]float64{{math.NaN(), 0}, {math.Inf(1), 0}} {
		if _, _, err := Mahalanobis(f, means, prec); err == nil {
			t.Errorf("Mahalanobis accepted %v", f)
		}
	}
	if d, c, err := Mahalanobis([]float64{1, 1}, means, prec); err != nil || d != 0 || c != 1 {
		t.Errorf("Mahalanobis of a class mean: %v, %d, %v", d, c, err)
	}
}
