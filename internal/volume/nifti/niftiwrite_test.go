package nifti

import (
	"bytes"
	"compress/gzip"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/volume"
	"brightfold/internal/volume/internal/niiref"
)

// niiRefInfo is what nifti_ref.py info prints.
type niiRefInfo struct {
	Class     string         `json:"class"`
	Shape     []int          `json:"shape"`
	Affine    [4][4]float64  `json:"affine"`
	Axcodes   string         `json:"axcodes"`
	Min       float64        `json:"min"`
	Max       float64        `json:"max"`
	Sum       float64        `json:"sum"`
	Descrip   *string        `json:"descrip"`
	SformCode *int           `json:"sform_code"`
	QformCode *int           `json:"qform_code"`
	Qform     *[4][4]float64 `json:"qform"`
	Dtype     string         `json:"dtype"`
}

// TestWriteNIfTIThroughNibabel: nibabel 5.0 (python3-nibabel) reads what we
// wrote with the same affine (sform, NIfTI-1 srow_x/y/z), the same qform
// (quatern_b/c/d, qoffset, pixdim[0] = qfac), the same data after scl_slope
// and scl_inter, and the descrip field.
func TestWriteNIfTIThroughNibabel(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	v := niiref.TestVolume([3]int{7, 6, 5})
	lo, hi, _ := v.Stats()
	dir := t.TempDir()
	cases := []struct {
		name string
		dt   DataType
		tol  float64 // largest allowed voxel error: half a quantisation step
	}{
		{"f32.nii", DTFloat32, 0},
		{"f32.nii.gz", DTFloat32, 0},
		{"i16.nii.gz", DTInt16, (hi - lo) / 65535 * 0.51},
		{"u8.nii", DTUint8, (hi - lo) / 255 * 0.51},
	}
	var jobs [][]string
	for _, tc := range cases {
		p := filepath.Join(dir, tc.name)
		if err := Write(p, v, WriteOptions{DataType: tc.dt}); err != nil {
			t.Fatal(err)
		}
		jobs = append(jobs, []string{"info", p}, []string{"dump", p, p + ".f32"})
	}
	res := niiref.Batch(t, jobs)
	for n, tc := range cases {
		var ri niiRefInfo
		niiref.Decode(t, res[2*n], &ri)
		if !niiref.CloseAffine(ri.Affine, v.Affine, 1e-5) {
			t.Errorf("%s: nibabel affine %v, wrote %v", tc.name, ri.Affine, v.Affine)
		}
		if ri.Qform == nil || !niiref.CloseAffine(*ri.Qform, v.Affine, 1e-5) {
			t.Errorf("%s: nibabel qform %v, wrote %v", tc.name, ri.Qform, v.Affine)
		}
		if ri.Descrip == nil || *ri.Descrip != notice.Short {
			t.Errorf("%s: descrip %v, want %q", tc.name, ri.Descrip, notice.Short)
		}
		if m, _ := volume.ClosestAxes(v.Affine); ri.Axcodes != m.Code() {
			t.Errorf("%s: axcodes %s, ours %s", tc.name, ri.Axcodes, m.Code())
		}
		got := niiref.ReadF32(t, filepath.Join(dir, tc.name+".f32"))
		if len(got) != len(v.Data) {
			t.Fatalf("%s: nibabel read %d voxels, wrote %d", tc.name, len(got), len(v.Data))
		}
		worst := 0.0
		for i := range got {
			worst = math.Max(worst, math.Abs(float64(got[i])-float64(v.Data[i])))
		}
		if worst > tc.tol+1e-6*hi {
			t.Errorf("%s: largest voxel error %g > %g", tc.name, worst, tc.tol)
		}
	}
}

// TestWriteNIfTIDeterministic: the same volume gives the same bytes.
func TestWriteNIfTIDeterministic(t *testing.T) {
	v := niiref.TestVolume([3]int{5, 4, 3})
	dir := t.TempDir()
	for _, ext := range []string{".nii", ".nii.gz"} {
		a, b := filepath.Join(dir, "a"+ext), filepath.Join(dir, "b"+ext)
		for _, p := range []string{a, b} {
			if err := Write(p, v, WriteOptions{DataType: DTInt16}); err != nil {
				t.Fatal(err)
			}
		}
		ba, _ := os.ReadFile(a)
		bb, _ := os.ReadFile(b)
		if !bytes.Equal(ba, bb) {
			t.Errorf("%s: two writes differ", ext)
		}
	}
}

