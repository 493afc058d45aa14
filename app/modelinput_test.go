package app

import (
	"math"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume/nifti"
)

// The "Model input" check box puts the model-grid tensor in the Scan panel on its
// own affine: the crosshair stays on the same RAS point (within the model
// grid's voxel), and the voxel and value under it are those nibabel reads
// at that point from the same tensor written as NIfTI (as `brightfold
// prepare` writes it). Back to the scan, the relevance map is drawn again.
func TestModelInputView(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.open(anatomical(t))
	u := h.u
	if u.open == nil || u.open.result == nil || u.open.result.Prepared == nil {
		t.Fatalf("not scored: %q", u.evidence.status.Text)
	}
	if u.withheld(u.open) {
		u.showAnyway()
		h.settle()
	}
	u.goToPeak()
	before := u.scan.at
	scanScene := u.scan.scene
	u.scan.inputCk.SetChecked(true)
	h.settle()
	pr := u.open.result.Prepared
	if !u.scan.input || u.scan.scene == scanScene || u.scan.scene.Volume().Dims != pr.Transform.GridDims {
		t.Fatalf("model input not shown: input %v, dims %v, status %q", u.scan.input, u.scan.scene.Volume().Dims, u.message.Text)
	}
	sp := u.scan.scene.Spacing()
	if d := dist(before, u.scan.at); d > 0.5*math.Sqrt(sp[0]*sp[0]+sp[1]*sp[1]+sp[2]*sp[2])+1e-6 {
		t.Errorf("crosshair moved %.2f mm across the switch (%v → %v)", d, before, u.scan.at)
	}
	if u.scan.visibleOverlay() != nil || !strings.Contains(u.scan.readout.Text, "(model input)") {
		t.Errorf("model input view: overlay %v, readout %q", u.scan.visibleOverlay() != nil, u.scan.readout.Text)
	}
	file := filepath.Join(t.TempDir(), "input.nii.gz")
	if err := nifti.Write(file, pr.GridVolume(), nifti.WriteOptions{DataType: nifti.DTFloat32, Description: "test"}); err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Voxel [3]int
		World [3]float64
		Value float64
	}
	at := u.scan.at
	refcheck.RunPython(t, "testdata/model_input_voxel.py", &ref, file, ftoa(at[0]), ftoa(at[1]), ftoa(at[2]))
	v := u.scan.views[u.scan.order[0]]
	x, y := v.frame.WorldToPixel(at)
	r := u.scan.scene.ReadoutAt(v.frame, x, y, nil)
	if dist(r.World, ref.World) > 1e-3 || math.Abs(float64(r.Value)-ref.Value) > 1e-5*math.Max(1, math.Abs(ref.Value)) {
		t.Errorf("crosshair voxel at %v value %g; nibabel: voxel %v at %v value %g", r.World, r.Value, ref.Voxel, ref.World, ref.Value)
	}
	u.scan.inputCk.SetChecked(false)
	h.settle()
	if u.scan.input || u.scan.scene != scanScene || u.scan.visibleOverlay() == nil || dist(before, u.scan.at) > 1e-6 {
		t.Errorf("back to the scan: input %v, overlay %v, crosshair %v (was %v)", u.scan.input, u.scan.visibleOverlay() != nil, u.scan.at, before)
	}
}

func dist(a, b [3]float64) float64 {
	return math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
}

func ftoa(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }
