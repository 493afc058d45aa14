package onnx

import (
	"fmt"
	"sort"
)

// Model is a decoded ONNX ModelProto. Fields this package does not interpret
// (metadata, training information, functions, ...) are kept as encoded bytes
// and written back by Encode, so Decode followed by Encode keeps the model.
type Model struct {
	IRVersion       int64
	OpsetImports    []OpsetID
	ProducerName    string
	ProducerVersion string
	Domain          string
	ModelVersion    int64
	DocString       string
	Graph           *Graph

	unknown []byte // unrecognised fields, re-emitted verbatim
}

// OpsetID is an OperatorSetIdProto: an operator domain ("" is the default
// ai.onnx domain) and its version.
type OpsetID struct {
	Domain  string
	Version int64
}

// Graph is a GraphProto: nodes in topological order, initializers (named
// constant tensors, the model's parameters), and the graph's inputs, outputs
// and optional value information.
type Graph struct {
	Name         string
	Nodes        []*Node
	Initializers []*Initializer
	Inputs       []*ValueInfo
	Outputs      []*ValueInfo
	ValueInfo    []*ValueInfo
	DocString    string

	unknown []byte
}

// Node is a NodeProto: one operator application. Empty strings in Inputs
// mark omitted optional inputs, as in ONNX.
type Node struct {
	Name      string
	OpType    string
	Domain    string
	Inputs    []string
	Outputs   []string
	Attrs     []*Attribute
	DocString string

	unknown []byte
}

// Initializer is a named constant tensor of the graph. Tensor is nil when the
// element type is one this package does not compute with (DType says which);
// such an initializer is still written back unchanged by Encode.
type Initializer struct {
	Name   string
	DType  DataType
	Tensor *Tensor

	raw []byte // the encoded TensorProto when Tensor is nil
}

// ValueInfo is a ValueInfoProto with a tensor type: the element type and the
// shape, each dimension either a number or a symbolic name. HasShape is
// false when the type carries no shape at all (rank unknown). A non-tensor
// type (sequence, map, ...) is kept opaque and reported by IsTensor false.
type ValueInfo struct {
	Name      string
	ElemType  DataType
	Shape     []Dim
	HasShape  bool
	DocString string

	notTensor bool   // the TypeProto is not a tensor type
	typeRaw   []byte // the encoded TypeProto when notTensor
	hasType   bool
}

// IsTensor reports whether the value's type is a (dense) tensor type.
func (v *ValueInfo) IsTensor() bool { return !v.notTensor }

// Dim is one TensorShapeProto dimension: Value when Param is empty and
// Known is true, a symbolic name in Param, or unknown.
type Dim struct {
	Value int64
	Param string
	Known bool
}

// String formats the dimension ("48", "N" or "?").
func (d Dim) String() string {
	switch {
	case d.Param != "":
		return d.Param
	case d.Known:
		return fmt.Sprint(d.Value)
	}
	return "?"
}

// AttrType is an AttributeProto.AttributeType code.
type AttrType int32

// The ONNX attribute types (onnx.proto, AttributeProto.AttributeType).
const (
	AttrUndefined AttrType = 0
	AttrFloat     AttrType = 1
	AttrInt       AttrType = 2
	AttrString    AttrType = 3
	AttrTensor    AttrType = 4
	AttrGraph     AttrType = 5
	AttrFloats    AttrType = 6
	AttrInts      AttrType = 7
	AttrStrings   AttrType = 8
	AttrTensors   AttrType = 9
	AttrGraphs    AttrType = 10
)

// Attribute is an AttributeProto. Which value field is meaningful depends on
// Type. Graph-valued and sparse attributes are kept opaque (written back by
// Encode, not interpreted).
type Attribute struct {
	Name        string
	Type        AttrType
	F           float32
	I           int64
	S           []byte
	T           *Tensor
	Floats      []float32
	Ints        []int64
	Strings     [][]byte
	RefAttrName string
	DocString   string

	unknown []byte
}

