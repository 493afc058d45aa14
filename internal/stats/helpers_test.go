package stats

import (
	"math"
	"testing"
)

// Helpers shared by the tests of this package.

// kernelNear fails the test when got is NaN or further than tol from want.
func kernelNear(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol || math.IsNaN(got) {
		t.Errorf("%s = %.12g, want %.12g (±%g)", what, got, want, tol)
	}
}

// boolsTo01 codes outcomes as 1/0 for the Python references.
func boolsTo01(y []bool) []int {
	out := make([]int, len(y))
	for i, v := range y {
		if v {
			out[i] = 1
		}
	}
	return out
}

// b2f is 1 for true, 0 for false.
func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// quantileSortForTest sorts as sort.Float64s does (NaNs first), by
// insertion, independently of the sort package.
func quantileSortForTest(x []float64) {
	for i := 1; i < len(x); i++ {
		for j := i; j > 0 && (x[j] < x[j-1] || math.IsNaN(x[j]) && !math.IsNaN(x[j-1])); j-- {
			x[j], x[j-1] = x[j-1], x[j]
		}
	}
}
