package volume

import (
	"fmt"
	"math"
)

// Interp is a resampling method.
type Interp int

const (
	// Trilinear interpolates between the 8 voxels around a point (scipy's
	// map_coordinates with order=1).
	Trilinear Interp = iota
	// Nearest takes the voxel whose centre is closest, for label maps and masks.
	Nearest
)

// String names the method.
func (m Interp) String() string {
	switch m {
	case Trilinear:
		return "trilinear"
	case Nearest:
		return "nearest"
	}
	return fmt.Sprintf("Interp(%d)", int(m))
}

// edgeTolerance (in voxels) lets points that round-off puts a hair outside
// the outermost voxel centres still count as inside for Trilinear.
const edgeTolerance = 1e-6

// Resample samples v on the grid of dims voxels whose voxel-to-RAS affine is
// target. Points outside v are set to 0; see ResampleFill.
func Resample(v *Volume, target Affine, dims [3]int, interp Interp) (*Volume, error) {
	return ResampleFill(v, target, dims, interp, 0)
}

// ResampleFill is Resample with the value given to output voxels that fall
// outside v (NaN is allowed, for "no data"). For Trilinear a point is inside
// when every voxel coordinate lies in [0, n-1], the span of the voxel centres
// (as scipy's map_coordinates with mode="constant"), with a 1e-6-voxel
// allowance for round-off; for Nearest when it lies in [-0.5, n-0.5), the
// extent of the voxels themselves. The result carries v's metadata and
// warnings with the new dims and affine.
func ResampleFill(v *Volume, target Affine, dims [3]int, interp Interp, fill float32) (*Volume, error) {
	if interp != Trilinear && interp != Nearest {
		return nil, fmt.Errorf("resample: unknown interpolation %v", interp)
	}
	if len(v.Data) != v.Len() || v.Len() == 0 {
		return nil, fmt.Errorf("resample: volume holds %d voxels, dims %v need %d", len(v.Data), v.Dims, v.Len())
	}
	if err := target.Validate(); err != nil {
		return nil, fmt.Errorf("resample: target affine: %w", err)
	}
	inv, err := v.Affine.Inverse()
	if err != nil {
		return nil, fmt.Errorf("resample: source affine: %w", err)
	}
	out, err := New(dims, target)
	if err != nil {
		return nil, fmt.Errorf("resample: target grid: %w", err)
	}
	out.Meta, out.Patient, out.Source = v.Meta, v.Patient, v.Source
	out.Warnings = append([]string(nil), v.Warnings...)
	s := sampler{src: v.Data, dims: v.Dims, m: inv.Mul(target), fill: fill}
	plane := dims[0] * dims[1]
	forSlices(dims[2], func(k int) {
		row := out.Data[k*plane : (k+1)*plane]
		for j := 0; j < dims[1]; j++ {
			s.row(row[j*dims[0]:(j+1)*dims[0]], j, k, interp)
		}
	})
	return out, nil
}

// sampler maps output voxel indices to source voxel coordinates through m.
type sampler struct {
	src  []float32
	dims [3]int
	m    Affine // output voxel index → source voxel coordinate
	fill float32
}

// row fills one output row (fixed j, k), stepping the source coordinate by
// the first column of m.
func (s *sampler) row(dst []float32, j, k int, interp Interp) {
	m := &s.m
	fj, fk := float64(j), float64(k)
	var p, d [3]float64
	for r := 0; r < 3; r++ {
		p[r] = m[r][1]*fj + m[r][2]*fk + m[r][3]
		d[r] = m[r][0]
	}
	for i := range dst {
		fi := float64(i)
		x, y, z := p[0]+fi*d[0], p[1]+fi*d[1], p[2]+fi*d[2]
		if interp == Nearest {
			dst[i] = s.nearest(x, y, z)
		} else {
			dst[i] = s.trilinear(x, y, z)
		}
	}
}

func (s *sampler) nearest(x, y, z float64) float32 {
	i, j, k := math.Floor(x+0.5), math.Floor(y+0.5), math.Floor(z+0.5)
	nx, ny, nz := s.dims[0], s.dims[1], s.dims[2]
	if !(i >= 0 && i < float64(nx) && j >= 0 && j < float64(ny) && k >= 0 && k < float64(nz)) {
		return s.fill
	}
	return s.src[int(i)+nx*(int(j)+ny*int(k))]
}

// corner splits coordinate x on an axis of n voxels into the lower voxel
// index, the step to the upper one (0 when its weight is 0) and the weight of
// the upper one; ok is false outside [0, n-1] (with edgeTolerance).
func corner(x float64, n int) (i0, step int, f float64, ok bool) {
	top := float64(n - 1)
	switch {
	case !(x >= -edgeTolerance && x <= top+edgeTolerance):
		return 0, 0, 0, false
	case x <= 0:
		return 0, 0, 0, true
	case x >= top:
		return n - 1, 0, 0, true
	}
	i0 = int(x) // x > 0, so truncation is the floor; i0 <= n-2
	return i0, 1, x - float64(i0), true
}

func (s *sampler) trilinear(x, y, z float64) float32 {
	nx, ny := s.dims[0], s.dims[1]
	i, di, fx, okx := corner(x, s.dims[0])
	j, dj, fy, oky := corner(y, s.dims[1])
	k, dk, fz, okz := corner(z, s.dims[2])
	if !(okx && oky && okz) {
		return s.fill
	}
	dj *= nx
	dk *= nx * ny
	p := i + nx*(j+ny*k)
	v := s.src
	c00 := float64(v[p])*(1-fx) + float64(v[p+di])*fx
	c10 := float64(v[p+dj])*(1-fx) + float64(v[p+dj+di])*fx
	c01 := float64(v[p+dk])*(1-fx) + float64(v[p+dk+di])*fx
	c11 := float64(v[p+dk+dj])*(1-fx) + float64(v[p+dk+dj+di])*fx
	c0 := c00*(1-fy) + c10*fy
	c1 := c01*(1-fy) + c11*fy
	return float32(c0*(1-fz) + c1*fz)
}
