package volume

import (
	"errors"
	"fmt"
	"math"
)

// Affine is a 4×4 homogeneous matrix, row-major: Affine[r][c].
type Affine [4][4]float64

// Identity is the 4×4 identity.
func Identity() Affine {
	return Affine{{1, 0, 0, 0}, {0, 1, 0, 0}, {0, 0, 1, 0}, {0, 0, 0, 1}}
}

// Diag returns a scaling affine with the given spacing and origin.
func Diag(spacing [3]float64, origin [3]float64) Affine {
	a := Identity()
	for i := 0; i < 3; i++ {
		a[i][i] = spacing[i]
		a[i][3] = origin[i]
	}
	return a
}

// Apply maps the point p (voxel index) through the affine.
func (a Affine) Apply(p [3]float64) [3]float64 {
	var q [3]float64
	for r := 0; r < 3; r++ {
		q[r] = a[r][0]*p[0] + a[r][1]*p[1] + a[r][2]*p[2] + a[r][3]
	}
	return q
}

// Mul returns a·b.
func (a Affine) Mul(b Affine) Affine {
	var c Affine
	for r := 0; r < 4; r++ {
		for k := 0; k < 4; k++ {
			var s float64
			for j := 0; j < 4; j++ {
				s += a[r][j] * b[j][k]
			}
			c[r][k] = s
		}
	}
	return c
}

// Spacing returns the norms of the first three columns.
func (a Affine) Spacing() [3]float64 {
	var s [3]float64
	for c := 0; c < 3; c++ {
		s[c] = math.Sqrt(a[0][c]*a[0][c] + a[1][c]*a[1][c] + a[2][c]*a[2][c])
	}
	return s
}

// ErrSingular is returned for an affine that cannot be inverted or holds NaN or Inf.
var ErrSingular = errors.New("affine is singular or not finite")

// Validate refuses a non-finite or singular affine, or one whose last row is not (0 0 0 1).
func (a Affine) Validate() error {
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.IsNaN(a[r][c]) || math.IsInf(a[r][c], 0) {
				return fmt.Errorf("%w: element [%d][%d] is %v", ErrSingular, r, c, a[r][c])
			}
		}
	}
	if a[3] != [4]float64{0, 0, 0, 1} {
		return fmt.Errorf("affine last row is %v, not (0 0 0 1)", a[3])
	}
	if d := a.Det(); math.Abs(d) < 1e-12 {
		return fmt.Errorf("%w: determinant %g", ErrSingular, d)
	}
	return nil
}

// Det is the determinant of the affine's 3×3 linear part: the signed volume
// in mm³ of one voxel.
func (a Affine) Det() float64 { return Det3(a.Linear()) }

// Linear returns the affine's 3×3 linear part (rotation, zooms and shears).
func (a Affine) Linear() [3][3]float64 {
	var m [3][3]float64
	for i := 0; i < 3; i++ {
		copy(m[i][:], a[i][:3])
	}
	return m
}

// Inverse returns the inverse of a rigid-or-general affine (last row 0 0 0 1).
func (a Affine) Inverse() (Affine, error) {
	d := a.Det()
	if math.Abs(d) < 1e-12 || math.IsNaN(d) {
		return Affine{}, ErrSingular
	}
	var m Affine
	m[0][0] = (a[1][1]*a[2][2] - a[1][2]*a[2][1]) / d
	m[0][1] = (a[0][2]*a[2][1] - a[0][1]*a[2][2]) / d
	m[0][2] = (a[0][1]*a[1][2] - a[0][2]*a[1][1]) / d
	m[1][0] = (a[1][2]*a[2][0] - a[1][0]*a[2][2]) / d
	m[1][1] = (a[0][0]*a[2][2] - a[0][2]*a[2][0]) / d
	m[1][2] = (a[0][2]*a[1][0] - a[0][0]*a[1][2]) / d
	m[2][0] = (a[1][0]*a[2][1] - a[1][1]*a[2][0]) / d
	m[2][1] = (a[0][1]*a[2][0] - a[0][0]*a[2][1]) / d
	m[2][2] = (a[0][0]*a[1][1] - a[0][1]*a[1][0]) / d
	for r := 0; r < 3; r++ {
		m[r][3] = -(m[r][0]*a[0][3] + m[r][1]*a[1][3] + m[r][2]*a[2][3])
	}
	m[3] = [4]float64{0, 0, 0, 1}
	return m, nil
}

// Orientation returns the three-letter axis code (such as "RAS" or "LPS"),
// the same one nibabel 5.0's aff2axcodes gives (see ClosestAxes), or "???"
// for an affine that has none.
func (a Affine) Orientation() string {
	m, err := ClosestAxes(a)
	if err != nil {
		return "???"
	}
	return m.Code()
}

// Det3 is the determinant of a 3×3 matrix (cofactor expansion along the
// first row); the one copy Brightfold's geometry uses.
func Det3(r [3][3]float64) float64 {
	return r[0][0]*(r[1][1]*r[2][2]-r[1][2]*r[2][1]) -
		r[0][1]*(r[1][0]*r[2][2]-r[1][2]*r[2][0]) +
		r[0][2]*(r[1][0]*r[2][1]-r[1][1]*r[2][0])
}

// Polar3 returns the orthogonal factor of the polar decomposition of m by
// the iteration X ← (X + X⁻ᵀ)/2 (Higham), as nifti_mat33_polar does.
func Polar3(m [3][3]float64) [3][3]float64 {
	x := m
	for it := 0; it < 100; it++ {
		inv, ok := Inverse3(x)
		if !ok {
			return m
		}
		var next [3][3]float64
		diff := 0.0
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				next[i][j] = 0.5 * (x[i][j] + inv[j][i])
				diff += math.Abs(next[i][j] - x[i][j])
			}
		}
		x = next
		if diff < 1e-12 {
			break
		}
	}
	return x
}

// Inverse3 inverts a 3×3 matrix through Affine.Inverse; ok is false for a
// singular or non-finite matrix.
func Inverse3(m [3][3]float64) ([3][3]float64, bool) {
	a := Identity()
	for i := 0; i < 3; i++ {
		copy(a[i][:3], m[i][:])
	}
	inv, err := a.Inverse()
	if err != nil {
		return m, false
	}
	var r [3][3]float64
	for i := 0; i < 3; i++ {
		copy(r[i][:], inv[i][:3])
	}
	return r, true
}
