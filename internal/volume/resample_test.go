package volume_test

import (
	"math"
	"path/filepath"
	"strconv"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
	"brightfold/internal/volume/internal/niiref"
)

// TestResampleAgainstScipy: Trilinear equals scipy.ndimage.map_coordinates
// with order=1, mode="constant" and the same fill (python3-scipy), on
// nibabel's anatomical.nii resampled onto an oblique grid; Nearest equals
// order=0 wherever scipy's point lies inside the source.
func TestResampleAgainstScipy(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	refcheck.PythonModule(t, "scipy.ndimage")
	v, err := volume.Load([]string{refcheck.Path(t, filepath.Join(niiref.NibabelDir, "anatomical.nii"))}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	target, dims := niiref.ObliqueTarget(v)
	const fill = -12345
	cases := []struct {
		interp volume.Interp
		order  int
	}{{volume.Trilinear, 1}, {volume.Nearest, 0}}
	var jobs [][]string
	dir := t.TempDir()
	for n, tc := range cases {
		jobs = append(jobs, niiref.ScipyJob(t, v, target, dims, tc.order, fill, filepath.Join(dir, strconv.Itoa(n)+".f32")))
	}
	niiref.Batch(t, jobs)
	for n, tc := range cases {
		got, err := volume.ResampleFill(v, target, dims, tc.interp, fill)
		if err != nil {
			t.Fatal(err)
		}
		want := niiref.ReadF32(t, jobs[n][len(jobs[n])-1])
		if len(want) != len(got.Data) {
			t.Fatalf("%v: scipy gave %d values, we %d", tc.interp, len(want), len(got.Data))
		}
		_, hi, _ := v.Stats()
		inside, worst := 0, 0.0
		for i, w := range want {
			if tc.interp == volume.Nearest && w == fill {
				continue // our Nearest also fills the outer half voxel; scipy does not
			}
			if w != fill {
				inside++
			}
			worst = math.Max(worst, math.Abs(float64(got.Data[i])-float64(w)))
		}
		if worst > 1e-5*hi {
			t.Errorf("%v: largest difference from scipy %g (image max %g)", tc.interp, worst, hi)
		}
		if inside < len(want)/4 || inside == len(want) {
			t.Errorf("%v: %d of %d points inside; the test grid should cover inside and outside", tc.interp, inside, len(want))
		}
		if got.Affine != target || got.Dims != dims {
			t.Errorf("%v: result grid %v %v", tc.interp, got.Dims, got.Affine)
		}
	}
}

// TestResampleIdentity: resampling onto the volume's own grid returns its
// voxels exactly, edges included.
func TestResampleIdentity(t *testing.T) {
	v := niiref.TestVolume([3]int{7, 6, 5})
	for _, m := range []volume.Interp{volume.Trilinear, volume.Nearest} {
		r, err := volume.Resample(v, v.Affine, v.Dims, m)
		if err != nil {
			t.Fatal(err)
		}
		for i := range v.Data {
			if math.Abs(float64(r.Data[i]-v.Data[i])) > 1e-4 {
				t.Fatalf("%v: voxel %d is %g, want %g", m, i, r.Data[i], v.Data[i])
			}
		}
	}
}

// TestResampleNearestKeepsLabels: Nearest only ever outputs source values
// or the fill, so a label map stays a label map.
func TestResampleNearestKeepsLabels(t *testing.T) {
	v := niiref.TestVolume([3]int{9, 8, 7})
	labels := map[float32]bool{0: true}
	for i := range v.Data {
		v.Data[i] = float32(i % 4)
		labels[v.Data[i]] = true
	}
	target, dims := niiref.ObliqueTarget(v)
	r, err := volume.Resample(v, target, dims, volume.Nearest)
	if err != nil {
		t.Fatal(err)
	}
	for i, x := range r.Data {
		if !labels[x] {
			t.Fatalf("voxel %d is %g, not a label", i, x)
		}
	}
}

// TestResampleRefuses: a singular target affine or absurd dims are errors.
func TestResampleRefuses(t *testing.T) {
	v := niiref.TestVolume([3]int{3, 3, 3})
	if _, err := volume.Resample(v, volume.Affine{}, [3]int{2, 2, 2}, volume.Trilinear); err == nil {
		t.Error("singular target accepted")
	}
	if _, err := volume.Resample(v, volume.Identity(), [3]int{1 << 20, 1 << 20, 1 << 20}, volume.Trilinear); err == nil {
		t.Error("2^60 voxels accepted")
	}
	if _, err := volume.Resample(v, volume.Identity(), [3]int{0, 2, 2}, volume.Trilinear); err == nil {
		t.Error("zero dim accepted")
	}
}
