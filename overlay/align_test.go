package overlay

import (
	"math"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/phantom"
	"brightfold/internal/register"
	"brightfold/internal/volume"
)

// TestAlignedMapGoesBackThroughTheTransform puts a single hot voxel on the
// model grid of a card that aligns scans to a template, carries it to the
// scan with ToScan, and checks that it lands where the alignment says: at
// A·x on the scan grid, x being the hot voxel's position in the template's
// world (the model grid of the scan resampled onto the template, prepared
// as the card states) and A the known template → scan transform.
func TestAlignedMapGoesBackThroughTheTransform(t *testing.T) {
	tc, err := phantom.Generate(7, 0, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	tpl := tc.Volume
	sc, err := phantom.Generate(7, 1, phantom.Options{VoxelMM: 2})
	if err != nil {
		t.Fatal(err)
	}
	scan := sc.Volume
	// a known alignment: 12° about z, 6° about x, 4 % larger, shifted
	c, s := math.Cos(12*math.Pi/180), math.Sin(12*math.Pi/180)
	cx, sx := math.Cos(6*math.Pi/180), math.Sin(6*math.Pi/180)
	a := volume.Affine{{1.04 * c, -1.04 * s * cx, 1.04 * s * sx, 7}, {1.04 * s, 1.04 * c * cx, -1.04 * c * sx, -5}, {0, 1.04 * sx, 1.04 * cx, 3}, {0, 0, 0, 1}}
	spec := preprocess.DefaultSpec()
	spec.Alignment = &preprocess.Alignment{Method: preprocess.AlignAffine, Template: "template.nii.gz"}
	pr, err := preprocess.PrepareWithTransform(scan, spec, tpl, a)
	if err != nil {
		t.Fatal(err)
	}
	aligned, err := register.Apply(scan, tpl, a)
	if err != nil {
		t.Fatal(err)
	}
	onTemplate, err := preprocess.Prepare(aligned, spec)
	if err != nil {
		t.Fatal(err)
	}
	g := [3]int{20, 27, 22}
	m := &Map{Grid: pr.Transform.GridDims, Values: make([]float32, 48*48*48)}
	m.Values[g[0]+48*(g[1]+48*g[2])] = 1
	out, err := m.ToScan(pr.Transform)
	if err != nil {
		t.Fatal(err)
	}
	x := onTemplate.Transform.GridAffine.Apply([3]float64{float64(g[0]), float64(g[1]), float64(g[2])})
	want := a.Apply(x) // scan world, mm
	var centroid [3]float64
	var w, peak float64
	var at [3]float64
	d := out.Dims
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				v := float64(out.At(i, j, k))
				if v <= 0 {
					continue
				}
				p := out.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
				for r := 0; r < 3; r++ {
					centroid[r] += v * p[r]
				}
				w += v
				if v > peak {
					peak, at = v, p
				}
			}
		}
	}
	if w == 0 {
		t.Fatal("the hot voxel did not reach the scan grid")
	}
	for r := 0; r < 3; r++ {
		centroid[r] /= w
	}
	if e := dist(centroid, want); e > 0.5 {
		t.Errorf("hot voxel lands at %v mm on the scan (weighted centre), the transform says %v (%.2f mm apart)", centroid, want, e)
	}
	if e := dist(at, want); e > 2*math.Sqrt(3) {
		t.Errorf("peak at %v mm, the transform says %v (%.2f mm apart, more than a 2 mm scan voxel's diagonal)", at, want, e)
	}
}

func dist(a, b [3]float64) float64 {
	return math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
}
