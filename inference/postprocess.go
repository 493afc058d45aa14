package inference

import (
	"fmt"
	"math"

	"brightfold/inference/fitcheck"
)

// Prediction is the calibrated reading of one case's logits.
type Prediction struct {
	Label         string             `json:"label"`         // most probable class
	Probability   float64            `json:"probability"`   // of the positive class
	Probabilities map[string]float64 `json:"probabilities"` // by class
	Temperature   float64            `json:"temperature"`
	// Uncalibrated is the positive-class probability at temperature 1.
	Uncalibrated float64 `json:"uncalibrated_probability"`
}

// Postprocess applies the card's activation with temperature scaling
// (Guo et al. 2017: softmax(z/T), or σ(z/T) for a one-logit sigmoid model).
func Postprocess(c *Card, logits []float64) (Prediction, error) {
	if len(logits) != c.NumLogits() {
		return Prediction{}, fmt.Errorf("got %d logits, the card needs %d", len(logits), c.NumLogits())
	}
	for _, z := range logits {
		if math.IsNaN(z) || math.IsInf(z, 0) {
			return Prediction{}, fmt.Errorf("model gave a non-finite logit %v", z)
		}
	}
	T := c.Calibration.Temperature
	probs := CalibratedProbabilities(c, logits)
	raw := ClassProbabilities(c, logits, 1)
	pos := c.PositiveIndex()
	p := Prediction{Probabilities: map[string]float64{}, Temperature: T, Probability: probs[pos], Uncalibrated: raw[pos]}
	best := 0
	for i, q := range probs {
		p.Probabilities[c.Classes[i]] = q
		if q > probs[best] {
			best = i
		}
	}
	p.Label = c.Classes[best]
	return p, nil
}

// ClassProbabilities returns the probabilities by class, in card order, at
// temperature T.
func ClassProbabilities(c *Card, logits []float64, T float64) []float64 {
	return fitcheck.Softmax(ClassLogits(c, logits), T)
}

// CalibratedProbabilities are the card's calibrated probabilities by class:
// temperature scaling, then the logistic recalibration of the positive-class
// logit when the card has one.
func CalibratedProbabilities(c *Card, logits []float64) []float64 {
	p := ClassProbabilities(c, logits, c.Calibration.Temperature)
	l := c.Calibration.Logistic
	if l == nil || len(p) != 2 {
		return p
	}
	pos := c.PositiveIndex()
	z := ClassLogits(c, logits)
	lp := (z[pos] - z[1-pos]) / c.Calibration.Temperature
	q := 1 / (1 + math.Exp(-(l.Intercept + l.Slope*lp)))
	p[pos], p[1-pos] = q, 1-q
	return p
}

// ClassLogits returns one logit per class: the logits themselves for a
// softmax model, (0, z) for a one-logit sigmoid model (positive class second
// or first as the card orders them), whose softmax is (1 − σ(z), σ(z)).
func ClassLogits(c *Card, logits []float64) []float64 {
	if c.Outputs.Activation != ActivationSigmoid {
		return logits
	}
	out := make([]float64, 2)
	out[c.PositiveIndex()] = logits[0]
	return out
}

// FormatProbability prints a probability with two decimals, never as a
// certainty: above 0.99 it reads "> 0.99", below 0.01 "< 0.01". Every
// screen and the command line show probabilities this way.
func FormatProbability(p float64) string {
	switch {
	case p > 0.99:
		return "> 0.99"
	case p < 0.01:
		return "< 0.01"
	}
	return fmt.Sprintf("%.2f", p)
}
