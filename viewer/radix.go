package viewer

import "math"

// radixSortFloat32 sorts finite float32 values in ascending order, as
// slices.Sort does for them (equal values may change places; -0 comes
// before +0). Why our own: the viewer sorts a volume's values (up to
// maxSample of them) for percentiles each time a scan or a relevance map is
// shown, and an LSD radix sort on the values' bit patterns (four passes of
// 8 bits, Knuth, TAOCP vol. 3, §5.2.5) does that several times faster than
// a comparison sort, which the window's map time needs.
func radixSortFloat32(a []float32) {
	if len(a) < 256 {
		insertionSortFloat32(a)
		return
	}
	keys := make([]uint32, len(a))
	for i, x := range a {
		keys[i] = floatKey(x)
	}
	buf := make([]uint32, len(a))
	for shift := uint(0); shift < 32; shift += 8 {
		var count [257]int
		for _, k := range keys {
			count[(k>>shift)&0xff+1]++
		}
		if count[1+((keys[0]>>shift)&0xff)] == len(keys) {
			continue // every key has this byte: nothing to move
		}
		for i := 1; i < 257; i++ {
			count[i] += count[i-1]
		}
		for _, k := range keys {
			b := (k >> shift) & 0xff
			buf[count[b]] = k
			count[b]++
		}
		keys, buf = buf, keys
	}
	for i, k := range keys {
		a[i] = keyFloat(k)
	}
}

// floatKey maps a float32 to a uint32 that sorts in the same order: the
// sign bit flipped for positive values, every bit flipped for negative ones
// (IEEE 754 orders magnitudes like their bit patterns).
func floatKey(x float32) uint32 {
	b := math.Float32bits(x)
	if b>>31 == 1 {
		return ^b
	}
	return b | 1<<31
}

// keyFloat inverts floatKey.
func keyFloat(k uint32) float32 {
	if k>>31 == 1 {
		return math.Float32frombits(k &^ (1 << 31))
	}
	return math.Float32frombits(^k)
}

func insertionSortFloat32(a []float32) {
	for i := 1; i < len(a); i++ {
		for j := i; j > 0 && a[j] < a[j-1]; j-- {
			a[j], a[j-1] = a[j-1], a[j]
		}
	}
}
