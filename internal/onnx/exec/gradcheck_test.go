package exec

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"brightfold/internal/onnx"
)

// Gradient checks: every op's backward pass against central finite
// differences, (L(x+h) − L(x−h)) / 2h, of the scalar L = Σ r·y with fixed
// random weights r, accumulated in float64. The forward pass is float32, so
// the numerical derivative carries rounding noise of about
// eps32·|L|/h; with h = 1e-2 on O(1) values the check allows
// |analytic − numeric| ≤ gradTol·(1 + |numeric|) with gradTol = 2e-3.
// Inputs are drawn away from the kinks of ReLU and max pooling so that no
// perturbation crosses one.
const (
	gradStep = 1e-2
	gradTol  = 2e-3
)

// gradCase is one op to check: a single-node (or small) graph and its feed.
type gradCase struct {
	name  string
	opset int64
	build func(b *Builder, r *rand.Rand) (feed map[string]*onnx.Tensor)
}

// spaced returns evenly spaced values in [-1, 1] in random order, none
// within 3·gradStep of zero; for up to 150 elements their gaps exceed
// gradStep, so that no perturbation creates a tie in max pooling or crosses
// ReLU's kink.
func spaced(r *rand.Rand, shape ...int) *onnx.Tensor {
	t := onnx.New(shape...)
	n := len(t.Data)
	for i := range t.Data {
		v := -1 + 2*(float64(i)+0.5)/float64(n)
		if math.Abs(v) < 3*gradStep {
			v += 6 * gradStep
		}
		t.Data[i] = float32(v)
	}
	r.Shuffle(n, func(i, j int) { t.Data[i], t.Data[j] = t.Data[j], t.Data[i] })
	return t
}

