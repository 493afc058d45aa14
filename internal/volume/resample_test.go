package volume

import (
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"brightfold/internal/refcheck"
)

func niiWriteF32(t testing.TB, path string, data []float32) {
	t.Helper()
	b := make([]byte, 4*len(data))
	for i, x := range data {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// niiScipyJob is a nifti_ref.py resample job: scipy.ndimage.map_coordinates
// (python3-scipy) on v at the source voxel coordinates
// inv(v.Affine)·target·(i, j, k, 1), written to out.
func niiScipyJob(t *testing.T, v *Volume, target Affine, dims [3]int, order int, cval float32, out string) []string {
	t.Helper()
	dir := t.TempDir()
	in, spec := filepath.Join(dir, "in.f32"), filepath.Join(dir, "map.json")
	niiWriteF32(t, in, v.Data)
	inv, err := v.Affine.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(map[string]any{"affine": inv.Mul(target), "dims": dims})
	if err := os.WriteFile(spec, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return []string{"resample", in, strconv.Itoa(v.Dims[0]), strconv.Itoa(v.Dims[1]),
		strconv.Itoa(v.Dims[2]), spec, strconv.Itoa(order), strconv.FormatFloat(float64(cval), 'g', -1, 32), out}
}

// niiObliqueTarget is a grid rotated against v's, with other voxel sizes,
// that covers v and some space around it.
func niiObliqueTarget(v *Volume) (Affine, [3]int) {
	r := Affine{}
	c, s := math.Cos(0.35), math.Sin(0.35)
	rot := [3][3]float64{{c, -s, 0}, {s * 0.9, c * 0.9, -0.436}, {s * 0.436, c * 0.436, 0.9}}
	sp := [3]float64{1.7, 2.3, 2.9}
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] = rot[i][j] * sp[j]
		}
	}
	centre := v.Affine.Apply([3]float64{float64(v.Dims[0]) / 2, float64(v.Dims[1]) / 2, float64(v.Dims[2]) / 2})
	dims := [3]int{30, 26, 17}
	for i := 0; i < 3; i++ {
		r[i][3] = centre[i] - (r[i][0]*float64(dims[0])+r[i][1]*float64(dims[1])+r[i][2]*float64(dims[2]))/2
	}
	r[3] = [4]float64{0, 0, 0, 1}
	return r, dims
}

// TestResampleAgainstScipy: Trilinear equals scipy.ndimage.map_coordinates
// with order=1, mode="constant" and the same fill (python3-scipy), on
// nibabel's anatomical.nii resampled onto an oblique grid; Nearest equals
// order=0 wherever scipy's point lies inside the source.
func TestResampleAgainstScipy(t *testing.T) {
	t.Parallel()
	niiNeedNibabel(t)
	refcheck.PythonModule(t, "scipy.ndimage")
	v, err := Load([]string{refcheck.Path(t, filepath.Join(niiNibabelDir, "anatomical.nii"))}, LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	target, dims := niiObliqueTarget(v)
	const fill = -12345
	cases := []struct {
		interp Interp
		order  int
	}{{Trilinear, 1}, {Nearest, 0}}
	var jobs [][]string
	dir := t.TempDir()
	for n, tc := range cases {
		jobs = append(jobs, niiScipyJob(t, v, target, dims, tc.order, fill, filepath.Join(dir, strconv.Itoa(n)+".f32")))
	}
	niiBatch(t, jobs)
	for n, tc := range cases {
		got, err := ResampleFill(v, target, dims, tc.interp, fill)
		if err != nil {
			t.Fatal(err)
		}
		want := niiReadF32(t, jobs[n][len(jobs[n])-1])
		if len(want) != len(got.Data) {
			t.Fatalf("%v: scipy gave %d values, we %d", tc.interp, len(want), len(got.Data))
		}
		_, hi, _ := v.Stats()
		inside, worst := 0, 0.0
		for i, w := range want {
			if tc.interp == Nearest && w == fill {
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
	v := niiTestVolume([3]int{7, 6, 5})
	for _, m := range []Interp{Trilinear, Nearest} {
		r, err := Resample(v, v.Affine, v.Dims, m)
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
	v := niiTestVolume([3]int{9, 8, 7})
	labels := map[float32]bool{0: true}
	for i := range v.Data {
		v.Data[i] = float32(i % 4)
		labels[v.Data[i]] = true
	}
	target, dims := niiObliqueTarget(v)
	r, err := Resample(v, target, dims, Nearest)
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
	v := niiTestVolume([3]int{3, 3, 3})
	if _, err := Resample(v, Affine{}, [3]int{2, 2, 2}, Trilinear); err == nil {
		t.Error("singular target accepted")
	}
	if _, err := Resample(v, Identity(), [3]int{1 << 20, 1 << 20, 1 << 20}, Trilinear); err == nil {
		t.Error("2^60 voxels accepted")
	}
	if _, err := Resample(v, Identity(), [3]int{0, 2, 2}, Trilinear); err == nil {
		t.Error("zero dim accepted")
	}
}
