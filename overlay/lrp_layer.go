package overlay

import (
	"fmt"
	"sync"

	"brightfold/graph"
)

// linearLayer is a weighted node (Conv, Gemm, MatMul with constant weights)
// as LRP sees it: z = x·W + b. It keeps single-node executors for the
// original weights, their positive part W⁺ and their negative part W⁻ (both
// without the bias), so that the rules can run the layer forward and
// backward (with respect to x only) on modified weights.
type linearLayer struct {
	node           *graph.Node
	w, b           *graph.Tensor // b is nil without a bias
	wPos, wNeg     *graph.Tensor
	full, pos, neg *graph.Executor
	// split holds W⁺ and W⁻ side by side along the input channels (a Conv
	// without groups), so that one backward pass gives W⁺ᵀs and W⁻ᵀs.
	split  *graph.Executor
	wSplit *graph.Tensor
	// geom is set for a Conv whose input-side products can be scattered
	// from a sparse s (convt.go).
	geom   convGeom
	sparse bool

	mu    sync.Mutex
	cache map[string]*graph.Tensor // input-independent maps by kind and shape
}

func newLinearLayer(n *graph.Node, opset int64, w, b *graph.Tensor) (*linearLayer, error) {
	l := &linearLayer{node: n, w: w, b: b, cache: map[string]*graph.Tensor{}}
	l.wPos, l.wNeg = graph.New(w.Shape...), graph.New(w.Shape...)
	for i, v := range w.Data {
		if v > 0 {
			l.wPos.Data[i] = v
		} else {
			l.wNeg.Data[i] = v
		}
	}
	var err error
	if l.full, err = graph.NewExecutor(layerModel(n, opset, w, b)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	if l.pos, err = graph.NewExecutor(layerModel(n, opset, l.wPos, nil)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	if l.neg, err = graph.NewExecutor(layerModel(n, opset, l.wNeg, nil)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	l.geom, l.sparse = convGeometry(n, w)
	if g, _ := n.AttrInt("group", 1); n.OpType == "Conv" && g == 1 && len(w.Shape) >= 3 {
		l.wSplit = stackChannels(l.wPos, l.wNeg)
		if l.split, err = graph.NewExecutor(layerModel(n, opset, l.wSplit, nil)); err != nil {
			return nil, fmt.Errorf("%s: %w", n.Describe(), err)
		}
	}
	return l, nil
}

// stackChannels concatenates two convolution weights (M, C, k...) along
// the input channels into (M, 2C, k...).
func stackChannels(a, b *graph.Tensor) *graph.Tensor {
	shape := append([]int(nil), a.Shape...)
	shape[1] *= 2
	out := graph.New(shape...)
	per := a.Len() / a.Shape[0]
	for m := 0; m < a.Shape[0]; m++ {
		copy(out.Data[2*m*per:], a.Data[m*per:(m+1)*per])
		copy(out.Data[(2*m+1)*per:], b.Data[m*per:(m+1)*per])
	}
	return out
}

// vjpPosNeg returns W⁺ᵀs and W⁻ᵀs, in one backward pass when the layer
// allows it.
func (l *linearLayer) vjpPosNeg(x, z, s *graph.Tensor) (*graph.Tensor, *graph.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		c := l.geom.transpose(s, x, []*graph.Tensor{l.wPos, l.wNeg})
		return c[0], c[1], nil
	}
	if l.split == nil {
		cp, err := l.vjpPos(x, z, s)
		if err != nil {
			return nil, nil, err
		}
		cn, err := l.vjpNeg(x, z, s)
		return cp, cn, err
	}
	shape := append([]int(nil), x.Shape...)
	shape[1] *= 2
	c, err := vjp(l.split, l.wSplit, nil, graph.New(shape...), z, s)
	if err != nil {
		return nil, nil, err
	}
	cp, cn := graph.New(x.Shape...), graph.New(x.Shape...)
	plane := x.Len() / (x.Shape[0] * x.Shape[1])
	for nb := 0; nb < x.Shape[0]; nb++ {
		for ch := 0; ch < x.Shape[1]; ch++ {
			dst := (nb*x.Shape[1] + ch) * plane
			src := (nb*2*x.Shape[1] + ch) * plane
			neg := src + x.Shape[1]*plane
			copy(cp.Data[dst:dst+plane], c.Data[src:src+plane])
			copy(cn.Data[dst:dst+plane], c.Data[neg:neg+plane])
		}
	}
	return cp, cn, nil
}

// layerModel is a one-node model computing n's operator on input "x" with
// weight w and optional bias b, output "z".
func layerModel(n *graph.Node, opset int64, w, b *graph.Tensor) *graph.Model {
	inputs := []string{"x", "w"}
	inits := []*graph.Initializer{{Name: "w", DType: graph.Float, Tensor: w}}
	if b != nil {
		inputs = append(inputs, "b")
		inits = append(inits, &graph.Initializer{Name: "b", DType: graph.Float, Tensor: b})
	}
	node := &graph.Node{Name: n.Name, OpType: n.OpType, Inputs: inputs, Outputs: []string{"z"}, Attrs: n.Attrs}
	g := &graph.Graph{
		Name: "lrp-layer", Nodes: []*graph.Node{node}, Initializers: inits,
		Inputs:  []*graph.ValueInfo{{Name: "x", ElemType: graph.Float}},
		Outputs: []*graph.ValueInfo{{Name: "z", ElemType: graph.Float}},
	}
	return &graph.Model{IRVersion: 8, OpsetImports: []graph.OpsetID{{Version: opset}}, Graph: g}
}

// forward runs one of the layer's executors on x.
func forward(e *graph.Executor, x *graph.Tensor) (*graph.Tensor, error) {
	tr, err := e.Forward(map[string]*graph.Tensor{"x": x})
	if err != nil {
		return nil, err
	}
	return tr.Value("z"), nil
}

// vjp returns sᵀ·∂z/∂x of one of the layer's executors (w, b its weights),
// at input x with output shape like z. For a linear layer it does not
// depend on x's values.
func vjp(e *graph.Executor, w, b, x, z, s *graph.Tensor) (*graph.Tensor, error) {
	vals := map[string]*graph.Tensor{"x": x, "w": w, "z": z}
	if b != nil {
		vals["b"] = b
	}
	g, err := e.BackwardWith(&graph.Trace{Values: vals}, map[string]*graph.Tensor{"z": s}, graph.BackwardOptions{NoParams: true})
	if err != nil {
		return nil, err
	}
	if c := g.Of("x"); c != nil {
		return c, nil
	}
	return graph.New(x.Shape...), nil
}

func (l *linearLayer) vjpFull(x, z, s *graph.Tensor) (*graph.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*graph.Tensor{l.w})[0], nil
	}
	return vjp(l.full, l.w, l.b, x, z, s)
}

