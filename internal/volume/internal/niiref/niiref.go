// Package niiref holds the test helpers that compare NIfTI volumes with
// Debian's python3-nibabel 5.0 (and scipy, through nifti/testdata/nifti_ref.py),
// shared by the tests of internal/volume and internal/volume/nifti.
package niiref

import (
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// NibabelDir is Debian python3-nibabel 5.0's test data folder.
const NibabelDir = "/usr/lib/python3/dist-packages/nibabel/tests/data"

// GoniiTestData is gonii v0.6.0's test_data folder in the module cache.
func GoniiTestData(t testing.TB) string {
	t.Helper()
	cache := os.Getenv("GOMODCACHE")
	if cache == "" {
		out, err := exec.Command("go", "env", "GOMODCACHE").Output()
		if err != nil {
			refcheck.Missing(t, "go env GOMODCACHE: %v", err)
		}
		cache = strings.TrimSpace(string(out))
	}
	return refcheck.Path(t, filepath.Join(cache, "github.com", "okieraised", "gonii@v0.6.0", "test_data"))
}

func EqualF32(a, b []float32) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] && !(a[i] != a[i] && b[i] != b[i]) {
			return false
		}
	}
	return true
}

// Script is the path of internal/volume/nifti/testdata/nifti_ref.py, which
// asks Debian's python3-nibabel 5.0 (and python3-scipy).
func Script() string {
	return filepath.Join(refcheck.RepoRoot(), "internal", "volume", "nifti", "testdata", "nifti_ref.py")
}

// NeedNibabel skips (or fails under BRIGHTFOLD_REQUIRE_REFERENCE=1) without nibabel.
func NeedNibabel(t testing.TB) {
	t.Helper()
	refcheck.PythonModule(t, "nibabel")
}

// Batch runs several nifti_ref.py commands in one Python process (nibabel's
// import dominates the time of each call) and returns their JSON results.
func Batch(t testing.TB, jobs [][]string) []json.RawMessage {
	t.Helper()
	b, err := json.Marshal(jobs)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "jobs.json")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var out []json.RawMessage
	refcheck.RunPython(t, Script(), &out, "batch", p)
	if len(out) != len(jobs) {
		t.Fatalf("nifti_ref.py batch: %d results for %d jobs", len(out), len(jobs))
	}
	return out
}

// Decode decodes one Batch result into v.
func Decode(t testing.TB, raw json.RawMessage, v any) {
	t.Helper()
	if err := json.Unmarshal(raw, v); err != nil {
		t.Fatalf("decode reference result: %v\n%s", err, raw)
	}
}

// ReadF32 reads a little-endian float32 file.
func ReadF32(t testing.TB, path string) []float32 {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	f := make([]float32, len(b)/4)
	for i := range f {
		f[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return f
}

// TestVolume is a small volume with a left-handed oblique affine and a
// smooth, non-integer signal.
func TestVolume(dims [3]int) *volume.Volume {
	c, s := math.Cos(0.3), math.Sin(0.3)
	// Columns orthogonal, determinant negative (left-handed), rotated in x-z.
	a := volume.Affine{
		{-1.2 * c, 0, 0.9 * s, 40},
		{0, 1.1, 0, -20},
		{1.2 * s, 0, 0.9 * c, 12.5},
		{0, 0, 0, 1},
	}
	v, err := volume.New(dims, a)
	if err != nil {
		panic(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				v.Data[v.Index(i, j, k)] = float32(100*math.Sin(0.3*float64(i)+0.2*float64(j)) + 7.25*float64(k) + 3.125)
			}
		}
	}
	return v
}

// CloseAffine reports whether a and b agree within tol (relative above 1).
func CloseAffine(a, b [4][4]float64, tol float64) bool {
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.Abs(a[r][c]-b[r][c]) > tol*math.Max(1, math.Abs(b[r][c])) {
				return false
			}
		}
	}
	return true
}

// AffineJSON writes affines to a JSON file in a temporary folder.
func AffineJSON(t testing.TB, affs [][4][4]float64) string {
	t.Helper()
	b, err := json.Marshal(affs)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "affines.json")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// WriteF32 writes data as a little-endian float32 file.
func WriteF32(t testing.TB, path string, data []float32) {
	t.Helper()
	b := make([]byte, 4*len(data))
	for i, x := range data {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// ScipyJob is a nifti_ref.py resample job: scipy.ndimage.map_coordinates
// (python3-scipy) on v at the source voxel coordinates
// inv(v.Affine)·target·(i, j, k, 1), written to out.
func ScipyJob(t *testing.T, v *volume.Volume, target volume.Affine, dims [3]int, order int, cval float32, out string) []string {
	t.Helper()
	dir := t.TempDir()
	in, spec := filepath.Join(dir, "in.f32"), filepath.Join(dir, "map.json")
	WriteF32(t, in, v.Data)
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

// ObliqueTarget is a grid rotated against v's, with other voxel sizes,
// that covers v and some space around it.
func ObliqueTarget(v *volume.Volume) (volume.Affine, [3]int) {
	r := volume.Affine{}
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
