package viewer

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// The radix sort orders finite values exactly as the standard library's
// slices.Sort does: random values of every sign and scale, repeated values,
// ±0, denormals and the extremes of float32.
func TestRadixSortMatchesSlicesSort(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for _, n := range []int{0, 1, 5, 255, 256, 1000, 100_000} {
		a := make([]float32, n)
		for i := range a {
			switch r.IntN(6) {
			case 0:
				a[i] = float32(r.NormFloat64() * 1e6)
			case 1:
				a[i] = float32(r.IntN(5)) // repeats
			case 2:
				a[i] = []float32{0, float32(math.Copysign(0, -1)), math.MaxFloat32, -math.MaxFloat32, math.SmallestNonzeroFloat32}[r.IntN(5)]
			default:
				a[i] = float32(r.NormFloat64())
			}
		}
		want := slices.Clone(a)
		slices.Sort(want)
		radixSortFloat32(a)
		for i := range a {
			if a[i] != want[i] { // -0 == +0, as for the percentiles
				t.Fatalf("n=%d: index %d: %v, slices.Sort %v", n, i, a[i], want[i])
			}
		}
		if !slices.IsSorted(a) {
			t.Fatalf("n=%d: not sorted", n)
		}
	}
}

func BenchmarkSortMagnitudes(b *testing.B) {
	r := rand.New(rand.NewPCG(3, 4))
	src := make([]float32, 1_500_000)
	for i := range src {
		src[i] = float32(math.Abs(r.NormFloat64()))
	}
	a := make([]float32, len(src))
	for _, c := range []struct {
		name string
		sort func([]float32)
	}{{"radix", radixSortFloat32}, {"slices", slices.Sort[[]float32]}} {
		b.Run(c.name, func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				copy(a, src)
				c.sort(a)
			}
		})
	}
}
