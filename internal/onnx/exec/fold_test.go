package exec

import (
	"math/rand/v2"
	"testing"

	"brightfold/internal/onnx"
)

// TestFoldBatchNorm: the folded model has no BatchNormalization left after
// a Conv, computes the same outputs as the original (Go executor), and
// ONNX Runtime accepts it and agrees.
func TestFoldBatchNorm(t *testing.T) {
	r := rand.New(rand.NewPCG(31, 32))
	orig := smallCNN(t, r, 8)
	fixture, fixFeed, _ := loadFixture(t, fixtureDir(t))
	for _, c := range []struct {
		name string
		m    *onnx.Model
		feed map[string]*onnx.Tensor
		want int
	}{
		{"small CNN", orig, map[string]*onnx.Tensor{"input": randTensor(r, 1, 2, 1, 8, 8, 8)}, 1},
		{"PyTorch fixture", fixture, fixFeed, 2},
	} {
		folded, n, err := onnx.FoldBatchNorm(c.m)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if n != c.want {
			t.Errorf("%s: folded %d nodes, want %d", c.name, n, c.want)
		}
		for _, node := range folded.Graph.Nodes {
			if node.OpType == "BatchNormalization" {
				t.Errorf("%s: BatchNormalization left after folding", c.name)
			}
		}
		e0, err := NewExecutor(c.m)
		if err != nil {
			t.Fatal(err)
		}
		e1, err := NewExecutor(folded)
		if err != nil {
			t.Fatal(err)
		}
		t0, err := e0.Forward(c.feed)
		if err != nil {
			t.Fatal(err)
		}
		t1, err := e1.Forward(c.feed)
		if err != nil {
			t.Fatal(err)
		}
		for name, want := range e0.Outputs(t0) {
			if msg := compareTol(t1.Value(name), want, 1e-5); msg != "" {
				t.Errorf("%s: folded output %s: %s", c.name, name, msg)
			}
		}
		if len(c.m.Graph.Nodes) == len(folded.Graph.Nodes) {
			t.Errorf("%s: original model changed or nothing removed", c.name)
		}
		if ortStarted {
			compareWithORT(t, c.name+" folded", folded, c.feed, 1e-4)
		}
	}
}
