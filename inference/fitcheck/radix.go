package fitcheck

import "math"

// SortFloat32 sorts x in ascending order by a least-significant-digit radix
// sort on the IEEE 754 bit patterns, mapped so that unsigned order is
// numeric order (negative values: all bits flipped; others: sign bit set).
// It takes three passes of 11 bits and one scratch buffer of len(x), so it
// is linear in len(x). −0 sorts before +0; x must hold no NaN (their order
// would depend on their bits).
func SortFloat32(x []float32) {
	n := len(x)
	if n < 256 {
		insertionSort32(x)
		return
	}
	keys := make([]uint32, n)
	for i, v := range x {
		keys[i] = sortableBits(v)
	}
	tmp := make([]uint32, n)
	const bits, buckets = 11, 1 << 11
	var count [buckets]int
	src, dst := keys, tmp
	for shift := uint(0); shift < 32; shift += bits {
		clear(count[:])
		for _, k := range src {
			count[(k>>shift)&(buckets-1)]++
		}
		if count[(src[0]>>shift)&(buckets-1)] == n {
			continue // every key has the same digit here: nothing moves
		}
		sum := 0
		for d := range count {
			c := count[d]
			count[d] = sum
			sum += c
		}
		for _, k := range src {
			d := (k >> shift) & (buckets - 1)
			dst[count[d]] = k
			count[d]++
		}
		src, dst = dst, src
	}
	for i, k := range src {
		x[i] = fromSortableBits(k)
	}
}

func sortableBits(v float32) uint32 {
	b := math.Float32bits(v)
	if b&(1<<31) != 0 {
		return ^b
	}
	return b | 1<<31
}

func fromSortableBits(k uint32) float32 {
	if k&(1<<31) != 0 {
		return math.Float32frombits(k &^ (1 << 31))
	}
	return math.Float32frombits(^k)
}

func insertionSort32(x []float32) {
	for i := 1; i < len(x); i++ {
		v := x[i]
		j := i
		for ; j > 0 && sortableBits(x[j-1]) > sortableBits(v); j-- {
			x[j] = x[j-1]
		}
		x[j] = v
	}
}
