package stats

import (
	"math"
	"testing"
)

// TestBetaClosedForms checks RegIncBeta and BinomialLowerBound on closed
// forms of the beta distribution: I_x(1, 1) = x, I_x(a, 1) = x^a,
// I_x(1, b) = 1 − (1 − x)^b, I_½(a, a) = ½ by symmetry, and the
// Clopper–Pearson bound after n successes in n trials, (1 − confidence)^(1/n)
// (e.g. 0.1^(1/200) = 0.98855 for 200 of 200 at 90 %).
func TestBetaClosedForms(t *testing.T) {
	for _, x := range []float64{0.01, 0.3, 0.5, 0.77, 0.999} {
		kernelNear(t, "I_x(1,1)", RegIncBeta(1, 1, x), x, 1e-13)
		kernelNear(t, "I_x(3.5,1)", RegIncBeta(3.5, 1, x), math.Pow(x, 3.5), 1e-12)
		kernelNear(t, "I_x(1,7)", RegIncBeta(1, 7, x), 1-math.Pow(1-x, 7), 1e-12)
	}
	for _, a := range []float64{0.5, 2, 40, 300} {
		kernelNear(t, "I_½(a,a)", RegIncBeta(a, a, 0.5), 0.5, 1e-12)
	}
	lb, err := BinomialLowerBound(200, 200, 0.9)
	if err != nil {
		t.Fatal(err)
	}
	kernelNear(t, "Clopper-Pearson n of n", lb, math.Pow(0.1, 1.0/200), 1e-14)
	if lb0, _ := BinomialLowerBound(0, 10, 0.9); lb0 != 0 {
		t.Errorf("0 of 10: lower bound %v, want 0", lb0)
	}
	// a bisection on a monotone CDF: more successes never lower the bound
	prev := 0.0
	for k := 1; k <= 50; k++ {
		b, _ := BinomialLowerBound(k, 50, 0.95)
		if b < prev {
			t.Errorf("bound falls from %v to %v at k=%d", prev, b, k)
		}
		prev = b
	}
	for _, bad := range [][3]float64{{-1, 10, 0.9}, {11, 10, 0.9}, {5, 0, 0.9}, {5, 10, 1}, {5, 10, 0}} {
		if _, err := BinomialLowerBound(int(bad[0]), int(bad[1]), bad[2]); err == nil {
			t.Errorf("BinomialLowerBound%v: no error", bad)
		}
	}
}
