package overlay

import (
	"errors"
	"fmt"
	"math"

	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

// GridVolume returns the map as a volume on the model grid (the grid's
// voxel-to-RAS affine from the preprocessing transform).
func (m *Map) GridVolume(tr preprocess.Transform) (*volume.Volume, error) {
	if m.Grid != tr.GridDims {
		return nil, fmt.Errorf("overlay: map grid %v, transform grid %v", m.Grid, tr.GridDims)
	}
	v, err := volume.New(m.Grid, tr.GridAffine)
	if err != nil {
		return nil, fmt.Errorf("overlay: model grid: %w", err)
	}
	if len(m.Values) != len(v.Data) {
		return nil, fmt.Errorf("overlay: map holds %d values, grid %v needs %d", len(m.Values), m.Grid, len(v.Data))
	}
	copy(v.Data, m.Values)
	v.Meta.Format = "relevance"
	return v, nil
}

// ToScan carries the map from the model grid back onto the scan's own grid
// through the inverse of the preprocessing transform (trilinear
// interpolation; scan voxels outside the model grid get 0), so that the
// result has the scan's dims and affine. An additive map (LRP, integrated
// gradients, gradient × input) is scaled by the ratio of the voxel volumes,
// so that its sum over the scan stays close to its sum over the model grid
// (the values are relevance per scan voxel); occlusion drops keep their
// units.
func (m *Map) ToScan(tr preprocess.Transform) (*volume.Volume, error) {
	g, err := m.GridVolume(tr)
	if err != nil {
		return nil, err
	}
	if _, err := tr.ScanToGrid(); err != nil {
		return nil, fmt.Errorf("overlay: transform: %w", err)
	}
	out, err := volume.Resample(g, tr.ScanAffine, tr.ScanDims, volume.Trilinear)
	if err != nil {
		return nil, fmt.Errorf("overlay: resample onto the scan grid: %w", err)
	}
	if m.Additive {
		ratio := math.Abs(tr.ScanAffine.Det() / tr.GridAffine.Det())
		if !(ratio > 0) || math.IsInf(ratio, 0) {
			return nil, errors.New("overlay: degenerate voxel size in the transform")
		}
		for i, x := range out.Data {
			out.Data[i] = float32(float64(x) * ratio)
		}
	}
	out.Meta.Format = "relevance"
	return out, nil
}

// Peak returns the voxel of v with the largest value (the strongest
// evidence for the class), or of the largest magnitude when no value is
// positive.
func Peak(v *volume.Volume) [3]int {
	best, bestAbs := -1, -1
	var bv, ba float32
	for i, x := range v.Data {
		if x != x {
			continue
		}
		if x > 0 && (best < 0 || x > bv) {
			best, bv = i, x
		}
		if a := float32(math.Abs(float64(x))); bestAbs < 0 || a > ba {
			bestAbs, ba = i, a
		}
	}
	if best < 0 {
		best = max(bestAbs, 0)
	}
	nx, ny := v.Dims[0], v.Dims[1]
	return [3]int{best % nx, (best / nx) % ny, best / (nx * ny)}
}
