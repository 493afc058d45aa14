package graph

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

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
		_, _, _ = DecodeTensor(b)
		m, err := Decode(b)
		if err != nil {
			return
		}
		enc, err := m.Encode()
		if err != nil {
			return // e.g. a tensor attribute whose values do not match its shape
		}
		if _, err := Decode(enc); err != nil {
			t.Fatalf("re-decode of an encoded model failed: %v", err)
		}
		_, _ = NewExecutor(m)
		_ = Unsupported(m)
	})
}