// Opset returns the operator set version the model imports for domain (""
// and "ai.onnx" are the same default domain), or 0 when none is imported.
func (m *Model) Opset(domain string) int64 {
	if domain == "ai.onnx" {
		domain = ""
	}
	var v int64
	for _, o := range m.OpsetImports {
		d := o.Domain
		if d == "ai.onnx" {
			d = ""
		}
		if d == domain && o.Version > v {
			v = o.Version
		}
	}
	return v
}

// Initializer returns the initializer called name, or nil.
func (g *Graph) Initializer(name string) *Initializer {
	for _, in := range g.Initializers {
		if in.Name == name {
			return in
		}
	}
	return nil
}

// Params returns the float initializers by name: the tensors an optimiser
// updates. The tensors are the model's own (not copies).
func (g *Graph) Params() map[string]*Tensor {
	p := map[string]*Tensor{}
	for _, in := range g.Initializers {
		if in.Tensor != nil && in.Tensor.IsFloat() {
			p[in.Name] = in.Tensor
		}
	}
	return p
}

// ParamNames returns the float initializer names in sorted order, for
// deterministic iteration.
func (g *Graph) ParamNames() []string {
	var names []string
	for _, in := range g.Initializers {
		if in.Tensor != nil && in.Tensor.IsFloat() {
			names = append(names, in.Name)
		}
	}
	sort.Strings(names)
	return names
}

// RealInputs returns the graph inputs that are not also initializers: the
// values a caller must feed.
func (g *Graph) RealInputs() []*ValueInfo {
	var out []*ValueInfo
	for _, in := range g.Inputs {
		if g.Initializer(in.Name) == nil {
			out = append(out, in)
		}
	}
	return out
}

// Producer returns the node that outputs value name, or nil (graph input,
// initializer or unknown).
func (g *Graph) Producer(name string) *Node {
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			if o == name {
				return n
			}
		}
	}
	return nil
}

// Consumers returns the nodes that read value name, in graph order.
func (g *Graph) Consumers(name string) []*Node {
	var out []*Node
	for _, n := range g.Nodes {
		for _, in := range n.Inputs {
			if in == name {
				out = append(out, n)
				break
			}
		}
	}
	return out
}

// AddOutput exposes value name (any node output, graph input or
// initializer) as an additional graph output, so that ONNX Runtime returns it
// too. The element type is float32 and the shape is left unspecified unless
// the graph's value information knows it. Adding an existing output is a
// no-op.
func (m *Model) AddOutput(name string) error {
	g := m.Graph
	if g == nil {
		return fmt.Errorf("add output %q: model has no graph", name)
	}
	for _, o := range g.Outputs {
		if o.Name == name {
			return nil
		}
	}
	if g.Producer(name) == nil && g.Initializer(name) == nil && !g.hasInput(name) {
		return fmt.Errorf("add output %q: no node, input or initializer produces it", name)
	}
	vi := &ValueInfo{Name: name, ElemType: Float, hasType: true}
	for _, v := range g.ValueInfo {
		if v.Name == name && v.IsTensor() {
			c := *v
			c.Shape = append([]Dim(nil), v.Shape...)
			vi = &c
			break
		}
	}
	g.Outputs = append(g.Outputs, vi)
	return nil
}

func (g *Graph) hasInput(name string) bool {
	for _, in := range g.Inputs {
		if in.Name == name {
			return true
		}
	}
	return false
}

// Attr returns the attribute called name, or nil.
func (n *Node) Attr(name string) *Attribute {
	for _, a := range n.Attrs {
		if a.Name == name {
			return a
		}
	}
	return nil
}

// Describe names the node for error messages: `Conv node "conv1"`, or its
// first output when it has no name.
func (n *Node) Describe() string {
	name := n.Name
	if name == "" && len(n.Outputs) > 0 {
		name = "-> " + n.Outputs[0]
	}
	return fmt.Sprintf("%s node %q", n.OpType, name)
}

// Input returns input i's name, or "" when absent.
func (n *Node) Input(i int) string {
	if i < len(n.Inputs) {
		return n.Inputs[i]
	}
	return ""
}
