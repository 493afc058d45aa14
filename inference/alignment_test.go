package inference

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// alignedTinyFolder writes the tiny model's folder with a card that aligns
// scans (affine, NCC) to template.nii.gz, a synthetic head, and returns the
// folder and the template.
func alignedTinyFolder(t *testing.T, withTemplate bool) (string, *volume.Volume) {
	t.Helper()
	model := readTiny(t)
	card := tinyCard(model)
	card.Preprocessing.Alignment = &preprocess.Alignment{Method: preprocess.AlignAffine, Template: "template.nii.gz", Metric: "ncc"}
	dir := filepath.Join(t.TempDir(), "aligned-model")
	if err := WriteModelFolderDir(dir, card, model); err != nil {
		t.Fatal(err)
	}
	tpl := syntheticHead(rand.New(rand.NewPCG(3, 4)), [3]float64{18, 22, 17}, 3)
	if withTemplate {
		if err := nifti.Write(filepath.Join(dir, "template.nii.gz"), tpl, nifti.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
	}
	return dir, tpl
}

// moved resamples v so that template point x is seen at a·x.
func moved(t *testing.T, v *volume.Volume, a volume.Affine) *volume.Volume {
	t.Helper()
	inv, err := a.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	out, err := volume.Resample(v, inv.Mul(v.Affine), v.Dims, volume.Trilinear)
	if err != nil {
		t.Fatal(err)
	}
	out.Affine = v.Affine
	out.Meta.Modality = "MR"
	return out
}

// TestModelFolderAlignment loads a model folder whose card aligns scans to
// its template, scores a shifted and slightly rotated copy of the template
// (the alignment-quality check passes, and the found transform maps the
// template's centre to within 1 mm of where the shift put it) and a copy
// squashed to 60 % (the check fails with the radiologist's sentence).
func TestModelFolderAlignment(t *testing.T) {
	initORT(t)
	dir, tpl := alignedTinyFolder(t, true)
	b, err := LoadModelFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	if got, _ := b.Card.AlignmentTemplate(); got == nil || got.Dims != tpl.Dims {
		t.Fatalf("template not loaded with the model folder")
	}
	s, err := NewSession(b, SessionOptions{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	c := tpl.Affine.Apply([3]float64{31.5, 31.5, 31.5})
	shift := volume.Identity()
	shift[0][3], shift[1][3], shift[2][3] = 4, -3, 2
	r, err := s.Score(moved(t, tpl, shift))
	if err != nil {
		t.Fatal(err)
	}
	ch := checkByName(r, CheckAlignment)
	if !ch.Pass || r.Prepared.Alignment == nil {
		t.Fatalf("alignment check on a shifted copy: %+v", ch)
	}
	got, want := r.Prepared.Alignment.Transform.Apply(c), shift.Apply(c)
	if d := (got[0]-want[0])*(got[0]-want[0]) + (got[1]-want[1])*(got[1]-want[1]) + (got[2]-want[2])*(got[2]-want[2]); d > 1 {
		t.Errorf("template centre goes to %v, the shift puts it at %v", got, want)
	}
	squash := volume.Identity()
	for i := 0; i < 3; i++ {
		squash[i][i] = 0.6
		squash[i][3] = 0.4 * c[i]
	}
	r, err = s.Score(moved(t, tpl, squash))
	if err != nil {
		t.Fatal(err)
	}
	ch = checkByName(r, CheckAlignment)
	if ch.Pass || !strings.HasPrefix(ch.Explanation, "The scan could not be matched to the model's template: ") {
		t.Errorf("alignment check on a head squashed to 60 %%: %+v", ch)
	}
}

// TestModelFolderAlignmentRefusals: a card naming a missing template, a
// path outside the folder, or an unknown method is refused with the field.
func TestModelFolderAlignmentRefusals(t *testing.T) {
	dir, _ := alignedTinyFolder(t, false)
	if _, err := LoadModelFolder(dir); err == nil || !strings.Contains(err.Error(), "preprocessing.alignment.template") {
		t.Errorf("missing template: %v", err)
	}
	for _, al := range []preprocess.Alignment{
		{Method: "affine", Template: "../outside.nii"},
		{Method: "warp", Template: "t.nii"},
		{Method: "rigid"},
		{Method: "rigid", Template: "t.nii", Metric: "ssd"},
	} {
		spec := preprocess.DefaultSpec()
		spec.Alignment = &al
		if err := spec.Validate(); err == nil || !strings.Contains(err.Error(), "preprocessing.alignment") {
			t.Errorf("%+v: %v", al, err)
		}
	}
	if err := os.RemoveAll(dir); err != nil {
		t.Fatal(err)
	}
}
