package app

import (
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"fyne.io/fyne/v2/test"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
	"brightfold/viewer"
)

// tinyModelFolder makes a model folder from the inference package's test model
// (a small PyTorch export with a fitted card), which ONNX Runtime and the
// Go executor both run.
func tinyModelFolder(t *testing.T) string {
	t.Helper()
	refcheck.ORTLib(t)
	dir := filepath.Join(t.TempDir(), "tiny-model")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for src, dst := range map[string]string{"tiny3d.onnx": "model.onnx", "card-example.json": "card.json"} {
		b, err := os.ReadFile(filepath.Join("..", "inference", "testdata", src))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, dst), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

// colouredPixels counts the pixels of a plane whose red and blue differ
// (the grey scan has none; the overlay colours do).
func colouredPixels(v *planeView) int {
	n := 0
	for i := 0; i+3 < len(v.rgba.Pix); i += 4 {
		if v.rgba.Pix[i] != v.rgba.Pix[i+2] {
			n++
		}
	}
	return n
}

// Scoring a scan fills Evidence (model, probability, temperature) and Fit
// check (a verdict with every check), then the relevance map is drawn over
// the planes with its colour bar; another method replaces it, "None"
// removes it, and the overlay key hides and shows it.
func TestScoreAndRelevance(t *testing.T) {
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.open(anatomical(t))
	u := h.u
	if u.open.result == nil {
		t.Fatalf("not scored: %q", u.evidence.status.Text)
	}
	if u.withheld(u.open) {
		u.showAnyway() // a real scan may fail the tiny model's fit check
		h.settle()
	}
	p, err := parseProbability(strings.TrimSuffix(u.head.prob.Text, "  ("+unreliable+")"))
	if err != nil || p < 0 || p > 1 {
		t.Fatalf("probability %q", u.head.prob.Text)
	}
	if h := u.fit.headline.Text; h != verdictIn && h != verdictOOD {
		t.Fatalf("verdict %q", h)
	}
	if len(u.fit.checks.Objects) != len(passed(u.open.result.Checks)) || len(u.fit.causes.Objects) != len(u.open.result.Causes) {
		t.Errorf("%d cause rows, %d passing rows for %d checks", len(u.fit.causes.Objects), len(u.fit.checks.Objects), len(u.open.result.Checks))
	}
	ax := u.scan.views[viewer.Axial]
	if u.scan.overlay == nil || u.evidence.colorBar.Image == nil || u.open.relevance == nil {
		t.Fatalf("no relevance overlay: %q", u.evidence.ovState.Text)
	}
	// The map's line says what share of the logit its voxels carry
	// (overlay.ShareSentence), not a raw key such as "consistency error".
	if st := u.evidence.ovState.Text; !strings.Contains(st, "LRP map") || !strings.Contains(st, u.open.relevance.ShareSentence()) ||
		!strings.Contains(st, "The voxels carry") || strings.Contains(st, "consistency error") {
		t.Errorf("overlay state %q", st)
	}
	u.goToPeak()
	withOverlay := colouredPixels(ax)
	if withOverlay == 0 {
		t.Error("the axial plane through the relevance peak shows no overlay colour")
	}
	u.typedKey(keyEvent("O"))
	if colouredPixels(ax) != 0 {
		t.Error("overlay hidden but still drawn")
	}
	u.typedKey(keyEvent("O"))

	u.evidence.selectMethod("Gradient × input")
	h.settle()
	if u.open.relevance == nil || u.open.relevance.Method != "gradinput" || u.scan.overlay == nil {
		t.Fatalf("gradient × input map not shown: %q", u.evidence.ovState.Text)
	}
	u.evidence.selectMethod(methodNone)
	h.settle()
	if u.scan.overlay != nil || colouredPixels(ax) != 0 {
		t.Error("method None leaves an overlay")
	}
}

// A slow map can be cancelled from the task strip: the map is not drawn and
// the panel says so.
func TestCancelRelevance(t *testing.T) {
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.open(anatomical(t))
	u := h.u
	if u.withheld(u.open) {
		u.showAnyway()
	}
	u.evidence.selectMethod("Occlusion")
	if u.evidence.compute.Visible() {
		test.Tap(u.evidence.compute) // a slow method runs when asked
	}
	if !u.tasks.busy(taskRelevance) || !u.taskBox.Visible() {
		t.Fatal("occlusion is not running with a progress row")
	}
	u.cancelTask(taskRelevance)
	h.settle()
	if u.scan.overlay != nil || !strings.Contains(u.evidence.ovState.Text, "cancelled") {
		t.Errorf("after cancel: overlay %v, state %q", u.scan.overlay != nil, u.evidence.ovState.Text)
	}
}

// A single slice cannot be prepared for the model: the fit check says
// out-of-distribution from the checks that need no model, and Evidence
// shows no probability and no map.
func TestUnpreparedScan(t *testing.T) {
	src, err := volume.Load([]string{anatomical(t)}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	one, err := volume.New([3]int{src.Dims[0], src.Dims[1], 1}, src.Affine)
	if err != nil {
		t.Fatal(err)
	}
	k := src.Dims[2] / 2
	copy(one.Data, src.Data[src.Index(0, 0, k):src.Index(0, 0, k+1)])
	path := filepath.Join(t.TempDir(), "one-slice.nii")
	if err := nifti.Write(path, one, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.open(path)
	u := h.u
	if u.fit.headline.Text != verdictOOD {
		t.Fatalf("verdict %q; evidence %q", u.fit.headline.Text, u.evidence.status.Text)
	}
	if u.head.prob.Text != "No probability" || !strings.Contains(u.evidence.status.Text, "No probability") || u.scan.overlay != nil {
		t.Errorf("probability %q, status %q, overlay %v", u.head.prob.Text, u.evidence.status.Text, u.scan.overlay != nil)
	}
}

// parseProbability reads the probability as shown ("0.42", "> 0.99", "< 0.01").
func parseProbability(s string) (float64, error) {
	return strconv.ParseFloat(strings.TrimSpace(strings.TrimLeft(s, "<>")), 64)
}
