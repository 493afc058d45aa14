package exec

import (
	"math"
	"math/rand/v2"
	"testing"
)

// naiveGemm is the textbook triple loop in float64, the reference for the
// packed kernels.
func naiveGemm(m, n, k int, a, b mat) []float64 {
	c := make([]float64, m*n)
	for i := 0; i < m; i++ {
		for j := 0; j < n; j++ {
			var s float64
			for p := 0; p < k; p++ {
				s += float64(a.d[i*a.rs+p*a.cs]) * float64(b.d[p*b.rs+j*b.cs])
			}
			c[i*n+j] = s
		}
	}
	return c
}

func TestGemmMatchesNaive(t *testing.T) {
	r := rand.New(rand.NewPCG(21, 22))
	for trial := 0; trial < 60; trial++ {
		m, n, k := 1+r.IntN(13), 1+r.IntN(40), 1+r.IntN(300)
		ad, bd := randTensor(r, 1, m*k).Data, randTensor(r, 1, k*n).Data
		a, b := rowMajor(ad, k), rowMajor(bd, n)
		if trial%2 == 1 {
			a = rowMajor(ad, m).t() // stored k×m
		}
		if trial%3 == 1 {
			b = rowMajor(bd, k).t() // stored n×k
		}
		want := naiveGemm(m, n, k, a, b)
		got := make([]float32, m*n)
		for i := range got {
			got[i] = 1 // overwritten when not accumulating
		}
		gemmParallel(2, m, n, k, a, b, got, n, false)
		for i := range got {
			if d := math.Abs(float64(got[i]) - want[i]); d > 1e-4*(1+math.Abs(want[i])) {
				t.Fatalf("m=%d n=%d k=%d: element %d is %g, want %g", m, n, k, i, got[i], want[i])
			}
		}
	}
}

func TestKernelVariantsAgree(t *testing.T) {
	r := rand.New(rand.NewPCG(23, 24))
	const kb, ldc = 37, 21
	a, b := randTensor(r, 1, 4*kb).Data, randTensor(r, 1, 16*kb).Data
	c1, c2 := randTensor(r, 1, 4*ldc).Data, make([]float32, 4*ldc)
	copy(c2, c1)
	kernel4x16(kb, a, b, c1, ldc)
	kernel4x16Go(kb, a, b, c2, ldc)
	for i := range c1 {
		if d := math.Abs(float64(c1[i] - c2[i])); d > 1e-4*(1+math.Abs(float64(c2[i]))) {
			t.Fatalf("element %d: dispatched kernel %g, portable kernel %g", i, c1[i], c2[i])
		}
	}
}