// TestWriteNIfTIIntegersExact: small integers go into int16 and uint8 with
// scl_slope 1 and scl_inter 0, so a label map survives exactly.
func TestWriteNIfTIIntegersExact(t *testing.T) {
	v, _ := volume.New([3]int{4, 3, 2}, volume.Diag([3]float64{1, 1, 1}, [3]float64{}))
	for i := range v.Data {
		v.Data[i] = float32(i % 5)
	}
	for _, dt := range []DataType{DTInt16, DTUint8} {
		_, body, err := encodeNIfTI1(v, WriteOptions{DataType: dt})
		if err != nil {
			t.Fatal(err)
		}
		_, slope, inter, _ := encodeVoxels(v.Data, dt)
		if slope != 1 || inter != 0 {
			t.Errorf("datatype %d: slope %g inter %g, want 1 and 0", dt, slope, inter)
		}
		if len(body) != len(v.Data)*bitsPerVoxel(dt)/8 {
			t.Errorf("datatype %d: %d data bytes", dt, len(body))
		}
	}
}

// TestWriteNIfTIRefuses: values an integer type cannot hold, a description
// longer than the 80-byte descrip field, and a singular affine are refused.
func TestWriteNIfTIRefuses(t *testing.T) {
	dir := t.TempDir()
	v := niiref.TestVolume([3]int{3, 3, 3})
	v.Data[4] = float32(math.NaN())
	if err := Write(filepath.Join(dir, "nan.nii"), v, WriteOptions{DataType: DTInt16}); err == nil {
		t.Error("NaN into int16 accepted")
	}
	v = niiref.TestVolume([3]int{3, 3, 3})
	long := string(bytes.Repeat([]byte("x"), 81))
	if err := Write(filepath.Join(dir, "long.nii"), v, WriteOptions{Description: long}); err == nil {
		t.Error("81-byte description accepted")
	}
	v.Affine[2] = [4]float64{0, 0, 0, 0}
	if err := Write(filepath.Join(dir, "sing.nii"), v, WriteOptions{}); err == nil {
		t.Error("singular affine accepted")
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 0 {
		t.Errorf("refused writes left %d files", len(entries))
	}
}

// TestWriteNIfTIQformBranches: the quaternion decomposition of nifti1_io.c
// has four branches (trace large; else the largest diagonal term); each is
// checked against nibabel's reading of the qform (NIfTI-1 header, quatern_b/c/d
// and pixdim[0] = qfac), on right- and left-handed rotations.
func TestWriteNIfTIQformBranches(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	rot := func(axis [3]float64, ang float64) [3][3]float64 {
		n := math.Sqrt(axis[0]*axis[0] + axis[1]*axis[1] + axis[2]*axis[2])
		x, y, z := axis[0]/n, axis[1]/n, axis[2]/n
		c, s, C := math.Cos(ang), math.Sin(ang), 1-math.Cos(ang)
		return [3][3]float64{
			{x*x*C + c, x*y*C - z*s, x*z*C + y*s},
			{y*x*C + z*s, y*y*C + c, y*z*C - x*s},
			{z*x*C - y*s, z*y*C + x*s, z*z*C + c},
		}
	}
	cases := map[string][3][3]float64{
		"small":    rot([3]float64{1, 2, 3}, 0.4),
		"x180":     rot([3]float64{1, 0.1, 0.05}, 3.1),
		"y180":     rot([3]float64{0.1, 1, 0.05}, 3.1),
		"z180":     rot([3]float64{0.05, 0.1, 1}, 3.1),
		"lps":      {{-1, 0, 0}, {0, -1, 0}, {0, 0, 1}},
		"pir":      {{0, 0, -1}, {-1, 0, 0}, {0, -1, 0}},
		"leftflip": {{-1, 0, 0}, {0, 1, 0}, {0, 0, 1}},
	}
	dir := t.TempDir()
	var jobs [][]string
	var wrote []volume.Affine
	var names []string
	for name, r := range cases {
		for _, left := range []bool{false, true} {
			v := niiref.TestVolume([3]int{3, 4, 2})
			sp := [3]float64{0.8, 1.3, 2.1}
			for i := 0; i < 3; i++ {
				for j := 0; j < 3; j++ {
					v.Affine[i][j] = r[i][j] * sp[j]
					if left && j == 2 {
						v.Affine[i][j] = -v.Affine[i][j]
					}
				}
			}
			p := filepath.Join(dir, name+strconv.FormatBool(left)+".nii")
			if err := Write(p, v, WriteOptions{}); err != nil {
				t.Fatal(err)
			}
			jobs = append(jobs, []string{"info", p})
			wrote = append(wrote, v.Affine)
			names = append(names, filepath.Base(p))
		}
	}
	for n, raw := range niiref.Batch(t, jobs) {
		var ri niiRefInfo
		niiref.Decode(t, raw, &ri)
		if ri.Qform == nil || !niiref.CloseAffine(*ri.Qform, wrote[n], 1e-5) {
			t.Errorf("%s: nibabel qform %v, wrote %v", names[n], ri.Qform, wrote[n])
		}
	}
}

// TestWriteNIfTIGzipLevel: every accepted WriteOptions.GzipLevel gives
// a gzip member (RFC 1952) that Go's compress/gzip and nibabel 5.0 (through
// Python's zlib) decompress to the bytes of the .nii written with the same
// options; 0 gives the default level's bytes (klauspost/compress level 5,
// the level used before the option existed); other levels are refused with
// nothing written.
func TestWriteNIfTIGzipLevel(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	v := niiref.TestVolume([3]int{9, 8, 7})
	dir := t.TempDir()
	raw := filepath.Join(dir, "plain.nii")
	if err := Write(raw, v, WriteOptions{DataType: DTInt16}); err != nil {
		t.Fatal(err)
	}
	want, err := os.ReadFile(raw)
	if err != nil {
		t.Fatal(err)
	}
	levels := []int{0, gzip.HuffmanOnly, gzip.DefaultCompression, gzip.BestSpeed, 5, gzip.BestCompression}
	got := map[int][]byte{}
	var jobs [][]string
	for _, l := range levels {
		p := filepath.Join(dir, "level"+strconv.Itoa(l)+".nii.gz")
		if err := Write(p, v, WriteOptions{DataType: DTInt16, GzipLevel: l}); err != nil {
			t.Fatalf("level %d: %v", l, err)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		got[l] = b
		zr, err := gzip.NewReader(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("level %d: %v", l, err)
		}
		if plain, err := io.ReadAll(zr); err != nil || !bytes.Equal(plain, want) {
			t.Errorf("level %d: compress/gzip gives %d bytes (%v), want the %d of the .nii", l, len(plain), err, len(want))
		}
		jobs = append(jobs, []string{"dump", p, p + ".f32"})
	}
	if !bytes.Equal(got[0], got[gzip.DefaultCompression]) || !bytes.Equal(got[0], got[5]) {
		t.Error("level 0 does not give the default level's bytes")
	}
	if bytes.Equal(got[gzip.HuffmanOnly], got[0]) || bytes.Equal(got[gzip.BestSpeed], got[gzip.BestCompression]) {
		t.Error("the level makes no difference to the bytes")
	}
	niiref.Batch(t, jobs)
	ref := niiref.ReadF32(t, filepath.Join(dir, "level0.nii.gz.f32"))
	for _, l := range levels {
		if f := niiref.ReadF32(t, filepath.Join(dir, "level"+strconv.Itoa(l)+".nii.gz.f32")); !slices.Equal(f, ref) || len(f) != len(v.Data) {
			t.Errorf("level %d: nibabel reads other voxels than at the default level", l)
		}
	}
	for _, l := range []int{-3, 10, 100, -100} {
		p := filepath.Join(dir, "bad"+strconv.Itoa(l)+".nii.gz")
		if err := Write(p, v, WriteOptions{GzipLevel: l}); err == nil {
			t.Errorf("gzip level %d accepted", l)
		}
		if _, err := os.Stat(p); err == nil {
			t.Errorf("gzip level %d: file written", l)
		}
	}
}
