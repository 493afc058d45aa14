package nifti

import (
	"bytes"
	"compress/gzip"
	"io"
	"math"
	"math/rand"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/internal/niiref"
)

// niiRefCase is one file checked against nibabel, or one we must refuse.
type niiRefCase struct {
	path   string
	index  int
	refuse string // when set, Load must fail with an error containing this
}

func (c niiRefCase) arg() string { return c.path + "@" + strconv.Itoa(c.index) }

// TestNIfTIAgainstNibabel loads every NIfTI and Analyze image in
// python3-nibabel's test data and gonii's test_data, header-only files of
// nibabel's data completed with image files, and files nibabel itself writes
// (every scalar datatype in both byte orders, scaling, sform/qform/neither,
// pairs, gzip, 2D, 4D, 5D, Analyze), and compares dims, the affine (to 1e-5),
// the axis code, and the voxel min, max and sum with nibabel 5.0's
// img.affine, aff2axcodes and get_fdata (testdata/nifti_ref.py).
func TestNIfTIAgainstNibabel(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	nb := refcheck.Path(t, niiref.NibabelDir)
	gd := niiref.GoniiTestData(t)
	dir := t.TempDir()
	var cases []niiRefCase
	for _, n := range []string{"anatomical.nii", "example4d.nii.gz", "example_nifti2.nii.gz",
		"reoriented_anat_moved.nii", "resampled_anat_moved.nii", "functional.nii", "standard.nii.gz"} {
		cases = append(cases, niiRefCase{path: filepath.Join(nb, n)})
	}
	cases = append(cases,
		niiRefCase{path: filepath.Join(nb, "example4d.nii.gz"), index: 1},
		niiRefCase{path: filepath.Join(nb, "functional.nii"), index: 19},
		niiRefCase{path: filepath.Join(nb, "row_major.dconn.nii"), refuse: "CIFTI-2"})
	for _, n := range []string{"int16.nii.gz", "nii2_LR.nii.gz", "nii2_RL.nii.gz", "nii2_mni.nii.gz",
		"t1.hdr.gz", "tensor_rgb.nii.gz", "tensor_tr.nii.gz"} {
		cases = append(cases, niiRefCase{path: filepath.Join(gd, n)})
	}
	cases = append(cases,
		niiRefCase{path: filepath.Join(gd, "tensor_rgb.nii.gz"), index: 2},
		niiRefCase{path: filepath.Join(gd, "t1.img.gz")},
		niiRefCase{path: filepath.Join(gd, "rgb24.nii.gz"), refuse: "rgb24"})
	cases = append(cases, niiCompletedPairs(t, nb, dir)...)
	var made []string
	refcheck.RunPython(t, niiref.Script(), &made, "make", dir)
	for _, p := range made {
		cases = append(cases, niiRefCase{path: p})
	}
	cases = append(cases, niiRefCase{path: filepath.Join(dir, "n2_4d.nii.gz"), index: 2},
		niiRefCase{path: filepath.Join(dir, "five_d.nii.gz"), index: 5})

	var args []string
	for _, c := range cases {
		if c.refuse == "" {
			args = append(args, c.arg())
		}
	}
	var refs []niiRefInfo
	refcheck.RunPython(t, niiref.Script(), &refs, append([]string{"infos"}, args...)...)
	i := 0
	for _, c := range cases {
		name := strings.TrimPrefix(c.arg(), dir+"/")
		v, err := volume.Load([]string{c.path}, volume.LoadOptions{VolumeIndex: c.index})
		if c.refuse != "" {
			if err == nil || !strings.Contains(err.Error(), c.refuse) {
				t.Errorf("%s: want an error about %q, got %v", name, c.refuse, err)
			}
			continue
		}
		ref := refs[i]
		i++
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		niiCompare(t, name, v, ref)
	}
	t.Logf("%d files checked against nibabel", i)
}

// niiCompare checks one loaded volume against nifti_ref.py info.
func niiCompare(t *testing.T, name string, v *volume.Volume, ref niiRefInfo) {
	t.Helper()
	want := [3]int{1, 1, 1}
	frames := 1
	for k, s := range ref.Shape {
		if k < 3 {
			want[k] = s
		} else {
			frames *= s
		}
	}
	if v.Dims != want || v.Meta.NumVolumes != frames {
		t.Errorf("%s: dims %v with %d volume(s), nibabel shape %v", name, v.Dims, v.Meta.NumVolumes, ref.Shape)
	}
	// NIfTI-1 header, sform/qform rules; nibabel Nifti1Header.get_best_affine.
	if !niiref.CloseAffine(v.Affine, ref.Affine, 1e-5) {
		t.Errorf("%s: affine %v, nibabel %v", name, v.Affine, ref.Affine)
	}
	// nibabel.orientations.aff2axcodes.
	if got := v.Affine.Orientation(); got != ref.Axcodes {
		t.Errorf("%s: orientation %s, nibabel %s", name, got, ref.Axcodes)
	}
	mn, mx, _ := v.Stats()
	var sum, abs float64
	for _, x := range v.Data {
		if f := float64(x); !math.IsNaN(f) {
			sum += f
			abs += math.Abs(f)
		}
	}
	// Voxels are float32 here and float64 in nibabel: allow float32 rounding.
	rel := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-6*math.Max(1, scale) }
	if !rel(mn, ref.Min, math.Abs(ref.Min)) || !rel(mx, ref.Max, math.Abs(ref.Max)) || !rel(sum, ref.Sum, abs) {
		t.Errorf("%s: min/max/sum %g %g %g, nibabel %g %g %g", name, mn, mx, sum, ref.Min, ref.Max, ref.Sum)
	}
	// descrip is a NUL-terminated char[80] (nifti1.h); numpy strips trailing
	// NULs only, so compare up to the first NUL.
	if ref.Descrip != nil && strings.SplitN(*ref.Descrip, "\x00", 2)[0] != v.Meta.Description {
		t.Errorf("%s: description %q, nibabel %q", name, v.Meta.Description, *ref.Descrip)
	}
	if v.Meta.Format != "nifti" {
		t.Errorf("%s: format %q", name, v.Meta.Format)
	}
}

