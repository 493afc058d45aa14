package overlay

import (
	"fmt"
	"sync"

	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

// linearLayer is a weighted node (Conv, Gemm, MatMul with constant weights)
// as LRP sees it: z = x·W + b. It keeps single-node executors for the
// original weights, their positive part W⁺ and their negative part W⁻ (both
// without the bias), so that the rules can run the layer forward and
// backward (with respect to x only) on modified weights.
type linearLayer struct {
	node           *onnx.Node
	w, b           *onnx.Tensor // b is nil without a bias
	wPos, wNeg     *onnx.Tensor
	full, pos, neg *exec.Executor
	// split holds W⁺ and W⁻ side by side along the input channels (a Conv
	// without groups), so that one backward pass gives W⁺ᵀs and W⁻ᵀs.
	split  *exec.Executor
	wSplit *onnx.Tensor
	// geom is set for a Conv whose input-side products can be scattered
	// from a sparse s (convt.go).
	geom   convGeom
	sparse bool

	mu    sync.Mutex
	cache map[string]*onnx.Tensor // input-independent maps by kind and shape
	// sq and ones run the layer with the squared weights and with
	// weights of 1 (the w² and flat rules), made on first use.
	sq, ones   *exec.Executor
	wSq, wOnes *onnx.Tensor
	opset      int64
}

// blind returns the executor and weight of the w² rule (flat false) or of
// the flat rule, making them on first use.
func (l *linearLayer) blind(flat bool) (*exec.Executor, *onnx.Tensor, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.blindLocked(flat)
}

func (l *linearLayer) blindLocked(flat bool) (*exec.Executor, *onnx.Tensor, error) {
	e, w := &l.sq, &l.wSq
	if flat {
		e, w = &l.ones, &l.wOnes
	}
	if *e != nil {
		return *e, *w, nil
	}
	t := onnx.New(l.w.Shape...)
	for i, v := range l.w.Data {
		t.Data[i] = v * v
		if flat {
			t.Data[i] = 1
		}
	}
	ex, err := exec.NewExecutor(layerModel(l.node, l.opset, t, nil))
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %w", l.node.Describe(), err)
	}
	*e, *w = ex, t
	return ex, t, nil
}

