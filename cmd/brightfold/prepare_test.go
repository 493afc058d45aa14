package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/notice"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
)

// TestPrepare: --print-spec is the default spec and parses back; prepare
// writes the model-grid tensor with the grid's affine and the notice.
func TestPrepare(t *testing.T) {
	var out, errb bytes.Buffer
	if code := run([]string{"prepare", "--print-spec"}, &env{stdout: &out, stderr: &errb}); code != 0 {
		t.Fatal(errb.String())
	}
	s, err := preprocess.ParseSpec(out.Bytes())
	if err != nil || s != preprocess.DefaultSpec() {
		t.Fatalf("print-spec: %v %+v", err, s)
	}
	if !strings.Contains(errb.String(), notice.Full) {
		t.Error("print-spec without the notice")
	}
	scan := headNIfTI(t)
	spec := filepath.Join(t.TempDir(), "spec.json")
	os.WriteFile(spec, []byte(`{"orientation":"RAS","spacing_mm":[2,2,2],"shape":[24,28,20],"crop":"head-centre","antialias":"block-mean","interpolation":"trilinear","head_mask":{"method":"percentile-fraction","low_percentile":1,"high_percentile":99,"fraction":0.1},"intensity":{"method":"percentile-minmax","low_percentile":1,"high_percentile":99}}`), 0o644)
	dst := filepath.Join(t.TempDir(), "in.nii.gz")
	runBF(t, "prepare", scan, "--spec", spec, "--out", dst)
	v, err := volume.Load([]string{dst}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	src, _ := volume.Load([]string{scan}, volume.LoadOptions{})
	sp, _ := preprocess.ParseSpec(mustRead(t, spec))
	pr, err := preprocess.Prepare(src, sp)
	if err != nil {
		t.Fatal(err)
	}
	if v.Dims != [3]int{24, 28, 20} {
		t.Fatalf("dims %v", v.Dims)
	}
	// the sform holds the grid affine to float32 precision (NIfTI-1 srow_*)
	for r := 0; r < 3; r++ {
		for c := 0; c < 4; c++ {
			if d := v.Affine[r][c] - pr.Transform.GridAffine[r][c]; d > 1e-5 || d < -1e-5 {
				t.Fatalf("affine %v, want %v", v.Affine, pr.Transform.GridAffine)
			}
		}
	}
	for i, x := range pr.Tensor.GridValues() {
		if v.Data[i] != x {
			t.Fatalf("voxel %d: %v, tensor %v", i, v.Data[i], x)
		}
	}
	if d := strings.TrimSpace(v.Meta.Description); d == "" || d != notice.Short {
		t.Errorf("descrip %q", v.Meta.Description)
	}
	for _, bad := range [][]string{{"prepare", scan}, {"prepare", scan, "--spec", scan, "--out", dst}, {"prepare", scan, "--spec", spec, "--model", "x", "--out", dst}} {
		if code := run(bad, &env{stdout: &out, stderr: &errb}); code != 2 {
			t.Errorf("%v: exit %d, want 2", bad, code)
		}
	}
}

func mustRead(t *testing.T, p string) []byte {
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