func gradCases() []gradCase {
	in := func(b *Builder, feed map[string]*onnx.Tensor, name string, t *onnx.Tensor) string {
		feed[name] = t
		return b.Input(name, t.Shape...)
	}
	single := func(name, op string, opset int64, shapes [][]int, attrs ...*onnx.Attribute) gradCase {
		return gradCase{name: name, opset: opset, build: func(b *Builder, r *rand.Rand) map[string]*onnx.Tensor {
			feed := map[string]*onnx.Tensor{}
			var names []string
			for i, s := range shapes {
				names = append(names, in(b, feed, string(rune('a'+i)), spaced(r, s...)))
			}
			b.Output(b.Node(op, names, attrs...), "y")
			return feed
		}}
	}
	withConst := func(name, op string, opset int64, x []int, c *onnx.Tensor, attrs ...*onnx.Attribute) gradCase {
		return gradCase{name: name, opset: opset, build: func(b *Builder, r *rand.Rand) map[string]*onnx.Tensor {
			feed := map[string]*onnx.Tensor{}
			a := in(b, feed, "a", spaced(r, x...))
			b.Output(b.Node(op, []string{a, b.Param("c", c)}, attrs...), "y")
			return feed
		}}
	}
	positive := func(r *rand.Rand, n int) *onnx.Tensor {
		t := onnx.New(n)
		for i := range t.Data {
			t.Data[i] = 0.5 + r.Float32()
		}
		return t
	}
	return []gradCase{
		single("Conv2D", "Conv", 13, [][]int{{2, 3, 6, 5}, {4, 3, 3, 2}, {4}},
			onnx.IntsAttr("pads", 1, 0, 0, 1)),
		single("Conv3D stride pad", "Conv", 13, [][]int{{1, 2, 5, 6, 5}, {3, 2, 3, 3, 3}, {3}},
			onnx.IntsAttr("pads", 1, 1, 0, 1, 0, 1), onnx.IntsAttr("strides", 2, 1, 2)),
		single("Conv3D dilation group", "Conv", 13, [][]int{{1, 4, 6, 6, 6}, {4, 2, 2, 2, 2}},
			onnx.IntsAttr("dilations", 2, 1, 2), onnx.IntAttr("group", 2)),
		single("Conv1D same_lower", "Conv", 13, [][]int{{2, 2, 9}, {3, 2, 4}},
			onnx.StringAttr("auto_pad", "SAME_LOWER"), onnx.IntsAttr("strides", 2)),
		single("Conv pointwise", "Conv", 13, [][]int{{2, 3, 4, 4}, {5, 3, 1, 1}, {5}}),
		{name: "BatchNormalization", opset: 13, build: func(b *Builder, r *rand.Rand) map[string]*onnx.Tensor {
			feed := map[string]*onnx.Tensor{}
			ins := []string{in(b, feed, "x", spaced(r, 2, 3, 4, 2)), in(b, feed, "s", spaced(r, 3)),
				in(b, feed, "b", spaced(r, 3)), in(b, feed, "m", spaced(r, 3)), in(b, feed, "v", positive(r, 3))}
			b.Output(b.Node("BatchNormalization", ins, onnx.FloatAttr("epsilon", 1e-3)), "y")
			return feed
		}},
		single("Relu", "Relu", 13, [][]int{{3, 7}}),
		single("LeakyRelu", "LeakyRelu", 13, [][]int{{3, 7}}, onnx.FloatAttr("alpha", 0.2)),
		single("Sigmoid", "Sigmoid", 13, [][]int{{3, 7}}),
		single("Exp", "Exp", 13, [][]int{{3, 4}}),
		single("MaxPool2D pads", "MaxPool", 13, [][]int{{1, 2, 5, 5}},
			onnx.IntsAttr("kernel_shape", 3, 3), onnx.IntsAttr("strides", 2, 2), onnx.IntsAttr("pads", 1, 1, 1, 1)),
		single("MaxPool3D", "MaxPool", 13, [][]int{{1, 2, 4, 4, 4}},
			onnx.IntsAttr("kernel_shape", 2, 2, 2), onnx.IntsAttr("strides", 2, 2, 2)),
		single("AveragePool include_pad", "AveragePool", 13, [][]int{{1, 2, 5, 5}},
			onnx.IntsAttr("kernel_shape", 3, 3), onnx.IntsAttr("pads", 1, 1, 1, 1), onnx.IntAttr("count_include_pad", 1)),
		single("AveragePool3D exclude_pad ceil", "AveragePool", 13, [][]int{{1, 1, 5, 4, 5}},
			onnx.IntsAttr("kernel_shape", 2, 2, 2), onnx.IntsAttr("strides", 2, 2, 2), onnx.IntsAttr("pads", 1, 0, 1, 0, 1, 0), onnx.IntAttr("ceil_mode", 1)),
		single("GlobalAveragePool", "GlobalAveragePool", 13, [][]int{{2, 3, 3, 2, 2}}),
		single("GlobalMaxPool", "GlobalMaxPool", 13, [][]int{{2, 3, 3, 2}}),
		single("Flatten", "Flatten", 13, [][]int{{2, 3, 2, 2}}, onnx.IntAttr("axis", 2)),
		withConst("Reshape", "Reshape", 13, []int{2, 3, 4}, onnx.FromInts([]int64{0, -1, 2}, 3)),
		single("Gemm transA transB", "Gemm", 13, [][]int{{4, 3}, {5, 4}, {5}},
			onnx.IntAttr("transA", 1), onnx.IntAttr("transB", 1), onnx.FloatAttr("alpha", 0.7), onnx.FloatAttr("beta", 1.3)),
		single("Gemm plain", "Gemm", 13, [][]int{{3, 4}, {4, 5}, {3, 5}}),
		single("MatMul batched broadcast", "MatMul", 13, [][]int{{2, 1, 3, 4}, {3, 4, 2}}),
		single("MatMul 1-D", "MatMul", 13, [][]int{{4}, {2, 4, 3}}),
		single("Add broadcast", "Add", 13, [][]int{{2, 3, 4}, {3, 1}}),
		single("Sub broadcast", "Sub", 13, [][]int{{4}, {2, 3, 4}}),
		single("Mul broadcast", "Mul", 13, [][]int{{2, 1, 4}, {3, 1}}),
		{name: "Div broadcast", opset: 13, build: func(b *Builder, r *rand.Rand) map[string]*onnx.Tensor {
			feed := map[string]*onnx.Tensor{}
			den := positive(r, 3)
			ins := []string{in(b, feed, "a", spaced(r, 2, 3)), in(b, feed, "d", den)}
			b.Output(b.Node("Div", ins), "y")
			return feed
		}},
		single("Concat", "Concat", 13, [][]int{{2, 2, 3}, {2, 1, 3}, {2, 3, 3}}, onnx.IntAttr("axis", -2)),
		single("Softmax opset 13", "Softmax", 13, [][]int{{2, 3, 4}}, onnx.IntAttr("axis", 1)),
		single("Softmax opset 11", "Softmax", 11, [][]int{{2, 3, 4}}, onnx.IntAttr("axis", 1)),
		single("Dropout", "Dropout", 13, [][]int{{2, 5}}),
		single("Identity", "Identity", 13, [][]int{{2, 5}}),
		single("Transpose", "Transpose", 13, [][]int{{2, 3, 4}}, onnx.IntsAttr("perm", 1, 2, 0)),
		single("Squeeze opset 11", "Squeeze", 11, [][]int{{2, 1, 3, 1}}, onnx.IntsAttr("axes", 1, -1)),
		withConst("Unsqueeze opset 13", "Unsqueeze", 13, []int{2, 3}, onnx.FromInts([]int64{0, 3}, 2)),
		withConst("Gather", "Gather", 13, []int{4, 3}, onnx.FromInts([]int64{3, 0, -1, 1}, 2, 2), onnx.IntAttr("axis", 0)),
		single("Cast float", "Cast", 13, [][]int{{3, 2}}, onnx.IntAttr("to", int64(onnx.Float))),
		withConst("ReduceSum", "ReduceSum", 13, []int{2, 3, 4}, onnx.FromInts([]int64{1}, 1), onnx.IntAttr("keepdims", 0)),
		single("ReduceMean", "ReduceMean", 13, [][]int{{2, 3, 4}}, onnx.IntsAttr("axes", 0, 2)),
		single("ReduceMax", "ReduceMax", 13, [][]int{{2, 3, 4}}, onnx.IntsAttr("axes", -1)),
	}
}

