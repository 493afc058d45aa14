// Package scantest makes small synthetic scans and a small preprocessing spec
// for the tests of inference and its sub-packages.
package scantest

import (
	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

// Spec is a small model grid (16³ voxels of 4 mm) for tests.
func Spec() preprocess.Spec {
	return preprocess.Spec{
		Orientation: "RAS", SpacingMm: [3]float64{4, 4, 4}, Shape: [3]int{16, 16, 16},
		Crop: "head-centre", Antialias: "block-mean", Interpolation: "trilinear",
		HeadMask:  preprocess.HeadMask{Method: "percentile-fraction", LowPercentile: 1, HighPercentile: 99, Fraction: 0.1},
		Intensity: preprocess.Intensity{Method: preprocess.NormZScoreHead},
	}
}

// EllipsoidHead makes a 1 mm RAS volume with a bright ellipsoid "head"
// (semi-axes in mm) centred at centre (RAS mm), with inner structure so that
// orientation matters, and background 0.
func EllipsoidHead(dims [3]int, centre, semi [3]float64) *volume.Volume {
	a := volume.Diag([3]float64{1, 1, 1}, [3]float64{-float64(dims[0]) / 2, -float64(dims[1]) / 2, -float64(dims[2]) / 2})
	v, _ := volume.New(dims, a)
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
				r := 0.0
				for c := 0; c < 3; c++ {
					d := (p[c] - centre[c]) / semi[c]
					r += d * d
				}
				if r <= 1 {
					// brighter towards anterior-superior-right so that flips change the image
					v.Data[v.Index(i, j, k)] = float32(100 + 30*(p[0]-centre[0])/semi[0] + 20*(p[1]-centre[1])/semi[1] + 10*(p[2]-centre[2])/semi[2])
				}
			}
		}
	}
	return v
}
