package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// TestAlignNibabelMovedCopy aligns nibabel's reoriented_anat_moved.nii to
// anatomical.nii (python3-nibabel test data) rigidly with mutual information
// and an interior template mask: transform.json's matrix must agree with
// the transform nibabel's own make_moved_anat.py applied
// (internal/register/testdata/nibabel_moved.py) to within 1 mm at the
// template's corners, and the outputs carry the notice.
func TestAlignNibabelMovedCopy(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	tplPath := refcheck.Path(t, filepath.Join(nibabelDir, "anatomical.nii"))
	scanPath := refcheck.Path(t, filepath.Join(nibabelDir, "reoriented_anat_moved.nii"))
	var truth volume.Affine
	refcheck.RunPython(t, filepath.Join(refcheck.RepoRoot(), "internal", "register", "testdata", "nibabel_moved.py"), &truth)
	dir := t.TempDir()
	tpl, err := volume.Load([]string{tplPath}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	mask, _ := volume.New(tpl.Dims, tpl.Affine)
	for k := 4; k < tpl.Dims[2]-4; k++ {
		for j := 4; j < tpl.Dims[1]-4; j++ {
			for i := 4; i < tpl.Dims[0]-4; i++ {
				mask.Data[mask.Index(i, j, k)] = 1
			}
		}
	}
	maskPath := filepath.Join(dir, "mask.nii.gz")
	if err := nifti.Write(maskPath, mask, nifti.WriteOptions{DataType: nifti.DTUint8}); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "out")
	code, stdout, stderr := runCLI("align", scanPath, "--to", tplPath, "--dof", "6", "--metric", "mi", "--mask", maskPath, "--out", out, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stderr, "align: ") {
		t.Errorf("no progress lines on stderr: %q", stderr)
	}
	var printed, file alignReport
	if err := json.Unmarshal([]byte(stdout), &printed); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(out, "transform.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &file); err != nil {
		t.Fatal(err)
	}
	if printed.Matrix != file.Matrix || file.Notice != notice.Full || file.DOF != 6 || file.Metric != "mi" || file.Convention == "" {
		t.Errorf("transform.json %+v", file)
	}
	for _, c := range [][3]float64{{0, 0, 0}, {32, 40, 24}, {32, 0, 24}, {0, 40, 0}} {
		x := tpl.Affine.Apply(c)
		p, q := file.Matrix.Apply(x), truth.Apply(x)
		if d := math.Hypot(math.Hypot(p[0]-q[0], p[1]-q[1]), p[2]-q[2]); d > 1 {
			t.Errorf("corner %v: found and nibabel's transform differ by %.2f mm", c, d)
		}
	}
	al, err := volume.Load([]string{filepath.Join(out, "aligned.nii.gz")}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if al.Dims != tpl.Dims || !strings.Contains(al.Meta.Description, notice.Short) {
		t.Errorf("aligned.nii.gz dims %v, descrip %q", al.Dims, al.Meta.Description)
	}
}

// TestAlignBadInput: usage mistakes and unreadable files exit 2 with one
// line naming the problem, and nothing is written.
func TestAlignBadInput(t *testing.T) {
	dir := t.TempDir()
	junk := filepath.Join(dir, "junk.nii")
	if err := os.WriteFile(junk, []byte("not a nifti file"), 0o644); err != nil {
		t.Fatal(err)
	}
	tpl := filepath.Join(nibabelDir, "anatomical.nii")
	out := filepath.Join(dir, "out")
	for _, args := range [][]string{
		{"align", tpl},
		{"align", tpl, "--to", tpl, "--dof", "7"},
		{"align", tpl, "--to", tpl, "--metric", "ssd"},
		{"align", tpl, "--to", filepath.Join(dir, "missing.nii"), "--out", out},
		{"align", junk, "--to", tpl, "--out", out},
	} {
		code, _, stderr := runCLI(args...)
		if code != 2 || strings.Count(strings.TrimSpace(stderr), "\n") != 0 {
			t.Errorf("%v: exit %d, stderr %q", args, code, stderr)
		}
	}
	if _, err := os.Stat(out); !os.IsNotExist(err) {
		t.Errorf("output folder written after bad input: %v", err)
	}
}
