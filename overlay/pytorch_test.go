package overlay

import (
	"encoding/binary"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/refcheck"
)

// fixtureModelFolder is the PyTorch-exported fixture of testdata/pytorch as a
// model folder (a card written here), and its input tensor.
func fixtureModelFolder(t *testing.T) (*inference.ModelFolder, *preprocess.Tensor) {
	t.Helper()
	dir := filepath.Join(refcheck.RepoRoot(), "testdata", "pytorch")
	model, err := os.ReadFile(filepath.Join(dir, "small3d.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(filepath.Join(dir, "input.f32"))
	if err != nil {
		t.Fatal(err)
	}
	const g = 16
	if len(raw) != 4*g*g*g {
		t.Fatalf("input.f32 has %d bytes", len(raw))
	}
	card := testCard(model, g)
	card.Input.Name = "input"
	b, err := inference.NewModelFolder(card, model)
	if err != nil {
		t.Fatal(err)
	}
	in := &preprocess.Tensor{Layout: preprocess.LayoutNCDHW, Grid: [3]int{g, g, g}, Shape: []int64{1, 1, g, g, g}, Data: make([]float32, g*g*g)}
	for i := range in.Data {
		in.Data[i] = math.Float32frombits(binary.LittleEndian.Uint32(raw[4*i:]))
	}
	return b, in
}

// On the PyTorch-exported fixture (Conv3d with bias, BatchNorm3d, ReLU,
// MaxPool3d, adaptive average pooling, Flatten, Dropout, Linear) every
// executor method runs, LRP conserves, and the maps agree with references
// computed in float64 by python3-torch from the papers' definitions
// (testdata/ref_relevance.py): gradient × input through torch.autograd
// (Shrikumar et al. 2016), integrated gradients (Sundararajan et al. 2017,
// eq. 3, midpoint rule, m = 64), LRP-epsilon (Bach et al. 2015, eq. 58) and
// the composite of Montavon et al. 2019 (section 10.1) with the gradient
// trick of their section 10.2: z^B at the input layer with epsilon,
// alpha1-beta0 or LRP-γ (γ = 0.5, biases left out) at conv2, the w² rule
// (the default) and the flat rule at the input layer with alpha1-beta0 at
// conv2, and LRP-epsilon with the biases left out of the denominators.
func TestPyTorchFixtureAgainstTorch(t *testing.T) {
	refcheck.PythonModule(t, "torch")
	b, in := fixtureModelFolder(t)
	ex, err := New(b, nil)
	if err != nil {
		t.Fatal(err)
	}
	const eps, steps = 0.25, 64
	var ref struct {
		Logit, BaselineLogit                    float64
		GradInput, IG, LRPEpsilon, LRPComposite []float32
	}
	var raw map[string]any
	refcheck.RunPython(t, filepath.Join("testdata", "ref_relevance.py"), &raw, "1", strconv.FormatFloat(eps, 'g', -1, 64), "-5", "5", strconv.Itoa(steps))
	ref.Logit, ref.BaselineLogit = raw["logit"].(float64), raw["baseline_logit"].(float64)
	floats := func(k string) []float32 {
		xs := raw[k].([]any)
		out := make([]float32, len(xs))
		for i, x := range xs {
			out[i] = float32(x.(float64))
		}
		return out
	}
	ref.GradInput, ref.IG, ref.LRPEpsilon, ref.LRPComposite = floats("gradinput"), floats("ig"), floats("lrp_epsilon"), floats("lrp_composite")

	for _, c := range []struct {
		name string
		m    Method
		opt  Options
		want []float32
	}{
		{"gradient × input", GradientInput, Options{}, ref.GradInput},
		{"integrated gradients", IntegratedGradients, Options{Steps: steps}, ref.IG},
		{"LRP-epsilon", LRP, Options{Rule: RuleEpsilon, Epsilon: eps}, ref.LRPEpsilon},
		{"LRP composite with epsilon above the first layer", LRP, Options{Epsilon: eps, LowerConvs: -1, Input: InputZB}, ref.LRPComposite},
		{"LRP composite, z^B input layer, alpha1-beta0 above", LRP, Options{Input: InputZB}, floats("lrp_composite_alpha_beta")},
		{"LRP composite (default: w² input layer, alpha1-beta0 above)", LRP, Options{}, floats("lrp_composite_w2")},
		{"LRP composite, flat input layer", LRP, Options{Input: InputFlat}, floats("lrp_composite_flat")},
		{"LRP composite, gamma 0.5 above the input layer, biases left out", LRP, Options{Input: InputZB, LowerConvs: -1, Gamma: 0.5, Bias: BiasIgnore}, floats("lrp_composite_gamma")},
		{"LRP-epsilon, biases left out", LRP, Options{Rule: RuleEpsilon, Epsilon: eps, Bias: BiasIgnore}, floats("lrp_epsilon_no_bias")},
	} {
		m := compute(t, ex, c.m, in, c.opt)
		d := relDiff(m.Values, c.want)
		t.Logf("%s: max difference from torch %.2g of the largest value; checks %v", c.name, d, m.Checks)
		if d > 2e-3 {
			t.Errorf("%s: differs from the torch reference by %.3g of the largest value", c.name, d)
		}
		if math.Abs(m.Target-ref.Logit) > 1e-5 {
			t.Errorf("%s: target logit %.7g, torch %.7g", c.name, m.Target, ref.Logit)
		}
		if ce, ok := m.Checks["consistency_error"]; ok && ce > 1e-4 {
			t.Errorf("%s: LRP ledger consistency error %.3g", c.name, ce)
		}
	}
}
