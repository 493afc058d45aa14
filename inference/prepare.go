package inference

import (
	"context"

	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

// PrepareForCard runs Prepare with the card's preprocessing and puts the
// tensor in the card's input layout.
// With preprocessing.alignment it first aligns the scan to the card's
// template (alignment.go).
func PrepareForCard(v *volume.Volume, c *Card) (*preprocess.Prepared, error) {
	return PrepareForCardContext(context.Background(), v, c)
}
