package exec

import (
	"errors"
	"fmt"
	"runtime"
	"sort"

	"brightfold/internal/onnx"
)

// UnsupportedError reports an operator (or an attribute value of one) that
// the executor cannot run. Callers can test for it with errors.As to switch
// features off and show Reason.
type UnsupportedError struct {
	Op     string // operator type, e.g. "Resize"
	Node   string // node name, or "-> first output" when unnamed
	Reason string // what exactly is unsupported
}

func (e *UnsupportedError) Error() string {
	if e.Op == inputKind {
		return fmt.Sprintf("unsupported: graph input %q: %s", e.Node, e.Reason)
	}
	return fmt.Sprintf("unsupported: %s node %q: %s", e.Op, e.Node, e.Reason)
}

// inputKind is the UnsupportedError.Op of a graph input the executor
// cannot take.
const inputKind = "graph input"

// kernel is one compiled node: a forward function and, for differentiable
// ops, a vector-Jacobian product.
type kernel interface {
	// forward computes the node's outputs from its inputs (nil for an
	// omitted optional input).
	forward(in []*onnx.Tensor) ([]*onnx.Tensor, error)
	// backward returns the gradient for each input given the gradient of
	// each output (never nil for a float output; zeros when unseeded).
	// need[i] false allows the kernel to skip input i. Entries may be nil
	// for inputs that carry no gradient or were not needed.
	backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error)
}

// buildCtx is what an op constructor sees.
type buildCtx struct {
	node    *onnx.Node
	opset   int64
	workers int
	attrs   attrReader
	consts  map[string]*onnx.Tensor // initializers and Constant outputs known at build time
}

// constInput returns input i's value when it is known when the executor is
// built (an initializer or a Constant's output), else nil.
func (c *buildCtx) constInput(i int) *onnx.Tensor {
	return c.consts[c.node.Input(i)]
}

func (c *buildCtx) unsupported(format string, args ...any) error {
	name := c.node.Name
	if name == "" && len(c.node.Outputs) > 0 {
		name = "-> " + c.node.Outputs[0]
	}
	return &UnsupportedError{Op: c.node.OpType, Node: name, Reason: fmt.Sprintf(format, args...)}
}

// opBuilders maps an operator type to its constructor. It is filled by the
// ops_*.go files' init functions and read-only afterwards.
var opBuilders = map[string]func(c *buildCtx) (kernel, error){}

// SupportedOps lists the operator types the executor runs (default ONNX
// domain), sorted.
func SupportedOps() []string {
	var s []string
	for k := range opBuilders {
		s = append(s, k)
	}
	sort.Strings(s)
	return s
}

// Executor runs a model's graph in Go, forward and backward. It reads the
// model's initializer tensors at every Forward, so updating their Data in
// place (as an optimiser does) takes effect on the next pass. An Executor
// holds no per-run state: Forward and Backward may run concurrently as long
// as nobody mutates the model meanwhile.
type Executor struct {
	model   *onnx.Model
	graph   *onnx.Graph
	opset   int64
	order   []*onnx.Node // execution order (topological)
	kernels []kernel     // per entry of order
	inputs  []*onnx.ValueInfo
	workers int
	isInit  map[string]bool // initializer names
	isInput map[string]bool // graph input names
}

// NewExecutor compiles m for execution with as many goroutines as
// GOMAXPROCS. It rejects unknown operators, unsupported attribute values,
// other operator domains, graphs whose values nothing produces, and cycles,
// with an error naming the node (an *UnsupportedError for the first two).
func NewExecutor(m *onnx.Model) (*Executor, error) {
	return NewExecutorWorkers(m, runtime.GOMAXPROCS(0))
}

