package phantom

import (
	"math"
	"math/rand/v2"
	"sync"
)

// normalBits is the index width of the normal quantile table.
const normalBits = 16

// normalTable holds the standard normal quantiles at (i + 0.5)/2^16: a
// draw from it is a standard normal variate quantised to 65536 levels
// (|z| ≤ 4.2), plenty for image noise that is rounded to integers anyway.
var normalTable = sync.OnceValue(func() *[1 << normalBits]float64 {
	var t [1 << normalBits]float64
	for i := range t {
		p := (float64(i) + 0.5) / (1 << normalBits)
		t[i] = math.Sqrt2 * math.Erfinv(2*p-1)
	}
	return &t
})

// rayleighTable holds the quantiles of the Rayleigh distribution with unit
// scale, sqrt(−2·ln(1−p)), at p = (i + 0.5)/2^16: the magnitude of complex
// Gaussian noise on zero signal, which is what Rician noise reduces to in air.
var rayleighTable = sync.OnceValue(func() *[1 << normalBits]float64 {
	var t [1 << normalBits]float64
	for i := range t {
		p := (float64(i) + 0.5) / (1 << normalBits)
		t[i] = math.Sqrt(-2 * math.Log1p(-p))
	}
	return &t
})

// normals draws standard normal variates four at a time from one 64-bit
// PCG output, several times faster than rand.NormFloat64.
type normals struct {
	r     *rand.Rand
	table *[1 << normalBits]float64
	bits  uint64
	left  int
}

func newNormals(r *rand.Rand) *normals {
	return &normals{r: r, table: normalTable()}
}

func (n *normals) index() uint64 {
	if n.left == 0 {
		n.bits, n.left = n.r.Uint64(), 4
	}
	i := n.bits & (1<<normalBits - 1)
	n.bits >>= normalBits
	n.left--
	return i
}

// next is a standard normal variate.
func (n *normals) next() float64 { return n.table[n.index()] }
