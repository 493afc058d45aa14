package volume

import (
	"fmt"
	"math"

	"brightfold/internal/parallel"
)

// AxisMap says, for each voxel axis of a volume, which RAS world axis it
// follows most closely (0 = R, 1 = A, 2 = S) and whether it runs the
// opposite way (towards L, P or I).
type AxisMap struct {
	World [3]int
	Flip  [3]bool
}

// ClosestAxes computes the AxisMap of an affine as nibabel 5.0's
// orientations.io_orientation does: the columns of the 3×3 part are
// normalised, replaced by the closest orthogonal matrix (polar
// decomposition), and for voxel axes 0, 1, 2 in turn the world axis with the
// largest absolute component is taken and removed from consideration.
func ClosestAxes(a Affine) (AxisMap, error) {
	if err := a.Validate(); err != nil {
		return AxisMap{}, err
	}
	var r [3][3]float64
	for c := 0; c < 3; c++ {
		n := math.Sqrt(a[0][c]*a[0][c] + a[1][c]*a[1][c] + a[2][c]*a[2][c])
		for k := 0; k < 3; k++ {
			r[k][c] = a[k][c] / n
		}
	}
	r = Polar3(r)
	var m AxisMap
	for in := 0; in < 3; in++ {
		best := -1
		for w := 0; w < 3; w++ {
			if best < 0 || math.Abs(r[w][in]) > math.Abs(r[best][in]) {
				best = w
			}
		}
		if r[best][in] == 0 {
			return AxisMap{}, fmt.Errorf("%w: no world axis left for voxel axis %d", ErrSingular, in)
		}
		m.World[in], m.Flip[in] = best, r[best][in] < 0
		r[best] = [3]float64{}
	}
	return m, nil
}

// Code returns the three-letter axis code of the map, such as "LAS"
// (nibabel's aff2axcodes).
func (m AxisMap) Code() string {
	pos, neg := "RAS", "LPI"
	b := make([]byte, 3)
	for i := range b {
		if m.Flip[i] {
			b[i] = neg[m.World[i]]
		} else {
			b[i] = pos[m.World[i]]
		}
	}
	return string(b)
}

// Reorient returns v with its voxel axes permuted and flipped so that they
// run, as closely as the affine allows, along R, A and S: the closest
// canonical orientation of nibabel's as_closest_canonical. Voxels are moved,
// never interpolated, and the affine is adjusted so that every voxel keeps
// its world position. The result is always a new volume, also when v is
// already in RAS order.
func Reorient(v *Volume) (*Volume, error) {
	if _, err := CheckedProduct(v.Dims[:], MaxVoxels); err != nil {
		return nil, err
	}
	if len(v.Data) != v.Len() {
		return nil, fmt.Errorf("reorient: volume holds %d voxels, dims %v need %d", len(v.Data), v.Dims, v.Len())
	}
	m, err := ClosestAxes(v.Affine)
	if err != nil {
		return nil, fmt.Errorf("reorient: %w", err)
	}
	out := *v
	out.Warnings = append([]string(nil), v.Warnings...)
	out.Affine = Identity()
	// Output axis m.World[in] is input axis in, reversed when flipped:
	// i_in = flip ? n-1-o : o.
	var srcStride, inStride [3]int
	inStride = [3]int{1, v.Dims[0], v.Dims[0] * v.Dims[1]}
	base := 0
	for in := 0; in < 3; in++ {
		o := m.World[in]
		out.Dims[o] = v.Dims[in]
		sign := 1.0
		srcStride[o] = inStride[in]
		if m.Flip[in] {
			sign = -1
			srcStride[o] = -inStride[in]
			base += (v.Dims[in] - 1) * inStride[in]
		}
		for r := 0; r < 3; r++ {
			out.Affine[r][o] = sign * v.Affine[r][in]
			if m.Flip[in] {
				out.Affine[r][3] += float64(v.Dims[in]-1) * v.Affine[r][in]
			}
		}
	}
	for r := 0; r < 3; r++ {
		out.Affine[r][3] += v.Affine[r][3]
	}
	out.Data = make([]float32, len(v.Data))
	permute(out.Data, v.Data, out.Dims, srcStride, base)
	return &out, nil
}

// permute copies src into dst (dims dims, first index fastest), taking
// dst voxel (i, j, k) from src[base + i·s0 + j·s1 + k·s2], slices in parallel.
func permute(dst, src []float32, dims, s [3]int, base int) {
	plane := dims[0] * dims[1]
	forSlices(dims[2], func(k int) {
		d := dst[k*plane : (k+1)*plane]
		n := 0
		for j := 0; j < dims[1]; j++ {
			p := base + j*s[1] + k*s[2]
			if s[0] == 1 {
				n += copy(d[n:n+dims[0]], src[p:p+dims[0]])
				continue
			}
			for i := 0; i < dims[0]; i++ {
				d[n] = src[p]
				n++
				p += s[0]
			}
		}
	})
}

// forSlices runs f(k) for k in [0, n) on all cores.
func forSlices(n int, f func(k int)) { parallel.Each(n, 0, func(_, k int) { f(k) }) }