// NewExecutorWorkers is NewExecutor with an explicit number of goroutines
// for the heavy kernels (convolution, matrix products); at least 1.
func NewExecutorWorkers(m *onnx.Model, workers int) (*Executor, error) {
	if m == nil || m.Graph == nil {
		return nil, errors.New("executor: model has no graph")
	}
	if workers < 1 {
		workers = 1
	}
	e := &Executor{model: m, graph: m.Graph, opset: m.Opset(""), workers: workers, inputs: m.Graph.RealInputs()}
	if e.opset == 0 {
		return nil, errors.New("executor: model imports no default-domain (ai.onnx) operator set")
	}
	order, err := topoOrder(m.Graph)
	if err != nil {
		return nil, fmt.Errorf("executor: %w", err)
	}
	e.order = order
	if err := checkInputTypes(e.inputs); err != nil {
		return nil, fmt.Errorf("executor: %w", err)
	}
	e.isInit, e.isInput = map[string]bool{}, map[string]bool{}
	for _, in := range m.Graph.Initializers {
		e.isInit[in.Name] = true
	}
	for _, in := range m.Graph.Inputs {
		e.isInput[in.Name] = true
	}
	consts := map[string]*onnx.Tensor{}
	for _, in := range m.Graph.Initializers {
		if in.Tensor != nil {
			consts[in.Name] = in.Tensor
		}
	}
	for _, n := range order {
		k, err := e.build(n, consts)
		if err != nil {
			return nil, fmt.Errorf("executor: %w", err)
		}
		e.kernels = append(e.kernels, k)
	}
	return e, nil
}

func (e *Executor) build(n *onnx.Node, consts map[string]*onnx.Tensor) (kernel, error) {
	c := &buildCtx{node: n, opset: e.opset, workers: e.workers, attrs: attrReader{n: n}, consts: consts}
	if n.Domain != "" && n.Domain != "ai.onnx" {
		return nil, c.unsupported("operator domain %q (only the default ONNX domain is supported)", n.Domain)
	}
	b, ok := opBuilders[n.OpType]
	if !ok {
		return nil, c.unsupported("operator %q is not implemented by the Go executor", n.OpType)
	}
	k, err := b(c)
	if err != nil {
		return nil, err
	}
	if c.attrs.err != nil {
		return nil, c.attrs.err
	}
	if n.OpType == "Constant" && len(n.Outputs) == 1 {
		if out, err := k.forward(nil); err == nil {
			consts[n.Outputs[0]] = out[0]
		}
	}
	return k, nil
}

// Unsupported lists, for each node the executor cannot run, the reason; an
// empty list means NewExecutor would accept the operators (it may still
// reject the graph's structure).
func Unsupported(m *onnx.Model) []error {
	if m == nil || m.Graph == nil {
		return []error{errors.New("model has no graph")}
	}
	e := &Executor{opset: m.Opset(""), workers: 1}
	consts := map[string]*onnx.Tensor{}
	for _, in := range m.Graph.Initializers {
		if in.Tensor != nil {
			consts[in.Name] = in.Tensor
		}
	}
	var errs []error
	for _, n := range m.Graph.Nodes {
		if _, err := e.build(n, consts); err != nil {
			errs = append(errs, err)
		}
	}
	return errs
}

// checkInputTypes refuses graph inputs of types the executor cannot hold.
func checkInputTypes(inputs []*onnx.ValueInfo) error {
	for _, vi := range inputs {
		if !vi.IsTensor() {
			return &UnsupportedError{Op: inputKind, Node: vi.Name, Reason: "not a tensor type (sequence, map or optional)"}
		}
		if vi.ElemType != onnx.Float && vi.ElemType != onnx.Undefined && !vi.ElemType.IsInt() {
			return &UnsupportedError{Op: inputKind, Node: vi.Name, Reason: "element type " + vi.ElemType.String()}
		}
	}
	return nil
}

// topoOrder sorts the nodes so that every value is produced before it is
// read, and checks that every read value has a source.
func topoOrder(g *onnx.Graph) ([]*onnx.Node, error) {
	avail := map[string]bool{"": true}
	for _, in := range g.Initializers {
		avail[in.Name] = true
	}
	for _, in := range g.Inputs {
		avail[in.Name] = true
	}
	producer := map[string]*onnx.Node{}
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			if o == "" {
				continue
			}
			if producer[o] != nil {
				return nil, fmt.Errorf("value %q is produced twice (%s and %s)", o, producer[o].Describe(), n.Describe())
			}
			producer[o] = n
		}
	}
	var order []*onnx.Node
	done := map[*onnx.Node]bool{}
	// The nodes are normally sorted already; repeated sweeps handle the rest.
	for len(order) < len(g.Nodes) {
		progress := false
		for _, n := range g.Nodes {
			if done[n] || !inputsReady(n, avail) {
				continue
			}
			done[n], progress = true, true
			order = append(order, n)
			for _, o := range n.Outputs {
				avail[o] = true
			}
		}
		if !progress {
			return nil, missingInput(g, done, avail, producer)
		}
	}
	return order, nil
}

