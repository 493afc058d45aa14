package exec

import (
	"errors"
	"fmt"

	"brightfold/internal/onnx"
)

// Builder assembles a Model in Go, layer by layer, with named initializers
// (parameters). Each layer method returns the name of the value it produces,
// to be passed to the next layer. The first error is kept and reported by
// Model, so calls can be chained without checks.
//
//	b := exec.NewBuilder("demo", 13)
//	x := b.Input("input", -1, 1, 48, 48, 48) // -1: symbolic batch dimension "N"
//	x = b.Conv("conv1", x, w1, b1, exec.ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}})
//	x = b.Relu(x)
//	...
//	b.Output(x, "logits")
//	m, err := b.Model()
type Builder struct {
	m     *onnx.Model
	g     *onnx.Graph
	count map[string]int
	names map[string]bool
	err   error
}

// Batch is the symbolic name Builder gives to an input dimension of -1.
const Batch = "N"

// NewBuilder starts a model whose graph is called name, importing the default
// ONNX operator set at version opset (13 or later is a good choice).
func NewBuilder(name string, opset int64) *Builder {
	g := &onnx.Graph{Name: name}
	m := &onnx.Model{
		IRVersion:       8,
		OpsetImports:    []onnx.OpsetID{{Domain: "", Version: opset}},
		ProducerName:    "brightfold",
		ProducerVersion: "1",
		Graph:           g,
	}
	return &Builder{m: m, g: g, count: map[string]int{}, names: map[string]bool{}}
}

func (b *Builder) fail(format string, args ...any) {
	if b.err == nil {
		b.err = fmt.Errorf("graph builder: "+format, args...)
	}
}

// claim reserves a value name, failing on duplicates.
func (b *Builder) claim(name string) string {
	if name == "" || b.names[name] {
		b.fail("value name %q empty or used twice", name)
	}
	b.names[name] = true
	return name
}

// fresh returns an unused value name derived from prefix.
func (b *Builder) fresh(prefix string) string {
	for {
		b.count[prefix]++
		name := fmt.Sprintf("%s_%d", prefix, b.count[prefix])
		if !b.names[name] {
			b.names[name] = true
			return name
		}
	}
}

// Input declares a float32 graph input; a dimension of -1 becomes the
// symbolic dimension Batch.
func (b *Builder) Input(name string, shape ...int) string {
	vi := &onnx.ValueInfo{Name: b.claim(name), ElemType: onnx.Float, HasShape: true}
	for _, d := range shape {
		if d < 0 {
			vi.Shape = append(vi.Shape, onnx.Dim{Param: Batch})
		} else {
			vi.Shape = append(vi.Shape, onnx.Dim{Value: int64(d), Known: true})
		}
	}
	b.g.Inputs = append(b.g.Inputs, vi)
	return name
}

// Param adds t as an initializer called name (the tensor is used, not
// copied) and returns the name.
func (b *Builder) Param(name string, t *onnx.Tensor) string {
	if t == nil {
		b.fail("parameter %q is nil", name)
		return name
	}
	if err := t.Check(); err != nil {
		b.fail("parameter %q: %v", name, err)
	}
	dt := t.DType
	if dt == onnx.Undefined {
		dt = onnx.Float
	}
	b.g.Initializers = append(b.g.Initializers, &onnx.Initializer{Name: b.claim(name), DType: dt, Tensor: t})
	return name
}

// Node appends a node of operator op reading inputs, with one output, and
// returns the output's name.
func (b *Builder) Node(op string, inputs []string, attrs ...*onnx.Attribute) string {
	return b.NodeN(op, inputs, 1, attrs...)[0]
}

// NodeN appends a node with n outputs and returns their names.
func (b *Builder) NodeN(op string, inputs []string, n int, attrs ...*onnx.Attribute) []string {
	outs := make([]string, n)
	for i := range outs {
		outs[i] = b.fresh(op)
	}
	b.g.Nodes = append(b.g.Nodes, &onnx.Node{
		Name:    fmt.Sprintf("%s_node_%d", op, len(b.g.Nodes)),
		OpType:  op,
		Inputs:  append([]string{}, inputs...),
		Outputs: outs,
		Attrs:   attrs,
	})
	return outs
}

