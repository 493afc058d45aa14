package exec

import (
	"bytes"
	"errors"
	"math/rand/v2"
	"testing"

	"brightfold/internal/onnx"
)

// randTensor returns a tensor of uniform values in [-scale, scale).
func randTensor(r *rand.Rand, scale float32, shape ...int) *onnx.Tensor {
	t := onnx.New(shape...)
	for i := range t.Data {
		t.Data[i] = (r.Float32()*2 - 1) * scale
	}
	return t
}

// smallCNN builds a 3D CNN of the demo model's kind at a test size.
func smallCNN(t testing.TB, r *rand.Rand, size int) *onnx.Model {
	t.Helper()
	b := NewBuilder("small", 13)
	x := b.Input("input", -1, 1, size, size, size)
	x = b.Conv("conv1", x, randTensor(r, 0.5, 4, 1, 3, 3, 3), randTensor(r, 0.1, 4), ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}})
	x = b.BatchNorm("bn1", x, randTensor(r, 1, 4), randTensor(r, 0.1, 4), randTensor(r, 0.1, 4),
		onnx.FromData([]float32{1.1, 0.9, 1.3, 0.7}, 4), 1e-5)
	x = b.Relu(x)
	x = b.MaxPool(x, []int{2, 2, 2}, []int{2, 2, 2})
	x = b.Conv("conv2", x, randTensor(r, 0.3, 6, 4, 3, 3, 3), randTensor(r, 0.1, 6), ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}})
	x = b.LeakyRelu(x, 0.1)
	x = b.GlobalAveragePool(x)
	x = b.Flatten(x, 1)
	feat := b.Dropout(x)
	b.Output(feat, "features")
	logits := b.Gemm("fc", "features", randTensor(r, 0.5, 2, 6), randTensor(r, 0.1, 2))
	b.Output(logits, "logits")
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func TestBuilderRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	m := smallCNN(t, r, 8)
	enc, err := m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	m2, err := onnx.Decode(enc)
	if err != nil {
		t.Fatal(err)
	}
	enc2, err := m2.Encode()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(enc, enc2) {
		t.Fatalf("encode(decode(encode(m))) differs from encode(m)")
	}
	if got := m2.Graph.Outputs[1].Shape; len(got) != 2 || got[0].Param != Batch || got[1].Value != 2 {
		t.Errorf("logits shape %v", got)
	}
	e, err := NewExecutor(m2)
	if err != nil {
		t.Fatal(err)
	}
	x := randTensor(r, 1, 2, 1, 8, 8, 8)
	tr, err := e.Forward(map[string]*onnx.Tensor{"input": x})
	if err != nil {
		t.Fatal(err)
	}
	logits := tr.Value("logits")
	if !onnx.SameShape(logits.Shape, []int{2, 2}) {
		t.Fatalf("logits shape %v", logits.Shape)
	}
	g, err := e.Backward(tr, map[string]*onnx.Tensor{"logits": onnx.FromData([]float32{1, 0, 0, 1}, 2, 2)})
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range append(m2.Graph.ParamNames(), "input") {
		if g.Of(name) == nil {
			t.Errorf("no gradient for %q", name)
		}
	}
}

func TestUnsupportedOpNamed(t *testing.T) {
	b := NewBuilder("u", 13)
	x := b.Input("x", 1, 4)
	y := b.Node("Erf", []string{x})
	b.Output(y, "y")
	_, err := b.Model()
	var ue *UnsupportedError
	if !errors.As(err, &ue) || ue.Op != "Erf" {
		t.Fatalf("want UnsupportedError for Erf, got %v", err)
	}
}