func inputsReady(n *onnx.Node, avail map[string]bool) bool {
	for _, in := range n.Inputs {
		if !avail[in] {
			return false
		}
	}
	return true
}

func missingInput(g *onnx.Graph, done map[*onnx.Node]bool, avail map[string]bool, producer map[string]*onnx.Node) error {
	for _, n := range g.Nodes {
		if done[n] {
			continue
		}
		for _, in := range n.Inputs {
			if !avail[in] && producer[in] == nil {
				return fmt.Errorf("%s reads %q, which no node, input or initializer provides", n.Describe(), in)
			}
		}
	}
	return errors.New("the graph has a cycle")
}

// Model returns the model the executor runs.
func (e *Executor) Model() *onnx.Model { return e.model }

// Opset is the default-domain operator set version the model imports.
func (e *Executor) Opset() int64 { return e.opset }

// Nodes returns the nodes in execution order. Relevance rules walk this
// list backwards, reading each node's values from a Trace.
func (e *Executor) Nodes() []*onnx.Node { return e.order }

// Inputs returns the graph inputs a caller must feed (those without an
// initializer).
func (e *Executor) Inputs() []*onnx.ValueInfo { return e.inputs }

// Trace holds every value of one forward pass by name: the fed inputs, the
// initializers, and each node's outputs.
type Trace struct {
	Values map[string]*onnx.Tensor
}

// Value returns the value called name, or nil.
func (t *Trace) Value(name string) *onnx.Tensor { return t.Values[name] }

// NodeInputs returns the values of n's inputs (nil for omitted ones).
func (t *Trace) NodeInputs(n *onnx.Node) []*onnx.Tensor { return t.collect(n.Inputs) }

// NodeOutputs returns the values of n's outputs.
func (t *Trace) NodeOutputs(n *onnx.Node) []*onnx.Tensor { return t.collect(n.Outputs) }

func (t *Trace) collect(names []string) []*onnx.Tensor {
	out := make([]*onnx.Tensor, len(names))
	for i, s := range names {
		if s != "" {
			out[i] = t.Values[s]
		}
	}
	return out
}

// Forward runs the graph on inputs (by graph input name) and keeps every
// intermediate value. Inputs are checked against the graph's declared
// element types and fixed dimensions; they are not modified.
func (e *Executor) Forward(inputs map[string]*onnx.Tensor) (*Trace, error) {
	vals := make(map[string]*onnx.Tensor, len(e.order)+len(inputs))
	for _, in := range e.graph.Initializers {
		if in.Tensor != nil {
			vals[in.Name] = in.Tensor
		}
	}
	for _, vi := range e.inputs {
		t, ok := inputs[vi.Name]
		if !ok || t == nil {
			return nil, fmt.Errorf("forward: input %q not given", vi.Name)
		}
		if err := checkInput(vi, t); err != nil {
			return nil, fmt.Errorf("forward: %w", err)
		}
		vals[vi.Name] = t
	}
	for name, t := range inputs {
		if !e.isInput[name] {
			return nil, fmt.Errorf("forward: %q is not an input of the graph", name)
		}
		if e.isInit[name] && t != nil {
			// A graph input with an initializer is a default the caller may override.
			if err := t.Check(); err != nil {
				return nil, fmt.Errorf("forward: input %q: %w", name, err)
			}
			vals[name] = t
		}
	}
	tr := &Trace{Values: vals}
	budget := newPassBudget("the values of one forward pass")
	for i, n := range e.order {
		if err := e.runNode(tr, n, e.kernels[i], budget); err != nil {
			return nil, err
		}
	}
	return tr, nil
}