// ConvOpts are a convolution's options. Pads is in ONNX order (all begins,
// then all ends); nil means no padding. Nil Strides and Dilations mean 1;
// Group 0 means 1.
type ConvOpts struct {
	Strides, Pads, Dilations []int
	Group                    int
}

// Conv adds a convolution with weight w (M, C/group, k...) and optional bias
// (M), stored as initializers name+".weight" and name+".bias".
func (b *Builder) Conv(name, x string, w, bias *onnx.Tensor, o ConvOpts) string {
	if w == nil || len(w.Shape) < 3 {
		b.fail("conv %q: weight must have rank 3 to 5", name)
		return x
	}
	in := []string{x, b.Param(name+".weight", w)}
	if bias != nil {
		in = append(in, b.Param(name+".bias", bias))
	}
	attrs := []*onnx.Attribute{onnx.IntsAttr("kernel_shape", toInt64(w.Shape[2:])...)}
	if o.Strides != nil {
		attrs = append(attrs, onnx.IntsAttr("strides", toInt64(o.Strides)...))
	}
	if o.Pads != nil {
		attrs = append(attrs, onnx.IntsAttr("pads", toInt64(o.Pads)...))
	}
	if o.Dilations != nil {
		attrs = append(attrs, onnx.IntsAttr("dilations", toInt64(o.Dilations)...))
	}
	if o.Group > 1 {
		attrs = append(attrs, onnx.IntAttr("group", int64(o.Group)))
	}
	return b.named(name, "Conv", in, attrs...)
}

// named appends a single-output node called name.
func (b *Builder) named(name, op string, inputs []string, attrs ...*onnx.Attribute) string {
	out := b.Node(op, inputs, attrs...)
	b.g.Nodes[len(b.g.Nodes)-1].Name = name
	return out
}

// BatchNorm adds inference-mode batch normalisation with per-channel scale,
// bias, running mean and variance (initializers name+".weight", ".bias",
// ".running_mean", ".running_var").
func (b *Builder) BatchNorm(name, x string, scale, bias, mean, variance *onnx.Tensor, eps float32) string {
	in := []string{x,
		b.Param(name+".weight", scale), b.Param(name+".bias", bias),
		b.Param(name+".running_mean", mean), b.Param(name+".running_var", variance)}
	return b.named(name, "BatchNormalization", in, onnx.FloatAttr("epsilon", eps))
}

// Relu adds max(x, 0).
func (b *Builder) Relu(x string) string { return b.Node("Relu", []string{x}) }

// LeakyRelu adds x for x ≥ 0 and alpha·x otherwise.
func (b *Builder) LeakyRelu(x string, alpha float32) string {
	return b.Node("LeakyRelu", []string{x}, onnx.FloatAttr("alpha", alpha))
}

// Sigmoid adds the logistic function.
func (b *Builder) Sigmoid(x string) string { return b.Node("Sigmoid", []string{x}) }

// MaxPool adds max pooling without padding; nil strides mean 1.
func (b *Builder) MaxPool(x string, kernel, strides []int) string {
	return b.Node("MaxPool", []string{x}, poolAttrs(kernel, strides)...)
}

// AveragePool adds average pooling without padding; nil strides mean 1.
func (b *Builder) AveragePool(x string, kernel, strides []int) string {
	return b.Node("AveragePool", []string{x}, poolAttrs(kernel, strides)...)
}

func poolAttrs(kernel, strides []int) []*onnx.Attribute {
	a := []*onnx.Attribute{onnx.IntsAttr("kernel_shape", toInt64(kernel)...)}
	if strides != nil {
		a = append(a, onnx.IntsAttr("strides", toInt64(strides)...))
	}
	return a
}

// GlobalAveragePool adds the mean over all spatial positions.
func (b *Builder) GlobalAveragePool(x string) string {
	return b.Node("GlobalAveragePool", []string{x})
}

// Flatten adds a reshape to (prod d[:axis], prod d[axis:]).
func (b *Builder) Flatten(x string, axis int) string {
	return b.Node("Flatten", []string{x}, onnx.IntAttr("axis", int64(axis)))
}

