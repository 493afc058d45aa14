package preprocess

import (
	"bytes"
	"encoding/json"
	"fmt"
)

// DefaultSpec is the preprocessing `brightfold prepare --print-spec` prints
// and `brightfold model make` starts from (the demo model's): closest
// canonical RAS, a 48³ grid at 4 mm centred on the head, block-mean
// anti-aliasing, trilinear interpolation, head mask at 10 % between the 1st
// and 99th percentiles, z-score over the head clipped to ±5. docs/card.md
// documents each field.
func DefaultSpec() Spec {
	return Spec{
		Orientation: "RAS", SpacingMm: [3]float64{4, 4, 4}, Shape: [3]int{48, 48, 48},
		Crop: "head-centre", Antialias: "block-mean", Interpolation: "trilinear",
		HeadMask:  HeadMask{Method: "percentile-fraction", LowPercentile: 1, HighPercentile: 99, Fraction: 0.1},
		Intensity: Intensity{Method: NormZScoreHead, Clip: 5},
	}
}

// ParseSpec decodes a preprocessing object (the card's "preprocessing"),
// refusing unknown fields and trailing data, and validates it.
func ParseSpec(data []byte) (Spec, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var s Spec
	if err := dec.Decode(&s); err != nil {
		return Spec{}, fmt.Errorf("preprocessing: %w", err)
	}
	if dec.More() {
		return Spec{}, fmt.Errorf("preprocessing: trailing data after the object")
	}
	if err := s.Validate(); err != nil {
		return Spec{}, err
	}
	return s, nil
}
