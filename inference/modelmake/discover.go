// Package modelmake turns an exported ONNX classifier and a group's own
// labelled cases into a model folder: it finds the input, logits and
// penultimate features in the graph, prepares and runs the cases one batch
// at a time (keeping only features and measurements), fits the card's fit
// check and temperature on the calibration split with inference.FitReference
// (the path the demo recipe uses too), and measures the validation figures
// with their intervals on the validation split. It also recalibrates a model
// folder for a new site. Research use only.
package modelmake

import (
	"fmt"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/onnx"
)

// Graph is what Discover found in an ONNX model: enough for the card's
// input and outputs sections.
type Graph struct {
	Input      string
	Shape      []int64 // five entries in Layout order; -1 for a dynamic batch
	Layout     string
	Logits     string
	Activation string
	NumLogits  int
	Features   string
	FeatureDim int // 0 when the graph does not say
	Notes      []string
}

// Overrides replace what Discover would find; empty fields are found.
type Overrides struct {
	Input, Layout, Logits, Features, Activation string
}

// Discover reads the graph of an ONNX model: the one real input (5-D, one
// channel; layout NCDHW unless overridden, as PyTorch's Conv3d), the logits
// (the graph's output; when it is produced by Softmax or Sigmoid, that
// node's input), the activation (softmax for K ≥ 2 logits, sigmoid for 1)
// and the penultimate features (the input of the last Gemm or MatMul in
// topological order, i.e. after any Flatten). Problems are input errors
// naming source.
func Discover(source string, model []byte, o Overrides) (Graph, error) {
	m, err := onnx.Decode(model)
	if err != nil {
		return Graph{}, inputerr.New(source, "not an ONNX model: %v", err)
	}
	g := m.Graph
	var out Graph
	real := g.RealInputs()
	if len(real) != 1 {
		return Graph{}, inputerr.New(source, "the graph has %d inputs; only one-input models are supported", len(real))
	}
	in := real[0]
	if o.Input != "" && o.Input != in.Name {
		return Graph{}, inputerr.New(source, "--input %q is not the graph's input %q", o.Input, in.Name)
	}
	out.Input = in.Name
	if !in.HasShape || len(in.Shape) != 5 {
		return Graph{}, inputerr.New(source, "the graph input %q is not 5-D [N, 1, D, H, W] (rank %d)", in.Name, len(in.Shape))
	}
	if in.Shape[1].Known && in.Shape[1].Value != 1 {
		return Graph{}, inputerr.New(source, "the graph input %q has %d channels; only one channel is supported", in.Name, in.Shape[1].Value)
	}
	if in.ElemType != onnx.Float {
		return Graph{}, inputerr.New(source, "the graph input %q is %v; only float32 is supported", in.Name, in.ElemType)
	}
	out.Shape = make([]int64, 5)
	for i, d := range in.Shape {
		out.Shape[i] = -1
		if d.Known {
			out.Shape[i] = d.Value
		}
	}
	out.Shape[1] = 1
	out.Layout = preprocess.LayoutNCDHW
	layoutHow := "NCDHW (PyTorch's Conv3d order; --layout to change)"
	if o.Layout != "" {
		out.Layout, layoutHow = o.Layout, o.Layout+" (--layout)"
	}
	batch := "dynamic batch"
	if out.Shape[0] > 0 {
		batch = fmt.Sprintf("fixed batch %d", out.Shape[0])
	}
	out.Notes = append(out.Notes, fmt.Sprintf("input %q %v, %s, layout %s", in.Name, out.Shape, batch, layoutHow))
	if err := findFeatures(source, m, o, &out); err != nil {
		return Graph{}, err
	}
	if err := findLogits(source, m, o, &out); err != nil {
		return Graph{}, err
	}
	// features first in the notes, as the card lists outputs: logits, features
	out.Notes[1], out.Notes[2] = out.Notes[2], out.Notes[1]
	return out, nil
}

func findLogits(source string, m *onnx.Model, o Overrides, out *Graph) error {
	g := m.Graph
	name, how := o.Logits, "--logits"
	if name == "" {
		if len(g.Outputs) == 0 {
			return inputerr.New(source, "the graph has no outputs")
		}
		name, how = pickLogits(g, out.Features)
		if p := g.Producer(name); p != nil && (p.OpType == "Softmax" || p.OpType == "Sigmoid" || p.OpType == "LogSoftmax") && len(p.Inputs) > 0 {
			name, how = p.Inputs[0], fmt.Sprintf("the input of the graph's final %s", p.OpType)
		}
	}
	if g.Producer(name) == nil {
		return inputerr.New(source, "logits %q: no node of the graph produces it", name)
	}
	out.Logits = name
	k := logitCount(g, name)
	out.NumLogits = k
	switch {
	case o.Activation != "":
		out.Activation = o.Activation
	case k == 1:
		out.Activation = inference.ActivationSigmoid
	default:
		out.Activation = inference.ActivationSoftmax
	}
	out.Notes = append(out.Notes, fmt.Sprintf("logits %q (%s), %s over %s", name, how, out.Activation, countText(k)))
	return nil
}

