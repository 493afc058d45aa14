package overlay

import (
	"math"

	"brightfold/inference/preprocess"
)

// blurTensor returns t's values blurred by a separable Gaussian with the
// given sigma (in grid voxels) along the grid's x, y and z axes, truncated at
// 3 sigma, with edge voxels repeated beyond the grid; in t's layout.
func blurTensor(t *preprocess.Tensor, sigma [3]float64) []float32 {
	g := t.Grid
	cur := make([]float64, len(t.Data))
	for z := 0; z < g[2]; z++ {
		for y := 0; y < g[1]; y++ {
			for x := 0; x < g[0]; x++ {
				cur[x+g[0]*(y+g[1]*z)] = float64(t.Data[t.GridIndex(x, y, z)])
			}
		}
	}
	stride := [3]int{1, g[0], g[0] * g[1]}
	for a := 0; a < 3; a++ {
		cur = blurAxis(cur, g, a, stride[a], gaussian(sigma[a]))
	}
	out := make([]float32, len(t.Data))
	for z := 0; z < g[2]; z++ {
		for y := 0; y < g[1]; y++ {
			for x := 0; x < g[0]; x++ {
				out[t.GridIndex(x, y, z)] = float32(cur[x+g[0]*(y+g[1]*z)])
			}
		}
	}
	return out
}

// gaussian is a normalised kernel of radius ceil(3 sigma) (just [1] for a
// sigma below a tenth of a voxel).
func gaussian(sigma float64) []float64 {
	if !(sigma > 0.1) {
		return []float64{1}
	}
	r := int(math.Ceil(3 * sigma))
	k := make([]float64, 2*r+1)
	var s float64
	for i := range k {
		d := float64(i - r)
		k[i] = math.Exp(-d * d / (2 * sigma * sigma))
		s += k[i]
	}
	for i := range k {
		k[i] /= s
	}
	return k
}

// blurAxis convolves the grid-ordered values v with kernel k along axis a.
func blurAxis(v []float64, g [3]int, a, stride int, k []float64) []float64 {
	if len(k) == 1 {
		return v
	}
	r := len(k) / 2
	n := g[a]
	out := make([]float64, len(v))
	line := make([]float64, n)
	for start := range v {
		// visit each line once, from its first voxel
		if (start/stride)%n != 0 {
			continue
		}
		for i := 0; i < n; i++ {
			line[i] = v[start+i*stride]
		}
		for i := 0; i < n; i++ {
			var s float64
			for j, w := range k {
				p := min(max(i+j-r, 0), n-1)
				s += w * line[p]
			}
			out[start+i*stride] = s
		}
	}
	return out
}
