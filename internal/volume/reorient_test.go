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
	"brightfold/internal/volume/nifti"
)

// niiCanonRef is what nifti_ref.py canonical prints.
type niiCanonRef struct {
	Shape   []int         `json:"shape"`
	Affine  [4][4]float64 `json:"affine"`
	Axcodes string        `json:"axcodes"`
}

// TestReorientAgainstNibabel: Reorient gives the dims, affine (1e-5) and
// voxels (exactly: no interpolation) of nibabel 5.0's as_closest_canonical
// (python3-nibabel, nibabel.funcs), on nibabel's test images, gonii's LPS
// int16.nii.gz, and files we write with every axis permutation and flip
// pattern on an oblique grid.
func TestReorientAgainstNibabel(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	nb := refcheck.Path(t, niiref.NibabelDir)
	gd := niiref.GoniiTestData(t)
	dir := t.TempDir()
	paths := []string{
		filepath.Join(nb, "anatomical.nii"),
		filepath.Join(nb, "reoriented_anat_moved.nii"),
		filepath.Join(nb, "resampled_anat_moved.nii"),
		filepath.Join(nb, "example4d.nii.gz"),
		filepath.Join(gd, "int16.nii.gz"),
	}
	perms := [][3]int{{0, 1, 2}, {1, 2, 0}, {2, 0, 1}, {0, 2, 1}, {2, 1, 0}, {1, 0, 2}}
	for n, perm := range perms {
		v := niiref.TestVolume([3]int{5, 4, 3})
		src := v.Affine
		for c := 0; c < 3; c++ {
			sign := 1.0
			if (n+c)%2 == 1 {
				sign = -1 // a different flip pattern for each permutation
			}
			for r := 0; r < 3; r++ {
				v.Affine[r][c] = sign * src[r][perm[c]]
			}
		}
		p := filepath.Join(dir, "perm"+strconv.Itoa(n)+".nii")
		if err := nifti.Write(p, v, nifti.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, p)
	}
	var jobs [][]string
	for n, p := range paths {
		jobs = append(jobs, []string{"canonical", p, filepath.Join(dir, "canon"+strconv.Itoa(n)+".f32")})
	}
	res := niiref.Batch(t, jobs)
	for n, p := range paths {
		v, err := volume.Load([]string{p}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		r, err := volume.Reorient(v)
		if err != nil {
			t.Fatalf("%s: %v", p, err)
		}
		var ref niiCanonRef
		niiref.Decode(t, res[n], &ref)
		want := niiref.ReadF32(t, jobs[n][2])
		name := filepath.Base(p)
		if r.Dims != [3]int{ref.Shape[0], ref.Shape[1], ref.Shape[2]} {
			t.Errorf("%s: dims %v, nibabel %v", name, r.Dims, ref.Shape)
		}
		if !niiref.CloseAffine(r.Affine, ref.Affine, 1e-5) {
			t.Errorf("%s: affine %v, nibabel %v", name, r.Affine, ref.Affine)
		}
		if m, _ := volume.ClosestAxes(r.Affine); m.Code() != "RAS" || ref.Axcodes != "RAS" {
			t.Errorf("%s: canonical axis code %s, nibabel %s", name, m.Code(), ref.Axcodes)
		}
		if !niiref.EqualF32(r.Data, want) {
			t.Errorf("%s: voxels differ from nibabel's as_closest_canonical", name)
		}
	}
}

// TestClosestAxesAgainstNibabel: ClosestAxes(a).Code() equals nibabel's
// aff2axcodes (io_orientation) on strongly oblique and sheared affines.
func TestClosestAxesAgainstNibabel(t *testing.T) {
	t.Parallel()
	niiref.NeedNibabel(t)
	var affs [][4][4]float64
	for n := 0; n < 60; n++ {
		a := volume.Identity()
		for r := 0; r < 3; r++ {
			for c := 0; c < 3; c++ {
				// A deterministic spread of entries, some near 45° ties.
				a[r][c] = math.Sin(float64(7*n+3*r+11*c)) * (1 + float64((n+r*c)%3))
			}
		}
		if a.Validate() == nil {
			affs = append(affs, a)
		}
	}
	var codes []string
	refcheck.RunPython(t, niiref.Script(), &codes, "axcodes", niiref.AffineJSON(t, affs))
	for n, a := range affs {
		m, err := volume.ClosestAxes(a)
		if err != nil {
			t.Fatal(err)
		}
		if m.Code() != codes[n] {
			t.Errorf("affine %v: code %s, nibabel %s", a, m.Code(), codes[n])
		}
	}
}

// TestReorientKeepsWorldPositions: every voxel keeps its world position.
func TestReorientKeepsWorldPositions(t *testing.T) {
	v := niiref.TestVolume([3]int{6, 5, 4})
	v.Affine = volume.Affine{{0, 0, -2, 10}, {-1.5, 0, 0, 3}, {0, 1.2, 0, -8}, {0, 0, 0, 1}} // "PSL"
	r, err := volume.Reorient(v)
	if err != nil {
		t.Fatal(err)
	}
	inv, _ := r.Affine.Inverse()
	for k := 0; k < v.Dims[2]; k++ {
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				q := inv.Apply(v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)}))
				a, b, c := int(math.Round(q[0])), int(math.Round(q[1])), int(math.Round(q[2]))
				if r.At(a, b, c) != v.At(i, j, k) {
					t.Fatalf("voxel %d,%d,%d moved", i, j, k)
				}
			}
		}
	}
	if r.Affine.Orientation() != "RAS" {
		t.Errorf("orientation %s after Reorient", r.Affine.Orientation())
	}
}
