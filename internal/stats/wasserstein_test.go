package stats

import (
	"testing"
)

func TestWassersteinHandExample(t *testing.T) {
	// {0, 1} vs {0, 3}: move mass 1/2 from 1 to 3 → 1.
	kernelNear(t, "W1", Wasserstein1([]float64{0, 1}, []float64{0, 3}), 1, 1e-12)
	// a point mass at 0 against one at 2.5: 2.5
	kernelNear(t, "W1 shift", Wasserstein1([]float64{0, 0, 0}, []float64{2.5}), 2.5, 1e-12)
	// quantile form with even levels: mean |q − r|
	lv := EvenLevels(4)
	kernelNear(t, "QuantileW1", QuantileW1(lv, []float64{0, 1, 2, 3}, []float64{1, 1, 1, 1}), (1+0+1+2)/4.0, 1e-12)
}
