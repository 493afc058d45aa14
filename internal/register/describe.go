package register

import (
	"math"

	"brightfold/internal/volume"
)

// Parts describes the linear part L of a transform as L = R·S (polar
// decomposition): R a rotation, S symmetric positive definite.
type Parts struct {
	// RotationDeg is the angle of R about its axis, in degrees.
	RotationDeg float64 `json:"rotation_deg"`
	// Scales are S's diagonal: the stretch along the template's x, y, z axes.
	Scales [3]float64 `json:"scales"`
	// Shear is the largest off-diagonal element of S relative to its
	// diagonal (0 for a rigid or purely scaling transform).
	Shear float64 `json:"shear"`
	// Determinant of L: the volume ratio scan/template.
	Determinant float64 `json:"determinant"`
	// Translation is the transform's last column (mm).
	Translation [3]float64 `json:"translation_mm"`
}

// Decompose splits a transform into rotation, scales and shear.
func Decompose(a volume.Affine) Parts {
	var l [3][3]float64
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			l[r][c] = a[r][c]
		}
	}
	rot := volume.Polar3(l)
	// S = Rᵀ·L
	var s [3][3]float64
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			for k := 0; k < 3; k++ {
				s[r][c] += rot[k][r] * l[k][c]
			}
		}
	}
	p := Parts{Determinant: volume.Det3(l)}
	for i := 0; i < 3; i++ {
		p.Scales[i] = s[i][i]
		p.Translation[i] = a[i][3]
		for j := 0; j < 3; j++ {
			if i != j {
				p.Shear = math.Max(p.Shear, math.Abs(s[i][j])/math.Sqrt(math.Abs(s[i][i]*s[j][j])))
			}
		}
	}
	tr := (rot[0][0] + rot[1][1] + rot[2][2] - 1) / 2
	p.RotationDeg = math.Acos(math.Max(-1, math.Min(1, tr))) * 180 / math.Pi
	return p
}