// Dropout adds a dropout node, which is the identity at inference (the
// executor and ONNX Runtime both run it so). No ratio input is written, so
// that every float initializer stays a trainable parameter.
func (b *Builder) Dropout(x string) string { return b.Node("Dropout", []string{x}) }

// Gemm adds a fully connected layer y = x·wᵀ + bias with w (out, in) and
// bias (out), as initializers name+".weight" and name+".bias".
func (b *Builder) Gemm(name, x string, w, bias *onnx.Tensor) string {
	in := []string{x, b.Param(name+".weight", w)}
	if bias != nil {
		in = append(in, b.Param(name+".bias", bias))
	}
	return b.named(name, "Gemm", in, onnx.FloatAttr("alpha", 1), onnx.FloatAttr("beta", 1), onnx.IntAttr("transB", 1))
}

// Softmax adds a softmax along axis (opset 13 semantics).
func (b *Builder) Softmax(x string, axis int) string {
	return b.Node("Softmax", []string{x}, onnx.IntAttr("axis", int64(axis)))
}

// Add adds an elementwise (broadcasting) sum.
func (b *Builder) Add(x, y string) string { return b.Node("Add", []string{x, y}) }

// Mul adds an elementwise (broadcasting) product.
func (b *Builder) Mul(x, y string) string { return b.Node("Mul", []string{x, y}) }

// Output marks value v as a graph output called name, renaming v
// throughout the graph. Outputs appear in the order of the calls.
func (b *Builder) Output(v, name string) string {
	if v != name {
		if b.names[name] {
			b.fail("output name %q already used", name)
			return v
		}
		if !b.rename(v, name) {
			b.fail("output %q: no node produces %q", name, v)
			return v
		}
		b.names[name] = true
	}
	b.g.Outputs = append(b.g.Outputs, &onnx.ValueInfo{Name: name, ElemType: onnx.Float})
	return name
}

// rename changes value old to new in node outputs and inputs.
func (b *Builder) rename(old, new string) bool {
	found := false
	for _, n := range b.g.Nodes {
		for i, o := range n.Outputs {
			if o == old {
				n.Outputs[i], found = new, true
			}
		}
		for i, in := range n.Inputs {
			if in == old {
				n.Inputs[i] = new
			}
		}
	}
	for _, o := range b.g.Outputs {
		if o.Name == old {
			o.Name = new
		}
	}
	return found
}

// Model returns the built model after checking that the executor accepts
// it, and fills in the outputs' shapes by running it once on zeros (with 1
// for the symbolic batch dimension, which stays symbolic in the outputs).
func (b *Builder) Model() (*onnx.Model, error) {
	if b.err != nil {
		return nil, b.err
	}
	if len(b.g.Outputs) == 0 {
		return nil, errors.New("graph builder: no outputs")
	}
	e, err := NewExecutorWorkers(b.m, 1)
	if err != nil {
		return nil, fmt.Errorf("graph builder: %w", err)
	}
	feed := map[string]*onnx.Tensor{}
	symbolic := false
	for _, vi := range e.Inputs() {
		shape := make([]int, len(vi.Shape))
		for i, d := range vi.Shape {
			shape[i] = int(d.Value)
			if d.Param != "" {
				shape[i], symbolic = 1, true
			}
		}
		feed[vi.Name] = onnx.New(shape...)
	}
	tr, err := e.Forward(feed)
	if err != nil {
		return nil, fmt.Errorf("graph builder: trial run: %w", err)
	}
	for _, o := range b.g.Outputs {
		v := tr.Value(o.Name)
		o.HasShape, o.Shape = true, nil
		for i, d := range v.Shape {
			if i == 0 && symbolic {
				o.Shape = append(o.Shape, onnx.Dim{Param: Batch})
			} else {
				o.Shape = append(o.Shape, onnx.Dim{Value: int64(d), Known: true})
			}
		}
	}
	return b.m, nil
}

func toInt64(v []int) []int64 {
	out := make([]int64, len(v))
	for i, x := range v {
		out[i] = int64(x)
	}
	return out
}
