package inference

import (
	"errors"
	"math"
	"os"
	"strings"
	"testing"

	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/onnx"
)

// growingModel is the tiny test model with ConstantOfShape(Shape(scan) ×
// [1, 1, k, k, k]) summed into its input: each case of a batch makes
// 4096·k³ float32 values when the model runs, a size no check of the graph
// can see.
func growingModel(t *testing.T, k int64) *ModelFolder {
	t.Helper()
	raw, err := os.ReadFile(tinyModel)
	if err != nil {
		t.Fatal(err)
	}
	m, err := onnx.Decode(raw)
	if err != nil {
		t.Fatal(err)
	}
	g := m.Graph
	for _, n := range g.Nodes {
		for i, in := range n.Inputs {
			if in == "scan" {
				n.Inputs[i] = "scan_plus"
			}
		}
	}
	node := func(op string, in []string, out string, attrs ...*onnx.Attribute) *onnx.Node {
		return &onnx.Node{Name: out, OpType: op, Inputs: in, Outputs: []string{out}, Attrs: attrs}
	}
	g.Nodes = append([]*onnx.Node{
		node("Shape", []string{"scan"}, "scan_shape"),
		node("Constant", nil, "factor", onnx.TensorAttr("value", onnx.FromInts([]int64{1, 1, k, k, k}, 5))),
		node("Mul", []string{"scan_shape", "factor"}, "big_shape"),
		node("ConstantOfShape", []string{"big_shape"}, "big"),
		node("ReduceSum", []string{"big"}, "grown", onnx.IntAttr("keepdims", 0)),
		node("Add", []string{"scan", "grown"}, "scan_plus"),
	}, g.Nodes...)
	model, err := m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	mf, err := NewModelFolder(tinyCard(model), model)
	if err != nil {
		t.Fatal(err)
	}
	mf.Source = "growing"
	return mf
}

// A batch whose cases together ask for more than ModelMemoryLimit is run
// again one case at a time, with the same outputs as single runs; a case
// that alone asks for more is an input error naming the limit.
func TestRunWithinModelMemory(t *testing.T) {
	initORT(t)
	limit := ModelMemoryLimit()
	const k = 14 // 45 MB per case
	perCase := int64(4096 * k * k * k * 4)
	if 8*perCase <= limit || 2*perCase > limit {
		t.Skipf("%s=%d MiB: a batch of 8 cases of %d MiB would not pass it", ModelMemoryEnv, limit>>20, perCase>>20)
	}
	s, err := NewSession(growingModel(t, k), SessionOptions{MaxBatch: 8})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ts := waveTensors(8, math.Cos, 53)
	all, err := s.Run(ts)
	if err != nil {
		t.Fatalf("batch of 8 over the limit, then one by one: %v", err)
	}
	for i := range ts {
		one, err := s.Run(ts[i : i+1])
		if err != nil {
			t.Fatal(err)
		}
		for c := range one[0].Logits {
			if one[0].Logits[c] != all[i].Logits[c] {
				t.Errorf("case %d logit %d: %v in the retried batch, %v alone", i, c, all[i].Logits[c], one[0].Logits[c])
			}
		}
	}

	big, err := NewSession(growingModel(t, 50), SessionOptions{}) // 2 GB per case
	if err != nil {
		t.Fatal(err)
	}
	defer big.Close()
	_, err = big.Run(ts[:2])
	var ie *inputerr.Error
	if !errors.As(err, &ie) || !strings.Contains(err.Error(), ModelMemoryEnv) {
		t.Fatalf("a case over the limit gave %v, want an input error naming %s", err, ModelMemoryEnv)
	}
}

// waveTensors are n 16³ input tensors of wave(index / period) values.
func waveTensors(n int, wave func(float64) float64, period float64) []*preprocess.Tensor {
	ts := make([]*preprocess.Tensor, n)
	for i := range ts {
		d := make([]float32, 4096)
		for j := range d {
			d[j] = float32(wave(float64(i*4096+j) / period))
		}
		ts[i] = &preprocess.Tensor{Data: d, Shape: []int64{1, 1, 16, 16, 16}, Layout: preprocess.LayoutNCDHW, Grid: [3]int{16, 16, 16}}
	}
	return ts
}

// The memory watch stops a run at the model memory limit plus 700 MiB in a
// small process (the command line: 956 MiB on the defaults, under 1 GiB),
// and, in a process that already holds much (the window with several cases
// loaded), only when the run itself adds more than the limit plus 256 MiB.
func TestProcessCeiling(t *testing.T) {
	const mib = 1 << 20
	if got := processCeiling(256*mib, 150*mib); got != 956*mib {
		t.Errorf("command line: ceiling %d MiB, want 956", got/mib)
	}
	if got := processCeiling(256*mib, 1000*mib); got != 1512*mib {
		t.Errorf("window holding 1000 MiB: ceiling %d MiB, want 1512", got/mib)
	}
}