// TestGradients checks every op's backward pass against finite differences.
func TestGradients(t *testing.T) {
	worst := 0.0
	covered := map[string]bool{}
	for _, gc := range gradCases() {
		r := rand.New(rand.NewPCG(7, uint64(len(gc.name))))
		b := NewBuilder("grad", gc.opset)
		feed := gc.build(b, r)
		m, err := b.Model()
		if err != nil {
			t.Fatalf("%s: %v", gc.name, err)
		}
		for _, n := range m.Graph.Nodes {
			covered[n.OpType] = true
		}
		e, err := NewExecutor(m)
		if err != nil {
			t.Fatalf("%s: %v", gc.name, err)
		}
		errMax := checkGradients(t, gc.name, e, feed, feed, r, gradStep)
		worst = max(worst, errMax)
		t.Logf("%-32s max |analytic − numeric| / (1 + |numeric|) = %.2e", gc.name, errMax)
	}
	var missing []string
	for _, op := range SupportedOps() {
		if !covered[op] && op != "Constant" && op != "Shape" {
			missing = append(missing, op)
		}
	}
	sort.Strings(missing)
	if len(missing) > 0 {
		t.Errorf("ops without a gradient check: %v", missing)
	}
	t.Logf("gradient check: worst scaled error %.2e (tolerance %g, step %g)", worst, gradTol, gradStep)
}

// checkGradients compares analytic and numeric gradients for every tensor of
// vars (inputs in feed or the model's parameters; at most 64 elements each)
// and returns the worst scaled error.
func checkGradients(t *testing.T, name string, e *Executor, feed, vars map[string]*onnx.Tensor, r *rand.Rand, step float64) float64 {
	t.Helper()
	tr, err := e.Forward(feed)
	if err != nil {
		t.Fatalf("%s: forward: %v", name, err)
	}
	seeds := map[string]*onnx.Tensor{}
	for oname, v := range e.Outputs(tr) {
		seeds[oname] = randTensor(r, 1, v.Shape...)
	}
	loss := func() float64 {
		tr, err := e.Forward(feed)
		if err != nil {
			t.Fatalf("%s: forward: %v", name, err)
		}
		var l float64
		for oname, s := range seeds {
			for i, v := range tr.Value(oname).Data {
				l += float64(s.Data[i]) * float64(v)
			}
		}
		return l
	}
	g, err := e.Backward(tr, seeds)
	if err != nil {
		t.Fatalf("%s: backward: %v", name, err)
	}
	worst := 0.0
	names := make([]string, 0, len(vars))
	for n := range vars {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, fname := range names {
		x := vars[fname]
		an := g.Of(fname)
		if an == nil {
			t.Errorf("%s: no gradient for %q", name, fname)
			continue
		}
		idx := r.Perm(len(x.Data))
		if len(idx) > 64 {
			idx = idx[:64]
		}
		for _, i := range idx {
			orig := x.Data[i]
			xp, xm := orig+float32(step), orig-float32(step)
			x.Data[i] = xp
			lp := loss()
			x.Data[i] = xm
			lm := loss()
			x.Data[i] = orig
			// The float32 step actually taken, not the nominal one.
			num := (lp - lm) / (float64(xp) - float64(xm))
			d := math.Abs(float64(an.Data[i])-num) / (1 + math.Abs(num))
			worst = max(worst, d)
			if d > gradTol {
				t.Errorf("%s: d/d%s[%d]: analytic %.6g, numeric %.6g", name, fname, i, an.Data[i], num)
			}
		}
	}
	return worst
}

// TestGradientsNetwork checks the parameter and input gradients of a whole
// small 3D CNN (conv, batch norm, ReLU, max pooling, leaky ReLU, global
// average pooling, flatten, dropout, Gemm) against finite differences. A
// weight change moves many pre-activations at once, so the step is 1e-3
// here to keep them from crossing ReLU or max-pooling kinks.
func TestGradientsNetwork(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	m := smallCNN(t, r, 6)
	e, err := NewExecutor(m)
	if err != nil {
		t.Fatal(err)
	}
	feed := map[string]*onnx.Tensor{"input": spaced(r, 2, 1, 6, 6, 6)}
	vars := map[string]*onnx.Tensor{"input": feed["input"]}
	for name, p := range m.Graph.Params() {
		vars[name] = p // the model's own tensors: perturbing them changes the pass
	}
	worst := checkGradients(t, "small CNN", e, feed, vars, r, 1e-3)
	t.Logf("small CNN: worst scaled error %.2e (tolerance %g)", worst, gradTol)
}
