package stats

import (
	"testing"
)

func TestAUROCHandExample(t *testing.T) {
	// 0.1(−) 0.4(−) 0.35(+) 0.8(+): positives beat negatives in 3 of 4 pairs.
	kernelNear(t, "AUROC", AUROC([]float64{0.1, 0.4, 0.35, 0.8}, []bool{false, false, true, true}), 0.75, 1e-12)
	// a tie counts half
	kernelNear(t, "AUROC tie", AUROC([]float64{1, 1}, []bool{false, true}), 0.5, 1e-12)
}
