package overlay

import (
	"fmt"
	"math"
)

// ShareSentence says in one line how much of the explained logit the
// map's voxels carry (the input share, Σ relevance / logit) and, for LRP,
// how much the layers' biases and the epsilon stabilisers keep, with the
// method's own check named for what it is. checks are a Map's Checks (or
// the same keys read back from relevance.json). It is GUI-free so that the
// Evidence panel, the CLI's text output and reports say the same.
func ShareSentence(method Method, checks map[string]float64) string {
	share, ok := checks["input_share"]
	if !ok || math.IsNaN(share) {
		if method == Occlusion {
			return "Occlusion values are drops of the logit when a cube is hidden, not shares of it."
		}
		return "The explained logit is 0, so the map's values are not shares of it."
	}
	s := fmt.Sprintf("The voxels carry %s of the explained logit", percent(share))
	switch method {
	case LRP:
		s += fmt.Sprintf(" (biases keep %s, stabilisers %s).", percent(checks["bias_share"]), percent(checks["stabiliser_share"]))
		if e, ok := checks["consistency_error"]; ok {
			s += fmt.Sprintf(" Implementation check (input + bias + stabiliser = logit): error %.2g.", e)
		}
	case IntegratedGradients:
		s += "; the baseline scan's logit is the rest."
		if e, ok := checks["completeness_error"]; ok {
			s += fmt.Sprintf(" Completeness error %.2g (the values add up to the logit change from the baseline).", e)
		}
	default:
		s += " (this method's values need not add up to the logit)."
	}
	return s
}

// ShareSentence is ShareSentence for the map's own method and checks.
func (m *Map) ShareSentence() string { return ShareSentence(m.Method, m.Checks) }

// percent writes a share as a whole percentage (one decimal below 10 %).
func percent(x float64) string {
	if math.Abs(x) < 0.1 {
		return fmt.Sprintf("%.1f %%", 100*x)
	}
	return fmt.Sprintf("%.0f %%", 100*x)
}
