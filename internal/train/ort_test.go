package train

import (
	"math"
	"testing"

	ort "github.com/yalue/onnxruntime_go"

	"brightfold/inference"
	"brightfold/internal/refcheck"
)

// TestExportRunsInONNXRuntime trains a tiny network for one epoch (so that
// the running statistics are not the initial ones), exports it, and checks
// that ONNX Runtime, the reference implementation of the ONNX operators,
// computes the same logits and features as the Go executor to 1e-4.
func TestExportRunsInONNXRuntime(t *testing.T) {
	lib := refcheck.ORTLib(t)
	if err := inference.InitRuntime(lib); err != nil {
		t.Fatal(err)
	}
	a := tinyArch()
	n, err := NewNet(a, 11)
	if err != nil {
		t.Fatal(err)
	}
	set := blobSet(a, 8, 12)
	cfg := DefaultConfig(2)
	cfg.Epochs, cfg.BatchSize = 1, 4
	if _, err := Fit(n, set, nil, cfg); err != nil {
		t.Fatal(err)
	}
	model, err := n.Encode()
	if err != nil {
		t.Fatal(err)
	}
	s, err := ort.NewDynamicAdvancedSessionWithONNXData(model, []string{a.Input}, []string{a.Logits, a.Features}, nil)
	if err != nil {
		t.Fatalf("ONNX Runtime refuses the exported model: %v", err)
	}
	defer s.Destroy()
	batch := 3
	data := make([]float32, 0, batch*a.Voxels())
	var xs [][]float32
	for i := 0; i < batch; i++ {
		data = append(data, set[i].X...)
		xs = append(xs, set[i].X)
	}
	in, err := ort.NewTensor(ort.NewShape(int64(batch), 1, int64(a.Grid[2]), int64(a.Grid[1]), int64(a.Grid[0])), data)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Destroy()
	outs := []ort.Value{nil, nil}
	if err := s.Run([]ort.Value{in}, outs); err != nil {
		t.Fatal(err)
	}
	defer outs[0].Destroy()
	defer outs[1].Destroy()
	want, err := n.Predict(xs, 2)
	if err != nil {
		t.Fatal(err)
	}
	logits := outs[0].(*ort.Tensor[float32]).GetData()
	feats := outs[1].(*ort.Tensor[float32]).GetData()
	worst := 0.0
	for i := 0; i < batch; i++ {
		for k, v := range want[i].Logits {
			worst = math.Max(worst, math.Abs(v-float64(logits[i*a.Classes+k])))
		}
		f := a.FeatureDim()
		for k, v := range want[i].Features {
			worst = math.Max(worst, math.Abs(v-float64(feats[i*f+k])))
		}
	}
	t.Logf("largest Go/ONNX Runtime difference: %.3g", worst)
	if worst > 1e-4 {
		t.Errorf("Go executor and ONNX Runtime differ by %.3g (> 1e-4)", worst)
	}
}
