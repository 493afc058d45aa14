package viewer

import (
	"math"
	"testing"

	"brightfold/internal/volume"
)

// newVolume makes a volume of dims with the given affine, voxel values from fn.
func newVolume(t testing.TB, dims [3]int, a volume.Affine, fn func(i, j, k int) float32) *volume.Volume {
	t.Helper()
	v, err := volume.New(dims, a)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				v.Data[v.Index(i, j, k)] = fn(i, j, k)
			}
		}
	}
	return v
}

// code gives every voxel a distinct whole-number value.
func code(i, j, k int) float32 { return float32(i + 64*j + 4096*k) }

// headPhantom is a crude head for looking at renders: scalp, skull, brain
// and two ventricles, on an RAS grid of spacing sp centred on the origin.
func headPhantom(t testing.TB, dims [3]int, sp [3]float64) *volume.Volume {
	origin := [3]float64{}
	for a := 0; a < 3; a++ {
		origin[a] = -sp[a] * float64(dims[a]-1) / 2
	}
	a := volume.Diag(sp, origin)
	return newVolume(t, dims, a, func(i, j, k int) float32 {
		p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
		e := func(c, r [3]float64) float64 {
			var s float64
			for d := 0; d < 3; d++ {
				s += (p[d] - c[d]) * (p[d] - c[d]) / (r[d] * r[d])
			}
			return s
		}
		switch {
		case e([3]float64{-9, 5, 12}, [3]float64{5, 18, 9}) < 1 || e([3]float64{9, 5, 12}, [3]float64{5, 18, 9}) < 1:
			return 300 // ventricles (left and right)
		case e([3]float64{}, [3]float64{62, 78, 60}) < 1:
			return 700 + float32(60*math.Sin(p[0]/6)*math.Sin(p[1]/7)) // brain with folds
		case e([3]float64{}, [3]float64{68, 84, 66}) < 1:
			return 80 // skull
		case e([3]float64{}, [3]float64{72, 88, 70}) < 1:
			return 900 // scalp
		}
		return 0
	})
}
