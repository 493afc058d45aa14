package study

import "testing"

// The choice rule of the LRP rule search: a candidate whose median input
// share is near 1 but whose tail is not (a case at −7) is not near 1, the
// best-localising near-1 candidate wins, the first of equals is kept, and
// with no candidate near 1 nothing is chosen.
func TestRuleSearchChoice(t *testing.T) {
	flat := func(v float64, n int) []float64 {
		out := make([]float64, n)
		for i := range out {
			out[i] = v
		}
		return out
	}
	tail := append(flat(1.0, 19), -7)
	cands := []MapFigures{
		{Name: "far", InputShare: flat(2.3, 20), MassAccuracy: flat(0.066, 20)},
		{Name: "tail", InputShare: tail, MassAccuracy: flat(0.065, 20)},
		{Name: "near, worse", InputShare: flat(1.01, 20), MassAccuracy: flat(0.050, 20)},
		{Name: "near, best", InputShare: flat(0.99, 20), MassAccuracy: flat(0.055, 20)},
		{Name: "near, equal", InputShare: flat(1.0, 20), MassAccuracy: flat(0.055, 20)},
	}
	if nearOne(cands[1].InputShare) {
		t.Errorf("a candidate with a case at -7 counts as near 1")
	}
	if got := choose(cands); got != 3 {
		t.Errorf("chose %d, want 3 (near 1, highest mass accuracy, first of equals)", got)
	}
	if got := choose(cands[:2]); got != -1 {
		t.Errorf("chose %d with no candidate near 1", got)
	}
}
