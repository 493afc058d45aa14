package overlay

// MassAccuracy is the relevance mass accuracy of Arras et al. 2022
// ("CLEVR-XAI: a benchmark dataset for the ground truth evaluation of neural
// network explanations", section 4.2): the share of the map's positive
// relevance that lies inside the ground-truth mask, Σ_{i∈GT} R⁺_i / Σ_i R⁺_i.
// It is 0 for a map without positive values. Chance is the mask's share of
// the voxels.
func MassAccuracy(values []float32, mask []bool) float64 {
	var in, all float64
	for i, v := range values {
		if v > 0 {
			all += float64(v)
			if i < len(mask) && mask[i] {
				in += float64(v)
			}
		}
	}
	if all == 0 {
		return 0
	}
	return in / all
}