func newLinearLayer(n *onnx.Node, opset int64, w, b *onnx.Tensor) (*linearLayer, error) {
	l := &linearLayer{node: n, w: w, b: b, cache: map[string]*onnx.Tensor{}, opset: opset}
	l.wPos, l.wNeg = onnx.New(w.Shape...), onnx.New(w.Shape...)
	for i, v := range w.Data {
		if v > 0 {
			l.wPos.Data[i] = v
		} else {
			l.wNeg.Data[i] = v
		}
	}
	var err error
	if l.full, err = exec.NewExecutor(layerModel(n, opset, w, b)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	if l.pos, err = exec.NewExecutor(layerModel(n, opset, l.wPos, nil)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	if l.neg, err = exec.NewExecutor(layerModel(n, opset, l.wNeg, nil)); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	l.geom, l.sparse = convGeometry(n, w)
	if g, _ := n.AttrInt("group", 1); n.OpType == "Conv" && g == 1 && len(w.Shape) >= 3 {
		l.wSplit = stackChannels(l.wPos, l.wNeg)
		if l.split, err = exec.NewExecutor(layerModel(n, opset, l.wSplit, nil)); err != nil {
			return nil, fmt.Errorf("%s: %w", n.Describe(), err)
		}
	}
	return l, nil
}

// stackChannels concatenates two convolution weights (M, C, k...) along
// the input channels into (M, 2C, k...).
func stackChannels(a, b *onnx.Tensor) *onnx.Tensor {
	shape := append([]int(nil), a.Shape...)
	shape[1] *= 2
	out := onnx.New(shape...)
	per := a.Len() / a.Shape[0]
	for m := 0; m < a.Shape[0]; m++ {
		copy(out.Data[2*m*per:], a.Data[m*per:(m+1)*per])
		copy(out.Data[(2*m+1)*per:], b.Data[m*per:(m+1)*per])
	}
	return out
}

// vjpPosNeg returns W⁺ᵀs and W⁻ᵀs, in one backward pass when the layer
// allows it.
func (l *linearLayer) vjpPosNeg(x, z, s *onnx.Tensor) (*onnx.Tensor, *onnx.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		c := l.geom.transpose(s, x, []*onnx.Tensor{l.wPos, l.wNeg})
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
	c, err := vjp(l.split, l.wSplit, nil, onnx.New(shape...), z, s)
	if err != nil {
		return nil, nil, err
	}
	cp, cn := onnx.New(x.Shape...), onnx.New(x.Shape...)
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
func layerModel(n *onnx.Node, opset int64, w, b *onnx.Tensor) *onnx.Model {
	inputs := []string{"x", "w"}
	inits := []*onnx.Initializer{{Name: "w", DType: onnx.Float, Tensor: w}}
	if b != nil {
		inputs = append(inputs, "b")
		inits = append(inits, &onnx.Initializer{Name: "b", DType: onnx.Float, Tensor: b})
	}
	node := &onnx.Node{Name: n.Name, OpType: n.OpType, Inputs: inputs, Outputs: []string{"z"}, Attrs: n.Attrs}
	g := &onnx.Graph{
		Name: "lrp-layer", Nodes: []*onnx.Node{node}, Initializers: inits,
		Inputs:  []*onnx.ValueInfo{{Name: "x", ElemType: onnx.Float}},
		Outputs: []*onnx.ValueInfo{{Name: "z", ElemType: onnx.Float}},
	}
	return &onnx.Model{IRVersion: 8, OpsetImports: []onnx.OpsetID{{Version: opset}}, Graph: g}
}

// forward runs one of the layer's executors on x.
func forward(e *exec.Executor, x *onnx.Tensor) (*onnx.Tensor, error) {
	tr, err := e.Forward(map[string]*onnx.Tensor{"x": x})
	if err != nil {
		return nil, err
	}
	return tr.Value("z"), nil
}

// vjp returns sᵀ·∂z/∂x of one of the layer's executors (w, b its weights),
// at input x with output shape like z. For a linear layer it does not
// depend on x's values.
func vjp(e *exec.Executor, w, b, x, z, s *onnx.Tensor) (*onnx.Tensor, error) {
	vals := map[string]*onnx.Tensor{"x": x, "w": w, "z": z}
	if b != nil {
		vals["b"] = b
	}
	g, err := e.BackwardWith(&exec.Trace{Values: vals}, map[string]*onnx.Tensor{"z": s}, exec.BackwardOptions{NoParams: true})
	if err != nil {
		return nil, err
	}
	if c := g.Of("x"); c != nil {
		return c, nil
	}
	return onnx.New(x.Shape...), nil
}

func (l *linearLayer) vjpFull(x, z, s *onnx.Tensor) (*onnx.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*onnx.Tensor{l.w})[0], nil
	}
	return vjp(l.full, l.w, l.b, x, z, s)
}

func (l *linearLayer) vjpPos(x, z, s *onnx.Tensor) (*onnx.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*onnx.Tensor{l.wPos})[0], nil
	}
	return vjp(l.pos, l.wPos, nil, x, z, s)
}

func (l *linearLayer) vjpNeg(x, z, s *onnx.Tensor) (*onnx.Tensor, error) {
	if l.sparse && sparseEnough(s) {
		return l.geom.transpose(s, x, []*onnx.Tensor{l.wNeg})[0], nil
	}
	return vjp(l.neg, l.wNeg, nil, x, z, s)
}

// cached returns the layer's output on a constant input (0 through the full
// executor: the bias as broadcast into the output; 1 through W⁺ or W⁻: the
// z^B bound maps), computing it once per input shape.
func (l *linearLayer) cached(kind string, shape []int) (*onnx.Tensor, error) {
	key := fmt.Sprint(kind, shape)
	l.mu.Lock()
	defer l.mu.Unlock()
	if t := l.cache[key]; t != nil {
		return t, nil
	}
	in := onnx.New(shape...)
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
	case "ones²", "ones·1":
		for i := range in.Data {
			in.Data[i] = 1
		}
		var err error
		if e, _, err = l.blindLocked(kind == "ones·1"); err != nil {
			return nil, err
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
