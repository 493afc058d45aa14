package inference

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
)

// maxConstElements bounds the elements a node may make from constant shape
// inputs alone (ConstantOfShape, Expand, Range): 128 Mi, 512 MiB of float32,
// half the memory budget. A model that asks for more is refused when the
// model folder is checked, before ONNX Runtime allocates anything.
const maxConstElements = 128 << 20

// checkConstantSizes refuses nodes of the main graph whose output size is
// fixed by constant inputs and exceeds maxConstElements. (Sizes computed at
// run time, and nodes inside If/Loop bodies, are bounded while the model
// runs by ONNX Runtime's arena and the process ceiling: memory.go.)
func checkConstantSizes(g *onnx.Graph) error {
	for _, n := range g.Nodes {
		var elems float64
		switch n.OpType {
		case "ConstantOfShape":
			elems = shapeElements(g, input(n, 0))
		case "Expand":
			elems = shapeElements(g, input(n, 1))
		case "Range":
			start, limit, delta := scalar(g, input(n, 0)), scalar(g, input(n, 1)), scalar(g, input(n, 2))
			if delta != 0 {
				elems = math.Ceil((limit - start) / delta)
			}
		}
		if elems > maxConstElements || math.IsInf(elems, 0) {
			return fmt.Errorf("%s: node %q (%s) makes %.3g elements, more than the limit of %d (%d MiB of float32): the model would exhaust memory",
				ModelFile, n.Name, n.OpType, elems, maxConstElements, maxConstElements>>18)
		}
	}
	return nil
}

func input(n *onnx.Node, i int) string {
	if i < len(n.Inputs) {
		return n.Inputs[i]
	}
	return ""
}

// constTensor is the constant tensor named name: an initializer or the value
// of a Constant node; nil when it is computed.
func constTensor(g *onnx.Graph, name string) *onnx.Tensor {
	if name == "" {
		return nil
	}
	if in := g.Initializer(name); in != nil {
		return in.Tensor
	}
	if p := g.Producer(name); p != nil && p.OpType == "Constant" {
		for _, a := range p.Attrs {
			if a.Name == "value" {
				return a.T
			}
		}
	}
	return nil
}

// shapeElements is the element count a constant shape tensor asks for, or 0.
func shapeElements(g *onnx.Graph, name string) float64 {
	t := constTensor(g, name)
	if t == nil {
		return 0
	}
	n := 1.0
	for _, d := range t.Ints {
		n *= math.Max(float64(d), 1)
	}
	return n
}

// scalar is the value of a constant scalar, or 0.
func scalar(g *onnx.Graph, name string) float64 {
	t := constTensor(g, name)
	switch {
	case t == nil:
		return 0
	case len(t.Ints) > 0:
		return float64(t.Ints[0])
	case len(t.Data) > 0:
		return float64(t.Data[0])
	}
	return 0
}