func (e *Executor) runNode(tr *Trace, n *onnx.Node, k kernel, budget *passBudget) error {
	outs, err := k.forward(tr.NodeInputs(n))
	var ue *UnsupportedError
	if errors.As(err, &ue) {
		return fmt.Errorf("forward: %w", err)
	}
	if err != nil {
		return fmt.Errorf("forward: %s: %w", n.Describe(), err)
	}
	if len(outs) < len(n.Outputs) {
		return fmt.Errorf("forward: %s: %d outputs computed, node has %d", n.Describe(), len(outs), len(n.Outputs))
	}
	for j, o := range n.Outputs {
		if o != "" {
			tr.Values[o] = outs[j]
		}
	}
	if err := budget.add(outs...); err != nil {
		return fmt.Errorf("forward: %s: %w", n.Describe(), err)
	}
	return nil
}

// checkInput compares a fed tensor with the graph's declaration.
func checkInput(vi *onnx.ValueInfo, t *onnx.Tensor) error {
	if err := t.Check(); err != nil {
		return fmt.Errorf("input %q: %w", vi.Name, err)
	}
	dt := t.DType
	if dt == onnx.Undefined {
		dt = onnx.Float
	}
	if vi.IsTensor() && vi.ElemType != onnx.Undefined && vi.ElemType != dt {
		return fmt.Errorf("input %q is %v, the model expects %v", vi.Name, dt, vi.ElemType)
	}
	if !vi.HasShape {
		return nil
	}
	if len(vi.Shape) != len(t.Shape) {
		return fmt.Errorf("input %q has shape %v, the model expects rank %d (%v)", vi.Name, t.Shape, len(vi.Shape), vi.Shape)
	}
	for i, d := range vi.Shape {
		if d.Known && d.Param == "" && d.Value != int64(t.Shape[i]) {
			return fmt.Errorf("input %q has shape %v, the model expects %v", vi.Name, t.Shape, vi.Shape)
		}
	}
	return nil
}

// Outputs returns the graph's output values from a trace, by name.
func (e *Executor) Outputs(tr *Trace) map[string]*onnx.Tensor {
	out := map[string]*onnx.Tensor{}
	for _, o := range e.graph.Outputs {
		out[o.Name] = tr.Values[o.Name]
	}
	return out
}

// Grads holds the gradients of one backward pass: for every float value
// that the seeds reach (inputs, initializers, intermediates), the gradient
// of sum_k <seed_k, value_k> with respect to it.
type Grads struct {
	Values map[string]*onnx.Tensor
}

// Of returns the gradient with respect to value name, or nil when no seed
// reaches it (the gradient is zero).
func (g *Grads) Of(name string) *onnx.Tensor { return g.Values[name] }

// BackwardOptions trims a backward pass.
type BackwardOptions struct {
	NoParams bool // skip gradients with respect to initializers (relevance maps)
	NoInputs bool // skip gradients with respect to graph inputs (training)
}

// Backward propagates seeds (gradients with respect to values of the trace,
// usually graph outputs; same shapes) back through the graph. The result
// has gradients with respect to the inputs and every float initializer the
// seeds depend on, and every intermediate on the way.
func (e *Executor) Backward(tr *Trace, seeds map[string]*onnx.Tensor) (*Grads, error) {
	return e.BackwardWith(tr, seeds, BackwardOptions{})
}

// BackwardWith is Backward with options that skip work nobody needs.
func (e *Executor) BackwardWith(tr *Trace, seeds map[string]*onnx.Tensor, opt BackwardOptions) (*Grads, error) {
	acc := newAccumulator()
	for name, s := range seeds {
		v := tr.Values[name]
		if v == nil {
			return nil, fmt.Errorf("backward: seed %q is not a value of the trace", name)
		}
		if !v.IsFloat() || s == nil || !s.IsFloat() || !onnx.SameShape(v.Shape, s.Shape) || len(s.Data) != v.Len() {
			return nil, fmt.Errorf("backward: seed %q is %v, the value is %v", name, s, v)
		}
		acc.add(name, s)
	}
	budget := newPassBudget("the gradients of one backward pass")
	for i := len(e.order) - 1; i >= 0; i-- {
		n := e.order[i]
		if err := e.backNode(tr, n, e.kernels[i], acc, opt); err != nil {
			return nil, err
		}
		for _, in := range n.Inputs {
			if err := budget.add(acc.grads[in]); err != nil {
				return nil, fmt.Errorf("backward: %s: %w", n.Describe(), err)
			}
		}
	}
	return &Grads{Values: acc.grads}, nil
}

