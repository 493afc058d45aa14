package register

import (
	"math"
	"math/rand/v2"
	"testing"

	"brightfold/internal/phantom"
	"brightfold/internal/volume"
)

// randomAffine draws a transform in the ranges the recovery checks use:
// rotations up to ±15° about each axis, scales 0.9–1.1, shears up to ±0.05,
// shifts up to ±20 mm, about the point c.
func randomAffine(rng *rand.Rand, c [3]float64) volume.Affine {
	u := func(lo, hi float64) float64 { return lo + (hi-lo)*rng.Float64() }
	deg := math.Pi / 180
	rot := eulerRotation(u(-15, 15)*deg, u(-15, 15)*deg, u(-15, 15)*deg)
	sc := [3][3]float64{{u(0.9, 1.1), 0, 0}, {0, u(0.9, 1.1), 0}, {0, 0, u(0.9, 1.1)}}
	sh := [3][3]float64{{1, u(-0.05, 0.05), u(-0.05, 0.05)}, {0, 1, u(-0.05, 0.05)}, {0, 0, 1}}
	l := mul33(rot, mul33(sh, sc))
	return aboutCentre(l, c, [3]float64{u(-20, 20), u(-20, 20), u(-20, 20)})
}

// aboutCentre is y = L·(x − c) + c + t.
func aboutCentre(l [3][3]float64, c, t [3]float64) volume.Affine {
	a := volume.Identity()
	for r := 0; r < 3; r++ {
		a[r][3] = c[r] + t[r]
		for k := 0; k < 3; k++ {
			a[r][k] = l[r][k]
			a[r][3] -= l[r][k] * c[k]
		}
	}
	return a
}

// moveScan makes the scan a template-world point x is seen at A·x in:
// scan(y) = src(A⁻¹·y), sampled on grid (spacing mm, dims) centred like src.
func moveScan(t testing.TB, src *volume.Volume, a volume.Affine, spacing float64, dims [3]int) *volume.Volume {
	t.Helper()
	inv, err := a.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	c := src.Affine.Apply([3]float64{float64(src.Dims[0]-1) / 2, float64(src.Dims[1]-1) / 2, float64(src.Dims[2]-1) / 2})
	var origin [3]float64
	for r := 0; r < 3; r++ {
		origin[r] = c[r] - spacing*float64(dims[r]-1)/2
	}
	grid := volume.Diag([3]float64{spacing, spacing, spacing}, origin)
	out, err := volume.Resample(src, inv.Mul(grid), dims, volume.Trilinear)
	if err != nil {
		t.Fatal(err)
	}
	out.Affine = grid
	return out
}

// displacement returns the mean and maximum distance (mm) between found·x
// and truth·x over the template voxels x where head is true.
func displacement(template *volume.Volume, head func(i int) bool, found, truth volume.Affine) (mean, maxd float64) {
	n := 0
	d := template.Dims
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				if !head(template.Index(i, j, k)) {
					continue
				}
				x := template.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
				p, q := found.Apply(x), truth.Apply(x)
				e := math.Sqrt((p[0]-q[0])*(p[0]-q[0]) + (p[1]-q[1])*(p[1]-q[1]) + (p[2]-q[2])*(p[2]-q[2]))
				mean += e
				maxd = math.Max(maxd, e)
				n++
			}
		}
	}
	return mean / float64(n), maxd
}

// phantomCase renders case 0 of cohort seed 7 (internal/phantom) at voxel mm.
func phantomCase(t testing.TB, voxel float64, shift phantom.Shift) *phantom.Case {
	t.Helper()
	c, err := phantom.Generate(7, 0, phantom.Options{VoxelMM: voxel, Shift: shift})
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func headOf(c *phantom.Case) func(int) bool {
	return func(i int) bool { return c.Labels[i] != phantom.Air }
}
