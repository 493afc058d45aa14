package inference

import (
	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

// PrepareForCard runs Prepare with the card's preprocessing and puts the
// tensor in the card's input layout.
func PrepareForCard(v *volume.Volume, c *Card) (*preprocess.Prepared, error) {
	pr, err := preprocess.Prepare(v, c.Preprocessing)
	if err != nil {
		return nil, err
	}
	pr.Tensor = pr.Tensor.ToLayout(c.Input.Layout)
	return pr, nil
}