func (e *Executor) backNode(tr *Trace, n *onnx.Node, k kernel, acc *accumulator, opt BackwardOptions) error {
	outs := tr.NodeOutputs(n)
	gout := make([]*onnx.Tensor, len(outs))
	any := false
	for j, o := range n.Outputs {
		if g := acc.grads[o]; g != nil && o != "" {
			gout[j], any = g, true
		} else if outs[j] != nil && outs[j].IsFloat() {
			gout[j] = onnx.New(outs[j].Shape...)
		}
	}
	if !any {
		return nil
	}
	ins := tr.NodeInputs(n)
	need := make([]bool, len(ins))
	for j, name := range n.Inputs {
		switch {
		case ins[j] == nil || !ins[j].IsFloat():
		case e.isInit[name]:
			need[j] = !opt.NoParams
		case e.isInput[name]:
			need[j] = !opt.NoInputs
		default:
			need[j] = true
		}
	}
	gin, err := k.backward(ins, outs, gout, need)
	if err != nil {
		return fmt.Errorf("backward: %s: %w", n.Describe(), err)
	}
	for j, g := range gin {
		if g == nil || j >= len(n.Inputs) || !need[j] {
			continue
		}
		if !onnx.SameShape(g.Shape, ins[j].Shape) {
			return fmt.Errorf("backward: %s: gradient for input %d has shape %v, input has %v", n.Describe(), j, g.Shape, ins[j].Shape)
		}
		acc.add(n.Inputs[j], g)
	}
	return nil
}

// accumulator sums gradient contributions, copying a tensor before the
// first in-place addition so that no kernel's output is modified.
type accumulator struct {
	grads map[string]*onnx.Tensor
	owned map[string]bool
}

func newAccumulator() *accumulator {
	return &accumulator{grads: map[string]*onnx.Tensor{}, owned: map[string]bool{}}
}

func (a *accumulator) add(name string, g *onnx.Tensor) {
	cur := a.grads[name]
	if cur == nil {
		a.grads[name] = g
		return
	}
	if !a.owned[name] {
		cur = cur.Clone()
		a.grads[name], a.owned[name] = cur, true
	}
	for i, v := range g.Data {
		cur.Data[i] += v
	}
}

// Apply runs node n's operator on the given input values (as a Trace holds
// them) and returns its outputs. n must be one of e.Nodes(). Relevance
// rules use it to re-run a layer with modified weights.
func (e *Executor) Apply(n *onnx.Node, inputs []*onnx.Tensor) ([]*onnx.Tensor, error) {
	k, err := e.kernelOf(n)
	if err != nil {
		return nil, err
	}
	out, err := k.forward(inputs)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	return out, nil
}

// VJP returns, for each input of node n, the vector-Jacobian product of the
// node at (inputs, outputs) with the output gradients gout (nil entries
// count as zero). outputs must be the node's outputs at inputs (Apply's
// result). Entries are nil for inputs without a gradient (integers,
// indices, shapes).
func (e *Executor) VJP(n *onnx.Node, inputs, outputs, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
	k, err := e.kernelOf(n)
	if err != nil {
		return nil, err
	}
	g := make([]*onnx.Tensor, len(outputs))
	for j := range outputs {
		if j < len(gout) && gout[j] != nil {
			g[j] = gout[j]
		} else if outputs[j] != nil && outputs[j].IsFloat() {
			g[j] = onnx.New(outputs[j].Shape...)
		}
	}
	gin, err := k.backward(inputs, outputs, g, needAll(len(inputs)))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	return gin, nil
}

func (e *Executor) kernelOf(n *onnx.Node) (kernel, error) {
	for i, m := range e.order {
		if m == n {
			return e.kernels[i], nil
		}
	}
	return nil, fmt.Errorf("node %s does not belong to this executor", n.Describe())
}
