package viewer

import (
	"fmt"
	"math"
)

// Interp chooses how a Frame samples voxels between voxel centres.
type Interp int

const (
	// Nearest takes the value of the voxel under the pixel centre (the
	// default): thick slices stay visibly thick and no value is invented.
	Nearest Interp = iota
	// Linear interpolates bilinearly within the slice (never across slices).
	Linear
)

// String names the interpolation.
func (i Interp) String() string {
	if i == Linear {
		return "bilinear"
	}
	return "nearest"
}

// Values is a sampled plane of scalar values, row-major (V[x + Width*y]),
// NaN where a pixel falls outside the volume.
type Values struct {
	Width, Height int
	V             []float32
}

// At returns the value at pixel (x, y), NaN outside the image.
func (v Values) At(x, y int) float32 {
	if x < 0 || y < 0 || x >= v.Width || y >= v.Height {
		return float32(math.NaN())
	}
	return v.V[x+v.Width*y]
}

// tap says where one pixel column (or row) reads from: data offsets a and b
// (b == a when no interpolation is needed) mixed with weight w on b.
type tap struct {
	a, b int
	w    float32
	in   bool
}

// sampler reads one frame's pixels from a voxel array of the frame's dims.
type sampler struct {
	cols, rows []tap
	base       int
	linear     bool
}

func (f Frame) sampler(interp Interp) sampler {
	stride := [3]int{1, f.dims[0], f.dims[0] * f.dims[1]}
	return sampler{
		cols:   f.taps(f.Width, f.offX, f.col.voxel, f.colFlip, stride[f.col.voxel], interp),
		rows:   f.taps(f.Height, f.offY, f.row.voxel, f.rowFlip, stride[f.row.voxel], interp),
		base:   f.Slice * stride[f.slice.voxel],
		linear: interp == Linear,
	}
}

// taps computes, for each of n pixels along one image side starting off
// pixels into the plane, which voxels along axis a it reads. Rounding and interpolation work in display order
// (before the flip), so that the picture does not depend on the order in
// which the voxels are stored.
func (f Frame) taps(n int, off float64, a int, flip bool, stride int, interp Interp) []tap {
	t := make([]tap, n)
	last := f.dims[a] - 1
	voxel := func(d int) int {
		if flip {
			d = last - d
		}
		return d * stride
	}
	for p := range t {
		d := f.axisCoord(float64(p)+0.5+off, a, false)
		if !(d >= -0.5 && d < float64(last)+0.5) {
			continue
		}
		if interp != Linear {
			i := voxel(clampInt(roundHalfUp(d), 0, last))
			t[p] = tap{a: i, b: i, in: true}
			continue
		}
		d0 := int(math.Floor(d))
		w := d - float64(d0)
		switch {
		case d0 < 0:
			d0, w = 0, 0
		case d0 >= last:
			d0, w = last, 0
		}
		d1 := d0
		if w > 0 {
			d1 = d0 + 1
		}
		t[p] = tap{a: voxel(d0), b: voxel(d1), w: float32(w), in: true}
	}
	return t
}

// row fills dst (len(cols)) with row y of data; NaN outside the volume.
func (s *sampler) row(data []float32, y int, dst []float32) {
	nan := float32(math.NaN())
	r := s.rows[y]
	if !r.in {
		for x := range dst {
			dst[x] = nan
		}
		return
	}
	ra, rb := s.base+r.a, s.base+r.b
	if !s.linear {
		for x, c := range s.cols {
			if c.in {
				dst[x] = data[ra+c.a]
			} else {
				dst[x] = nan
			}
		}
		return
	}
	for x, c := range s.cols {
		if !c.in {
			dst[x] = nan
			continue
		}
		v00, v10 := data[ra+c.a], data[ra+c.b]
		v01, v11 := data[rb+c.a], data[rb+c.b]
		top := v00 + c.w*(v10-v00)
		bot := v01 + c.w*(v11-v01)
		dst[x] = top + r.w*(bot-top)
	}
}

// Sample returns the values of data (a voxel array laid out like the frame's
// volume) on the frame's pixels.
func (f Frame) Sample(data []float32, interp Interp) (Values, error) {
	if n := f.dims[0] * f.dims[1] * f.dims[2]; len(data) != n {
		return Values{}, fmt.Errorf("viewer: sample: %d values for a %v grid", len(data), f.dims)
	}
	s := f.sampler(interp)
	out := Values{Width: f.Width, Height: f.Height, V: make([]float32, f.Width*f.Height)}
	for y := 0; y < f.Height; y++ {
		s.row(data, y, out.V[y*f.Width:(y+1)*f.Width])
	}
	return out, nil
}

// Sample returns the scene's voxel values on frame f's pixels.
func (s *Scene) Sample(f Frame, interp Interp) Values {
	v, _ := f.Sample(s.vol.Data, interp) // NewScene checked the length
	return v
}
