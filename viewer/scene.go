package viewer

import (
	"errors"
	"fmt"
	"math"

	"brightfold/internal/volume"
)

// Scene is a volume prepared for display: where its voxel axes point in RAS
// space, the inverse affine, and a sample of its intensity distribution for
// window presets. A Scene does not change after NewScene and is safe for
// concurrent use; it keeps a reference to the volume, which must not be
// modified while the Scene is in use.
type Scene struct {
	vol     *volume.Volume
	inv     volume.Affine
	world   [3]axisRef // world[w] is the voxel axis along RAS world axis w (0 R, 1 A, 2 S)
	spacing [3]float64
	values  distribution // finite voxel values
	integer bool         // every finite voxel value is a whole number
}

// axisRef names a voxel axis and whether its index grows towards +world.
type axisRef struct {
	voxel    int
	positive bool
}

// NewScene checks v (dims match the data, the affine is finite, invertible
// and axis-like) and prepares it for display. See the package documentation
// for the orientation the volume should have.
func NewScene(v *volume.Volume) (*Scene, error) {
	if v == nil {
		return nil, errors.New("viewer: no volume")
	}
	n, err := volume.CheckedProduct(v.Dims[:], volume.MaxVoxels)
	if err != nil {
		return nil, fmt.Errorf("viewer: volume dims: %w", err)
	}
	if len(v.Data) != n {
		return nil, fmt.Errorf("viewer: volume has %d values for dims %v (%d voxels)", len(v.Data), v.Dims, n)
	}
	if err := v.Affine.Validate(); err != nil {
		return nil, fmt.Errorf("viewer: volume affine: %w", err)
	}
	inv, err := v.Affine.Inverse()
	if err != nil {
		return nil, fmt.Errorf("viewer: volume affine: %w", err)
	}
	world, err := worldAxes(v.Affine.Orientation())
	if err != nil {
		return nil, err
	}
	s := &Scene{vol: v, inv: inv, world: world, spacing: v.Spacing()}
	s.values = newDistribution(v.Data, false)
	s.integer = wholeNumbers(v.Data)
	return s, nil
}

// worldAxes inverts an orientation code such as "RAS" or "LPI" into, for
// each world axis, the voxel axis that runs along it.
func worldAxes(code string) ([3]axisRef, error) {
	var w [3]axisRef
	seen := [3]bool{}
	for axis := 0; axis < 3 && axis < len(code); axis++ {
		var world int
		var positive bool
		switch code[axis] {
		case 'R', 'L':
			world, positive = 0, code[axis] == 'R'
		case 'A', 'P':
			world, positive = 1, code[axis] == 'A'
		case 'S', 'I':
			world, positive = 2, code[axis] == 'S'
		default:
			return w, fmt.Errorf("viewer: affine orientation %q has an undetermined axis", code)
		}
		if seen[world] {
			return w, fmt.Errorf("viewer: affine orientation %q uses a world axis twice", code)
		}
		seen[world] = true
		w[world] = axisRef{voxel: axis, positive: positive}
	}
	if len(code) != 3 {
		return w, fmt.Errorf("viewer: affine orientation %q is not three letters", code)
	}
	return w, nil
}

// wholeNumbers reports whether every finite value is an integer (as stored
// DICOM and integer NIfTI data are after an integral rescale).
func wholeNumbers(data []float32) bool {
	for _, x := range data {
		f := float64(x)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			continue
		}
		if f != math.Trunc(f) {
			return false
		}
	}
	return true
}

// Volume returns the volume the scene shows.
func (s *Scene) Volume() *volume.Volume { return s.vol }

// Spacing returns the voxel spacing in millimetres along the voxel axes.
func (s *Scene) Spacing() [3]float64 { return s.spacing }

// VoxelToWorld maps a (continuous) voxel index to RAS millimetres.
func (s *Scene) VoxelToWorld(ijk [3]float64) [3]float64 { return s.vol.Affine.Apply(ijk) }

// WorldToVoxel maps RAS millimetres to a continuous voxel index.
func (s *Scene) WorldToVoxel(p [3]float64) [3]float64 { return s.inv.Apply(p) }

// NearestVoxel returns the voxel nearest to the RAS point p and whether p
// lies inside the volume (within half a voxel of the outer voxel centres).
// Outside, the index is clamped to the volume.
func (s *Scene) NearestVoxel(p [3]float64) (ijk [3]int, inside bool) {
	return nearestIndex(s.WorldToVoxel(p), s.vol.Dims)
}

func nearestIndex(c [3]float64, dims [3]int) ([3]int, bool) {
	var ijk [3]int
	inside := true
	for a := 0; a < 3; a++ {
		x := c[a]
		if !(x >= -0.5 && x < float64(dims[a])-0.5) {
			inside = false
		}
		ijk[a] = clampInt(roundHalfUp(x), 0, dims[a]-1)
	}
	return ijk, inside
}

// roundHalfUp rounds to the nearest integer, halves upwards; NaN gives 0.
func roundHalfUp(x float64) int {
	if math.IsNaN(x) {
		return 0
	}
	f := math.Floor(x + 0.5)
	if f > math.MaxInt32 {
		return math.MaxInt32
	}
	if f < math.MinInt32 {
		return math.MinInt32
	}
	return int(f)
}

func clampInt(x, lo, hi int) int {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}

// Center returns the RAS position of the volume's central voxel.
func (s *Scene) Center() [3]float64 {
	d := s.vol.Dims
	return s.VoxelToWorld([3]float64{float64((d[0] - 1) / 2), float64((d[1] - 1) / 2), float64((d[2] - 1) / 2)})
}

// Snap moves p to the centre of the voxel nearest to it, inside the volume.
// The app keeps its crosshair snapped so that the three planes and the
// readout agree on one voxel.
func (s *Scene) Snap(p [3]float64) [3]float64 {
	ijk, _ := s.NearestVoxel(p)
	return s.VoxelToWorld([3]float64{float64(ijk[0]), float64(ijk[1]), float64(ijk[2])})
}

// SliceCount is the number of slices of plane pl.
func (s *Scene) SliceCount(pl Plane) int { return s.vol.Dims[s.sliceAxis(pl).voxel] }

// StepSlice moves the point p by n slices of plane pl, positive n towards
// superior (axial), anterior (coronal) or right (sagittal), stopping at the
// first or last slice. The result is snapped to a voxel centre.
func (s *Scene) StepSlice(p [3]float64, pl Plane, n int) [3]float64 {
	ijk, _ := s.NearestVoxel(p)
	ax := s.sliceAxis(pl)
	if !ax.positive {
		n = -n
	}
	ijk[ax.voxel] = clampInt(ijk[ax.voxel]+n, 0, s.vol.Dims[ax.voxel]-1)
	return s.VoxelToWorld([3]float64{float64(ijk[0]), float64(ijk[1]), float64(ijk[2])})
}

func (s *Scene) sliceAxis(pl Plane) axisRef { return s.world[pl.layout().slice] }

// Obliquity is the largest angle, in degrees, between a voxel axis and the
// world axis it is displayed along (0 for an axis-aligned volume).
func (s *Scene) Obliquity() float64 {
	worst := 0.0
	for w := 0; w < 3; w++ {
		c := s.world[w].voxel
		a := s.vol.Affine
		norm := math.Sqrt(a[0][c]*a[0][c] + a[1][c]*a[1][c] + a[2][c]*a[2][c])
		cos := math.Min(1, math.Abs(a[w][c])/norm)
		worst = math.Max(worst, math.Acos(cos)*180/math.Pi)
	}
	return worst
}
