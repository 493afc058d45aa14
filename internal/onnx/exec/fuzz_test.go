package exec

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
)

// FuzzDecode feeds arbitrary bytes to Decode and DecodeTensor: they must
// return an error or a model, never panic; a decoded model must re-encode
// and decode again, and NewExecutor must accept or refuse it cleanly.
func FuzzDecode(f *testing.F) {
	m := smallCNN(f, rand.New(rand.NewPCG(5, 6)), 4)
	if b, err := m.Encode(); err == nil {
		f.Add(b)
	}
	for _, p := range []string{
		filepath.Join(refcheck.RepoRoot(), "testdata", "pytorch", "small3d.onnx"),
		filepath.Join(conformanceDir, "test_conv_with_strides_padding", "model.onnx"),
		filepath.Join(conformanceDir, "test_conv_with_strides_padding", "test_data_set_0", "input_0.pb"),
		filepath.Join(conformanceDir, "test_softmax_axis_0_expanded", "model.onnx"),
	} {
		if b, err := os.ReadFile(p); err == nil {
			f.Add(b)
		}
	}
	f.Add([]byte{})
	f.Add([]byte{0x3a, 0x05, 0x0a, 0x03, 0x0a, 0x01, 0x78})
	f.Fuzz(func(t *testing.T, b []byte) {
		_, _, _ = onnx.DecodeTensor(b)
		m, err := onnx.Decode(b)
		if err != nil {
			return
		}
		enc, err := m.Encode()
		if err != nil {
			return // e.g. a tensor attribute whose values do not match its shape
		}
		if _, err := onnx.Decode(enc); err != nil {
			t.Fatalf("re-decode of an encoded model failed: %v", err)
		}
		_, _ = NewExecutor(m)
		_ = Unsupported(m)
	})
}

// FuzzExecute decodes arbitrary bytes and, when the executor accepts the
// model, runs it forward and backward on small inputs (every unknown or
// symbolic dimension 1, at most 4096 elements per input): errors are fine,
// panics are not.
func FuzzExecute(f *testing.F) {
	r := rand.New(rand.NewPCG(7, 8))
	for _, size := range []int{2, 4} {
		if b, err := smallCNN(f, r, size).Encode(); err == nil {
			f.Add(b)
		}
	}
	for _, name := range []string{"test_conv_with_strides_padding", "test_maxpool_2d_pads", "test_gemm_all_attributes",
		"test_softmax_axis_0_expanded", "test_reshape_negative_dim", "test_gather_0", "test_concat_3d_axis_1"} {
		if b, err := os.ReadFile(filepath.Join(conformanceDir, name, "model.onnx")); err == nil {
			f.Add(b)
		}
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := onnx.Decode(b)
		if err != nil {
			return
		}
		e, err := NewExecutorWorkers(m, 2)
		if err != nil {
			return
		}
		feed := map[string]*onnx.Tensor{}
		for _, vi := range e.Inputs() {
			shape := make([]int, len(vi.Shape))
			for i, d := range vi.Shape {
				shape[i] = 1
				if d.Known && d.Param == "" && d.Value >= 0 && d.Value <= 64 {
					shape[i] = int(d.Value)
				}
			}
			if n, err := onnx.CheckedNumel(shape); err != nil || n > 4096 {
				return
			}
			x := onnx.New(shape...)
			if vi.ElemType != onnx.Float && vi.ElemType != onnx.Undefined {
				x = &onnx.Tensor{Shape: shape, Ints: make([]int64, onnx.Numel(shape)), DType: vi.ElemType}
			}
			for i := range x.Data {
				x.Data[i] = float32(i%7) - 3
			}
			feed[vi.Name] = x
		}
		tr, err := e.Forward(feed)
		if err != nil {
			return
		}
		seeds := map[string]*onnx.Tensor{}
		for name, v := range e.Outputs(tr) {
			if v != nil && v.IsFloat() {
				s := onnx.New(v.Shape...)
				for i := range s.Data {
					s.Data[i] = 1
				}
				seeds[name] = s
			}
		}
		_, _ = e.Backward(tr, seeds)
	})
}
