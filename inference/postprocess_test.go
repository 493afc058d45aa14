package inference

import "testing"

// Probabilities are shown with two decimals and never as certainties.
func TestFormatProbability(t *testing.T) {
	for p, want := range map[float64]string{0.5: "0.50", 0.98: "0.98", 0.995: "> 0.99", 1: "> 0.99", 0.004: "< 0.01", 0.01: "0.01", 0: "< 0.01"} {
		if got := FormatProbability(p); got != want {
			t.Errorf("FormatProbability(%v) = %q, want %q", p, got, want)
		}
	}
}
