package exec

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
)

// The PyTorch compatibility fixture (testdata/pytorch, made by
// scripts/make-pytorch-fixture.py with Debian's python3-torch 1.13): a small
// 3D CNN exported by torch.onnx at opset 13 with BatchNormalization,
// Dropout, Flatten and Gemm, an input and PyTorch's outputs.

type fixtureMeta struct {
	Model string `json:"model"`
	Input struct {
		Name  string `json:"name"`
		File  string `json:"file"`
		Shape []int  `json:"shape"`
	} `json:"input"`
	Outputs []struct {
		Name  string `json:"name"`
		File  string `json:"file"`
		Shape []int  `json:"shape"`
	} `json:"outputs"`
}

func fixtureDir(t *testing.T) string {
	return refcheck.Path(t, filepath.Join(refcheck.RepoRoot(), "testdata", "pytorch"))
}

func readF32(t *testing.T, path string, shape []int) *onnx.Tensor {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != 4*onnx.Numel(shape) {
		t.Fatalf("%s: %d bytes for shape %v", path, len(b), shape)
	}
	d := make([]float32, onnx.Numel(shape))
	for i := range d {
		d[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return onnx.FromData(d, shape...)
}

// loadFixture returns the model, its input and PyTorch's outputs by name.
func loadFixture(t *testing.T, dir string) (*onnx.Model, map[string]*onnx.Tensor, map[string]*onnx.Tensor) {
	t.Helper()
	var meta fixtureMeta
	b, err := os.ReadFile(filepath.Join(dir, "fixture.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &meta); err != nil {
		t.Fatal(err)
	}
	m, err := onnx.Load(filepath.Join(dir, meta.Model))
	if err != nil {
		t.Fatal(err)
	}
	feed := map[string]*onnx.Tensor{meta.Input.Name: readF32(t, filepath.Join(dir, meta.Input.File), meta.Input.Shape)}
	want := map[string]*onnx.Tensor{}
	for _, o := range meta.Outputs {
		want[o.Name] = readF32(t, filepath.Join(dir, o.File), o.Shape)
	}
	return m, feed, want
}

// TestPyTorchFixtureGo: the Go executor reproduces PyTorch's outputs to
// 1e-4 (reference: the outputs torch computed when exporting).
func TestPyTorchFixtureGo(t *testing.T) {
	m, feed, want := loadFixture(t, fixtureDir(t))
	ops := map[string]bool{}
	for _, n := range m.Graph.Nodes {
		ops[n.OpType] = true
	}
	for _, op := range []string{"Conv", "BatchNormalization", "Dropout", "Flatten", "Gemm"} {
		if !ops[op] {
			t.Errorf("fixture lacks a %s node", op)
		}
	}
	e, err := NewExecutor(m)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := e.Forward(feed)
	if err != nil {
		t.Fatal(err)
	}
	for name, w := range want {
		if msg := compareTol(tr.Value(name), w, 1e-4); msg != "" {
			t.Errorf("Go executor vs PyTorch, %s: %s", name, msg)
		}
		t.Logf("Go vs PyTorch %s: max abs diff %.2e", name, onnx.MaxAbsDiff(tr.Value(name), w))
	}
	// The backward pass runs through every node of the export.
	g, err := e.Backward(tr, map[string]*onnx.Tensor{"logits": onnx.FromData([]float32{0, 1}, 1, 2)})
	if err != nil {
		t.Fatal(err)
	}
	if gi := g.Of("input"); gi == nil || onnx.MaxAbsDiff(gi, onnx.New(gi.Shape...)) == 0 {
		t.Error("no input gradient through the PyTorch export")
	}
}

// TestPyTorchFixtureORT: ONNX Runtime reproduces PyTorch's outputs to 1e-4
// on the model after Decode → Encode, which also shows that Encode keeps an
// exported model intact.
func TestPyTorchFixtureORT(t *testing.T) {
	needORT(t)
	m, feed, want := loadFixture(t, fixtureDir(t))
	for name, got := range runORT(t, m, feed) {
		if msg := compareTol(got, want[name], 1e-4); msg != "" {
			t.Errorf("ONNX Runtime vs PyTorch, %s: %s", name, msg)
		}
	}
}

// TestPyTorchFixtureReproduces re-runs the fixture script with Debian's
// python3-torch and checks that it gives the committed model bytes and
// outputs, so that the reference values come from torch during the test.
func TestPyTorchFixtureReproduces(t *testing.T) {
	refcheck.PythonModule(t, "torch")
	dir := fixtureDir(t)
	out := t.TempDir()
	var fresh map[string][]float64
	refcheck.RunPython(t, filepath.Join(refcheck.RepoRoot(), "scripts", "make-pytorch-fixture.py"), &fresh, "--out", out)
	a, _ := os.ReadFile(filepath.Join(dir, "small3d.onnx"))
	b, err := os.ReadFile(filepath.Join(out, "small3d.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(a, b) {
		t.Error("re-exported small3d.onnx differs from the committed fixture")
	}
	m, feed, want := loadFixture(t, out)
	e, err := NewExecutor(m)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := e.Forward(feed)
	if err != nil {
		t.Fatal(err)
	}
	for name, vals := range fresh {
		w := want[name]
		for i, v := range vals {
			if math.Abs(float64(w.Data[i])-v) > 1e-7 {
				t.Errorf("%s[%d]: file %g, torch printed %g", name, i, w.Data[i], v)
			}
		}
		if msg := compareTol(tr.Value(name), w, 1e-4); msg != "" {
			t.Errorf("Go executor vs fresh PyTorch run, %s: %s", name, msg)
		}
	}
}
