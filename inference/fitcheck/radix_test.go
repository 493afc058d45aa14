package fitcheck

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// SortFloat32 agrees with the standard library's comparison sort (which
// orders by <; −0 and +0 compare equal there, so the check compares values)
// on random inputs of many sizes, with negatives, zeros, duplicates,
// subnormals and infinities.
func TestSortFloat32MatchesSlicesSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	special := []float32{0, float32(math.Copysign(0, -1)), float32(math.Inf(1)), float32(math.Inf(-1)),
		math.SmallestNonzeroFloat32, -math.SmallestNonzeroFloat32, math.MaxFloat32, -math.MaxFloat32, 1, -1}
	for _, n := range []int{0, 1, 2, 17, 255, 256, 257, 1000, 4096, 100003} {
		x := make([]float32, n)
		for i := range x {
			switch rng.IntN(4) {
			case 0:
				x[i] = special[rng.IntN(len(special))]
			case 1:
				x[i] = float32(rng.IntN(7) - 3) // many duplicates
			default:
				x[i] = float32(rng.NormFloat64() * math.Pow(10, float64(rng.IntN(12)-6)))
			}
		}
		want := slices.Clone(x)
		slices.Sort(want)
		SortFloat32(x)
		for i := range x {
			if x[i] != want[i] {
				t.Fatalf("n=%d: position %d holds %v, slices.Sort gives %v", n, i, x[i], want[i])
			}
		}
		for i := 1; i < n; i++ {
			if math.Signbit(float64(x[i-1])) == false && x[i-1] == 0 && math.Signbit(float64(x[i])) && x[i] == 0 {
				t.Fatalf("n=%d: +0 before −0 at %d", n, i)
			}
		}
	}
}