func (l *linearLayer) vjpPos(x, z, s *graph.Tensor) (*graph.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*graph.Tensor{l.wPos})[0], nil
	}
	return vjp(l.pos, l.wPos, nil, x, z, s)
}

func (l *linearLayer) vjpNeg(x, z, s *graph.Tensor) (*graph.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*graph.Tensor{l.wNeg})[0], nil
	}
	return vjp(l.neg, l.wNeg, nil, x, z, s)
}

// cached returns the layer's output on a constant input (0 through the full
// executor: the bias as broadcast into the output; 1 through W⁺ or W⁻: the
// z^B bound maps), computing it once per input shape.
func (l *linearLayer) cached(kind string, shape []int) (*graph.Tensor, error) {
	key := fmt.Sprint(kind, shape)
	l.mu.Lock()
	defer l.mu.Unlock()
	if t := l.cache[key]; t != nil {
		return t, nil
	}
	in := graph.New(shape...)
	e := l.full
	switch kind {
	case "bias":
		if l.b == nil {
			return nil, nil
		}
	case "ones+", "ones-":
		for i := range in.Data {
			in.Data[i] = 1
		}
		e = l.pos
		if kind == "ones-" {
			e = l.neg
		}
	default:
		return nil, fmt.Errorf("unknown layer map %q", kind)
	}
	t, err := forward(e, in)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", l.node.Describe(), err)
	}
	l.cache[key] = t
	return t, nil
}
