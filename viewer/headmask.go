package viewer

import (
	"math"

	"brightfold/internal/volume"
)

// HeadMask marks the voxels of the head: everything except the air that
// reaches the volume's border. Air is what lies below a low threshold (30 %
// of the way from the 1st percentile to Otsu's threshold between background
// and tissue); dark places inside the head, such as the ventricles, stay in
// the head because no path of air leads to them from outside (a flood fill
// from the border through air voxels, 6-connected).
func (s *Scene) HeadMask() []bool {
	v := s.vol
	n := len(v.Data)
	head := make([]bool, n)
	if s.values.empty() {
		return head
	}
	lo := s.values.percentile(1)
	t := lo + 0.3*(s.values.otsu()-lo)
	air := func(i int) bool {
		x := float64(v.Data[i])
		return math.IsNaN(x) || x <= t
	}
	outside := make([]bool, n)
	nx, ny, nz := v.Dims[0], v.Dims[1], v.Dims[2]
	queue := make([]int32, 0, 1<<16)
	push := func(i int) {
		if !outside[i] && air(i) {
			outside[i] = true
			queue = append(queue, int32(i))
		}
	}
	for k := 0; k < nz; k++ {
		for j := 0; j < ny; j++ {
			for i := 0; i < nx; i++ {
				if i == 0 || j == 0 || k == 0 || i == nx-1 || j == ny-1 || k == nz-1 {
					push(v.Index(i, j, k))
				}
			}
		}
	}
	for len(queue) > 0 {
		c := int(queue[len(queue)-1])
		queue = queue[:len(queue)-1]
		i, j, k := c%nx, (c/nx)%ny, c/(nx*ny)
		if i > 0 {
			push(c - 1)
		}
		if i < nx-1 {
			push(c + 1)
		}
		if j > 0 {
			push(c - nx)
		}
		if j < ny-1 {
			push(c + nx)
		}
		if k > 0 {
			push(c - nx*ny)
		}
		if k < nz-1 {
			push(c + nx*ny)
		}
	}
	for i := range head {
		head[i] = !outside[i]
	}
	return head
}

// DisplayMap prepares a relevance map for display on scene s: values
// outside the head mask set to zero (when mask is not nil), and the rest
// expressed as a percentage of the largest remaining |value|, so that the
// colour bar reads "% of the strongest relevance" instead of a raw model
// quantity. The map is copied; m is not changed.
func DisplayMap(m *volume.Volume, mask []bool) *volume.Volume {
	out := *m
	out.Data = make([]float32, len(m.Data))
	peak := 0.0
	for i, x := range m.Data {
		if mask != nil && i < len(mask) && !mask[i] {
			continue
		}
		if a := math.Abs(float64(x)); a > peak && !math.IsInf(a, 0) {
			peak = a
		}
	}
	if peak == 0 {
		return &out
	}
	k := 100 / peak
	for i, x := range m.Data {
		if mask != nil && i < len(mask) && !mask[i] {
			continue
		}
		out.Data[i] = float32(float64(x) * k)
	}
	return &out
}

// DisplayUnits labels a DisplayMap's values.
const DisplayUnits = "% of the strongest relevance"