// pickLogits chooses among the graph outputs the first that is not the
// features tensor and is made by a classifier head (Gemm, MatMul, a bias
// Add, or a final Softmax/Sigmoid); else the first output that is not the
// features.
func pickLogits(g *onnx.Graph, features string) (string, string) {
	head := map[string]bool{"Gemm": true, "MatMul": true, "Add": true, "Softmax": true, "Sigmoid": true, "LogSoftmax": true}
	for _, o := range g.Outputs {
		if p := g.Producer(o.Name); o.Name != features && p != nil && head[p.OpType] {
			return o.Name, fmt.Sprintf("the graph output made by %s %q", p.OpType, p.Name)
		}
	}
	for _, o := range g.Outputs {
		if o.Name != features {
			return o.Name, "the graph's first output other than the features"
		}
	}
	return g.Outputs[0].Name, "the graph's only output"
}

func countText(k int) string {
	if k <= 0 {
		return "an unstated number of logits (checked on the first case)"
	}
	return fmt.Sprintf("%d logits", k)
}

// logitCount reads K from the output's shape or from the weight of the Gemm
// or MatMul that makes it; 0 when neither says.
func logitCount(g *onnx.Graph, name string) int {
	for _, v := range append(append([]*onnx.ValueInfo{}, g.Outputs...), g.ValueInfo...) {
		if v.Name == name && v.HasShape && len(v.Shape) == 2 && v.Shape[1].Known {
			return int(v.Shape[1].Value)
		}
	}
	p := g.Producer(name)
	for p != nil && p.OpType == "Add" && len(p.Inputs) == 2 {
		if g.Initializer(p.Inputs[1]) != nil {
			p = g.Producer(p.Inputs[0])
		} else {
			p = g.Producer(p.Inputs[1])
		}
	}
	if p == nil || len(p.Inputs) < 2 {
		return 0
	}
	w := g.Initializer(p.Inputs[1])
	if w == nil || w.Tensor == nil || len(w.Tensor.Shape) != 2 {
		return 0
	}
	switch p.OpType {
	case "Gemm":
		if tb, _ := p.AttrInt("transB", 0); tb == 1 {
			return int(w.Tensor.Shape[0])
		}
		return int(w.Tensor.Shape[1])
	case "MatMul":
		return int(w.Tensor.Shape[1])
	}
	return 0
}

func findFeatures(source string, m *onnx.Model, o Overrides, out *Graph) error {
	g := m.Graph
	if o.Features != "" {
		if g.Producer(o.Features) == nil {
			return inputerr.New(source, "--features %q: no node of the graph produces it", o.Features)
		}
		out.Features = o.Features
		out.Notes = append(out.Notes, fmt.Sprintf("features %q (--features)", o.Features))
		return nil
	}
	var last *onnx.Node
	for _, n := range g.Nodes {
		if n.OpType == "Gemm" || n.OpType == "MatMul" {
			last = n
		}
	}
	if last == nil || len(last.Inputs) == 0 {
		return inputerr.New(source, "no Gemm or MatMul node: cannot find the penultimate features (give --features TENSOR)")
	}
	out.Features = last.Inputs[0]
	if w := g.Initializer(last.Inputs[1]); w != nil && w.Tensor != nil && len(w.Tensor.Shape) == 2 {
		out.FeatureDim = int(w.Tensor.Shape[1])
		if tb, _ := last.AttrInt("transB", 0); last.OpType == "MatMul" || tb == 0 {
			out.FeatureDim = int(w.Tensor.Shape[0])
		}
	}
	from := ""
	if p := g.Producer(out.Features); p != nil {
		from = fmt.Sprintf(", made by %s %q", p.OpType, p.Name)
	}
	out.Notes = append(out.Notes, fmt.Sprintf("features %q: the input of the last %s %q%s; %d values, added as a graph output", out.Features, last.OpType, last.Name, from, out.FeatureDim))
	return nil
}