// niiCompletedPairs copies nibabel's header-only analyze.hdr, nifti1.hdr and
// nifti2.hdr and writes image files for them (deterministic pseudo-random
// bytes of the size the header asks for), plain and gzipped.
func niiCompletedPairs(t *testing.T, nb, dir string) []niiRefCase {
	t.Helper()
	var cases []niiRefCase
	rng := rand.New(rand.NewSource(42))
	for _, n := range []string{"analyze", "nifti1", "nifti2"} {
		hdr, err := os.ReadFile(filepath.Join(nb, n+".hdr"))
		if err != nil {
			refcheck.Missing(t, "%v", err)
		}
		h, _, err := parseNIfTIHeader(hdr, true)
		if err != nil {
			t.Fatalf("%s.hdr: %v", n, err)
		}
		img := make([]byte, int(h.voxOffset)+h.frames()*h.Len()*h.bytesPerVoxel())
		rng.Read(img)
		write := func(name string, b []byte, gz bool) {
			if gz {
				var buf bytes.Buffer
				zw := gzip.NewWriter(&buf)
				zw.Write(b)
				zw.Close()
				b = buf.Bytes()
			}
			if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		write(n+".hdr", hdr, false)
		write(n+".img", img, false)
		write(n+"_gz.hdr.gz", hdr, true)
		write(n+"_gz.img.gz", img, true)
		write(n+"_mixed.hdr", hdr, false)
		write(n+"_mixed.img.gz", img, true)
		// nibabel does not pair a plain .hdr with an .img.gz; TestNIfTIMixedPair checks ours.
		for _, p := range []string{n + ".hdr", n + ".img", n + "_gz.hdr.gz", n + "_gz.img.gz"} {
			cases = append(cases, niiRefCase{path: filepath.Join(dir, p)})
		}
	}
	return cases
}

// TestNIfTIMixedPair: a plain .hdr with a gzipped .img reads the same as the
// plain pair (nibabel does not pair these, so the plain pair, checked against
// nibabel above, is the reference).
func TestNIfTIMixedPair(t *testing.T) {
	nb := refcheck.Path(t, niiref.NibabelDir)
	dir := t.TempDir()
	niiCompletedPairs(t, nb, dir)
	for _, n := range []string{"analyze", "nifti1", "nifti2"} {
		a, err := volume.Load([]string{filepath.Join(dir, n+".hdr")}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		b, err := volume.Load([]string{filepath.Join(dir, n+"_mixed.hdr")}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if a.Affine != b.Affine || a.Dims != b.Dims || !niiref.EqualF32(a.Data, b.Data) {
			t.Errorf("%s: mixed pair differs from plain pair", n)
		}
	}
}

// TestNIfTIGzipPaths: the same image read through every gzip path gives the
// same voxels as the plain file: inflated from memory or streamed, one gzip
// member or several (RFC 1952 allows concatenated members; ISIZE then no
// longer matches, so the buffer grows as data arrives), small (one core) or
// over 1 MB (read-ahead on a second core). The plain file is checked against
// nibabel in TestNIfTIAgainstNibabel's synthetic files; here gonii's
// int16.nii.gz (2 MB) is the source.
func TestNIfTIGzipPaths(t *testing.T) {
	src := filepath.Join(niiref.GoniiTestData(t), "int16.nii.gz")
	zr, err := os.Open(src)
	if err != nil {
		t.Fatal(err)
	}
	defer zr.Close()
	gr, err := gzip.NewReader(zr)
	if err != nil {
		t.Fatal(err)
	}
	raw, err := io.ReadAll(gr)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	plain := filepath.Join(dir, "plain.nii")
	multi := filepath.Join(dir, "multi.nii.gz")
	if err := os.WriteFile(plain, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	for _, part := range [][]byte{raw[:1000], raw[1000 : len(raw)/2], raw[len(raw)/2:]} {
		zw, _ := gzip.NewWriterLevel(&buf, gzip.BestSpeed)
		zw.Write(part)
		zw.Close()
	}
	if err := os.WriteFile(multi, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	want, err := volume.Load([]string{plain}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{src, multi} {
		for _, inMemory := range []int64{0, maxInMemoryGzip} {
			got, err := readNIfTI(p, volume.LoadOptions{}, inMemory)
			if err != nil {
				t.Fatalf("%s (in memory up to %d): %v", p, inMemory, err)
			}
			if got.Dims != want.Dims || got.Affine != want.Affine || !niiref.EqualF32(got.Data, want.Data) {
				t.Errorf("%s (in memory up to %d) differs from the plain file", p, inMemory)
			}
		}
	}
}
