package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/phantom"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// TestPrepareAligned: `prepare --spec` with an alignment block aligns a
// rotated, enlarged and shifted copy of the template first, so the model
// grid it writes is the template's own model grid moved by that transform
// (the grid's affine is expressed in the scan's world: 4.4 mm steps).
// Without alignment the grid would keep 4 mm steps around the scan's head.
func TestPrepareAligned(t *testing.T) {
	dir := t.TempDir()
	c, err := phantom.Generate(7, 0, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	tpl := c.Volume
	if err := nifti.Write(filepath.Join(dir, "template.nii.gz"), tpl, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cz, sz := math.Cos(10*math.Pi/180), math.Sin(10*math.Pi/180)
	const k = 1.1 // the scan's head is 10 % larger than the template's
	shift := volume.Affine{{k * cz, -k * sz, 0, 6}, {k * sz, k * cz, 0, -4}, {0, 0, k, 3}, {0, 0, 0, 1}}
	scan := tpl.Clone()
	scan.Affine = shift.Mul(tpl.Affine) // the same voxels rotated 10° about z, 10 % larger, moved 6, −4, 3 mm
	scanPath := filepath.Join(dir, "scan.nii.gz")
	if err := nifti.Write(scanPath, scan, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	spec := preprocess.DefaultSpec()
	spec.Alignment = &preprocess.Alignment{Method: preprocess.AlignAffine, Template: "template.nii.gz"}
	b, _ := json.Marshal(spec)
	specPath := filepath.Join(dir, "spec.json")
	if err := os.WriteFile(specPath, b, 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "input.nii.gz")
	if code, _, stderr := runCLI("prepare", scanPath, "--spec", specPath, "--out", out); code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	got, err := volume.Load([]string{out}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := preprocess.Prepare(tpl, preprocess.DefaultSpec())
	if err != nil {
		t.Fatal(err)
	}
	want := shift.Mul(ref.Transform.GridAffine)
	for r := 0; r < 3; r++ {
		// the head-centre crop is recomputed on the aligned copy, whose
		// centre of mass moves with resampling: allow half a 4 mm model voxel
		if d := math.Abs(got.Affine[r][3] - want[r][3]); d > 2 {
			t.Errorf("grid origin row %d: %.2f mm, want %.2f (template grid moved by the transform)", r, got.Affine[r][3], want[r][3])
		}
		for k := 0; k < 3; k++ {
			if d := math.Abs(got.Affine[r][k] - want[r][k]); d > 0.02*4 {
				t.Errorf("grid axes [%d][%d]: %.3f, want %.3f (rotated with the scan)", r, k, got.Affine[r][k], want[r][k])
			}
		}
	}
}
