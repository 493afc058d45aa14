package app

import (
	"os"
	"path/filepath"
	"testing"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// templateModelFolder writes the demo model with a rigid alignment to a
// template (a 4 mm demo phantom) and its head mask (the phantom's tissue
// labels, air left out) as a model folder, and returns the folder and the
// mask.
func templateModelFolder(t *testing.T) (string, *volume.Volume) {
	t.Helper()
	dir := t.TempDir()
	c, err := phantom.Generate(20261203, 0, phantom.Options{VoxelMM: 4})
	if err != nil {
		t.Fatal(err)
	}
	mask := *c.Volume
	mask.Data = make([]float32, len(c.Labels))
	for i, l := range c.Labels {
		if l != phantom.Air {
			mask.Data[i] = 1
		}
	}
	files := map[string][]byte{}
	for name, v := range map[string]*volume.Volume{"template.nii.gz": c.Volume, "mask.nii.gz": &mask} {
		p := filepath.Join(dir, name)
		if err := nifti.Write(p, v, nifti.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		files[name] = b
	}
	mf, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
	if err != nil {
		t.Fatal(err)
	}
	card := *mf.Card
	card.Preprocessing.Alignment = &preprocess.Alignment{Method: preprocess.AlignRigid, Template: "template.nii.gz", Mask: "mask.nii.gz",
		TemplateSHA256: inference.FileSHA256(files["template.nii.gz"]), MaskSHA256: inference.FileSHA256(files["mask.nii.gz"])}
	folder := filepath.Join(dir, "model")
	if err := inference.WriteModelFolderFiles(folder, &card, mf.Model, files); err != nil {
		t.Fatal(err)
	}
	return folder, &mask
}

// The Template check box is off for a model folder without an alignment
// template. With one, it shows the scan aligned to the template with the
// outline of the template's mask: every pixel of the large plane drawn in
// the outline colour, and only those, is a pixel inside the model folder's
// mask file (read at the voxel the plane shows there) with a 4-neighbour
// outside it. Switching back shows the scan at the same crosshair.
func TestTemplateView(t *testing.T) {
	refcheck.ORTLib(t)
	c, err := phantom.Generate(20261203, 1, phantom.Options{VoxelMM: 2})
	if err != nil {
		t.Fatal(err)
	}
	scan := filepath.Join(t.TempDir(), "scan.nii.gz")
	if err := nifti.Write(scan, c.Volume, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}

	plain := newHarness(t, Options{})
	plain.open(scan)
	if !plain.u.scan.tplCk.Disabled() {
		t.Error("the Template check box is on offer for a model folder without a template")
	}

	folder, mask := templateModelFolder(t)
	h := newHarness(t, Options{Model: folder})
	h.open(scan)
	p := h.u.scan
	if h.u.open.result == nil || h.u.open.result.Prepared == nil || h.u.open.result.Prepared.Alignment == nil {
		t.Fatalf("the scan was not aligned to the template: %q", h.u.message.Text)
	}
	if p.tplCk.Disabled() {
		t.Fatal("the Template check box is disabled for a model folder with a template")
	}
	if hasText(h.texts(), inference.CheckAlignment) {
		t.Errorf("the alignment check is named by its key %q on screen", inference.CheckAlignment)
	}
	scanScene, before := p.scene, p.at
	p.tplCk.SetChecked(true)
	if p.tpl == nil || p.scene != p.tpl.Scene || p.scene.Volume().Dims != mask.Dims {
		t.Fatalf("template view not shown (status %q)", h.u.message.Text)
	}
	v := p.views[p.order[0]]
	f, img := v.frame, v.rgba
	in := func(x, y int) bool {
		if x < 0 || y < 0 || x >= f.Width || y >= f.Height {
			return false
		}
		ijk, ok := f.VoxelAt(float64(x)+0.5, float64(y)+0.5)
		return ok && mask.Data[mask.Index(ijk[0], ijk[1], ijk[2])] > 0
	}
	drawn, wrong := 0, 0
	for y := 0; y < f.Height; y++ {
		for x := 0; x < f.Width; x++ {
			edge := in(x, y) && !(in(x-1, y) && in(x+1, y) && in(x, y-1) && in(x, y+1))
			onOutline := img.RGBAAt(x, y) == p.tpl.Outline.Color
			if onOutline {
				drawn++
			}
			if edge != onOutline {
				wrong++
			}
		}
	}
	if drawn < 20 || wrong > 0 {
		t.Errorf("%v plane: %d outline pixels, %d differ from the mask file's edge", v.plane, drawn, wrong)
	}
	if p.visibleOverlay() != nil {
		t.Error("the relevance map is drawn over the template view")
	}
	p.tplCk.SetChecked(false)
	if p.tpl != nil || p.scene != scanScene {
		t.Fatal("unchecking Template did not bring the scan back")
	}
	for i := range before {
		if d := p.at[i] - before[i]; d > 2 || d < -2 { // within a 2 mm voxel of where it was
			t.Errorf("crosshair moved from %v to %v through the template view", before, p.at)
			break
		}
	}
}
