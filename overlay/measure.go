package overlay

import "errors"

// ErrNoPositiveRelevance is MassAccuracy's error for a map without a
// positive value, where the share is undefined (0/0).
var ErrNoPositiveRelevance = errors.New("overlay: the map has no positive relevance; mass accuracy is undefined")

// MassAccuracy is the relevance mass accuracy of Arras et al. 2022
// ("CLEVR-XAI: a benchmark dataset for the ground truth evaluation of neural
// network explanations", section 4.2): the share of the map's positive
// relevance that lies inside the ground-truth mask, Σ_{i∈GT} R⁺_i / Σ_i R⁺_i.
// A map without positive values has no share: it returns
// ErrNoPositiveRelevance rather than a number. Chance is the mask's share
// of the voxels.
func MassAccuracy(values []float32, mask []bool) (float64, error) {
	var in, all float64
	for i, v := range values {
		if v > 0 {
			all += float64(v)
			if i < len(mask) && mask[i] {
				in += float64(v)
			}
		}
	}
	if !(all > 0) {
		return 0, ErrNoPositiveRelevance
	}
	return in / all, nil
}
