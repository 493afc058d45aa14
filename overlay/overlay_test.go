package overlay

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
	"brightfold/internal/volume"
)

const testGrid = 16

func testExplainer(t *testing.T, spec modelSpec, withSession bool) *Explainer {
	t.Helper()
	b := testModelFolder(t, spec)
	var s *inference.Session
	if withSession {
		s = testSession(t, b)
	}
	ex, err := New(b, s)
	if err != nil {
		t.Fatal(err)
	}
	return ex
}

func compute(t *testing.T, ex *Explainer, m Method, in *preprocess.Tensor, opt Options) *Map {
	t.Helper()
	mp, err := ex.Compute(context.Background(), m, in, opt)
	if err != nil {
		t.Fatalf("%s: %v", m, err)
	}
	if len(mp.Values) != len(in.Data) || mp.Grid != in.Grid {
		t.Fatalf("%s: map of %d values on %v for a %v grid", m, len(mp.Values), mp.Grid, in.Grid)
	}
	return mp
}

// The LRP ledger adds up (Bach et al. 2015, eq. 2: at every layer the
// relevance passed down plus what the biases and the stabilisers take
// equals the relevance received), so the input relevance plus those terms
// equals the target logit, and the three shares add up to 1. The bias term
// is computed from the biases themselves and the stabiliser term from the
// epsilons, not as a remainder. This is a consistency check of the
// implementation (the rules against the forward pass); how much of the
// logit reaches the voxels is input_share, which the rules decide.
func TestLRPLedgerConsistency(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	for seed := uint64(1); seed <= 3; seed++ {
		in := testInput(testGrid, seed)
		for _, rule := range []LRPRule{RuleEpsilon, RuleComposite, RuleAlphaBeta} {
			for _, bias := range []LRPBias{BiasAbsorb, BiasIgnore} {
				for _, class := range []string{"positive", "negative"} {
					m := compute(t, ex, LRP, in, Options{Rule: rule, Class: class, Bias: bias})
					c := m.Checks
					if c["consistency_error"] > 1e-5 {
						t.Errorf("seed %d, %s, bias %s, class %s: consistency error %.3g (sum %.6g, bias %.3g, stabiliser %.3g, logit %.6g)",
							seed, rule, bias, class, c["consistency_error"], c["relevance_sum"], c["bias_share"], c["stabiliser_share"], c["target_logit"])
					}
					if s := c["input_share"] + c["bias_share"] + c["stabiliser_share"]; math.Abs(s-1) > 1e-5 {
						t.Errorf("seed %d, %s, bias %s: shares add up to %.6g", seed, rule, bias, s)
					}
					if math.Abs(c["input_share"]*c["target_logit"]-c["relevance_sum"]) > 1e-9*math.Abs(c["target_logit"]) {
						t.Errorf("input share %.6g is not the relevance sum %.6g over the logit %.6g", c["input_share"], c["relevance_sum"], c["target_logit"])
					}
					if math.Abs(m.Sum()-c["relevance_sum"]) > 1e-4*math.Abs(c["target_logit"]) {
						t.Errorf("map sum %.6g, reported %.6g", m.Sum(), c["relevance_sum"])
					}
					if rule == RuleEpsilon && bias == BiasAbsorb && c["bias_share"] == 0 {
						t.Errorf("seed %d: the epsilon rule booked no bias relevance although conv1, conv3 and fc have biases", seed)
					}
					if (rule == RuleAlphaBeta || bias == BiasIgnore) && c["bias_share"] != 0 {
						t.Errorf("seed %d, %s, bias %s: the rules leave the bias out, yet booked %.3g", seed, rule, bias, c["bias_share"])
					}
				}
			}
		}
	}
}

// LRP-γ sits between LRP-0 and alpha1-beta0 (Montavon et al. 2019,
// section 10.1: γ = 0 gives LRP-0, and as γ grows the positive
// contributions dominate, the z⁺ rule, alpha1-beta0): with the gamma layers'
// biases left out, a vanishing γ gives the composite with a vanishing
// epsilon in the same layers and a large γ the composite with alpha1-beta0
// there; at every γ the ledger adds up (consistency check) and the
// biases keep relevance only when absorbed.
func TestLRPGammaLimits(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 11)
	zero := compute(t, ex, LRP, in, Options{LowerConvs: -1, Epsilon: 1e-9, Bias: BiasIgnore})
	ab := compute(t, ex, LRP, in, Options{Bias: BiasIgnore})
	g0 := compute(t, ex, LRP, in, Options{LowerConvs: -1, Gamma: 1e-9, Bias: BiasIgnore})
	gBig := compute(t, ex, LRP, in, Options{LowerConvs: -1, Gamma: 1e6, Bias: BiasIgnore})
	if d := relDiff(g0.Values, zero.Values); d > 1e-3 {
		t.Errorf("gamma 1e-9 differs from LRP-0 in the same layers by %.3g of the largest value", d)
	}
	if d := relDiff(gBig.Values, ab.Values); d > 1e-3 {
		t.Errorf("gamma 1e6 differs from alpha1-beta0 in the same layers by %.3g of the largest value", d)
	}
	if d := relDiff(gBig.Values, zero.Values); d < 1e-2 {
		t.Errorf("gamma 1e6 and LRP-0 give the same map (difference %.3g): the check cannot tell the limits apart", d)
	}
	for _, bias := range []LRPBias{BiasAbsorb, BiasIgnore} {
		m := compute(t, ex, LRP, in, Options{LowerConvs: -1, Gamma: 0.25, Bias: bias})
		if c := m.Checks; c["consistency_error"] > 1e-5 {
			t.Errorf("gamma 0.25, bias %s: consistency error %.3g", bias, c["consistency_error"])
		}
		if !strings.Contains(m.Rule, "gamma (0.25)") {
			t.Errorf("rule description %q does not name the gamma layers", m.Rule)
		}
	}
}

// The input-layer rules z^B, w² and flat all pass on exactly the relevance
// they receive (Montavon et al. 2019, section 10.1: each redistributes R_j
// in proportions that sum to 1 over the receptive field), so with the same
// rules above the input share is the same for the three, while the maps
// differ.
func TestLRPInputLayerRules(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 13)
	zb := compute(t, ex, LRP, in, Options{Input: InputZB})
	for _, rule := range []LRPInput{InputW2, InputFlat} {
		m := compute(t, ex, LRP, in, Options{Input: rule})
		if d := math.Abs(m.Checks["input_share"] - zb.Checks["input_share"]); d > 1e-5 {
			t.Errorf("%s: input share %.7g, z^B %.7g", rule, m.Checks["input_share"], zb.Checks["input_share"])
		}
		if m.Checks["consistency_error"] > 1e-5 {
			t.Errorf("%s: consistency error %.3g", rule, m.Checks["consistency_error"])
		}
		if d := relDiff(m.Values, zb.Values); d < 1e-3 {
			t.Errorf("%s gives the z^B map (difference %.3g)", rule, d)
		}
		if !strings.Contains(m.Rule, map[LRPInput]string{InputW2: "w²: ", InputFlat: "flat: "}[rule]) {
			t.Errorf("%s: rule description %q", rule, m.Rule)
		}
	}
}

// With a vanishing epsilon, LRP on a ReLU network equals gradient × input
// voxel by voxel (Ancona et al. 2018, "Towards better understanding of
// gradient-based attribution methods", Proposition 1; Montavon et al. 2019,
// section 10.2, from memory). Max pooling (winner) and average pooling
// (proportional) keep the identity. The gradient comes from the executor's
// own backward pass, a separate code path from the LRP rules.
func TestLRPZeroIsGradientTimesInput(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 7)
	lrp0 := compute(t, ex, LRP, in, Options{Rule: RuleEpsilon, Epsilon: 1e-12})
	gi := compute(t, ex, GradientInput, in, Options{})
	if d := relDiff(lrp0.Values, gi.Values); d > 1e-3 {
		t.Errorf("LRP-0 and gradient × input differ by %.3g of the largest value", d)
	}
	if math.Abs(lrp0.Target-gi.Target) > 1e-5 {
		t.Errorf("target logit: LRP %.7g, gradient %.7g", lrp0.Target, gi.Target)
	}
}

// Integrated gradients completeness (Sundararajan et al. 2017, Proposition 1):
// the attributions add up to f(x) − f(x'), within 1 % at m = 64, for both
// baselines; batching does not change the map.
func TestIGCompleteness(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 5)
	for _, base := range []Baseline{BaselineZero, BaselineBlur} {
		m := compute(t, ex, IntegratedGradients, in, Options{Baseline: base, Steps: 64})
		t.Logf("%s baseline: f(x) %.5g, f(x') %.5g, sum %.5g, completeness error %.3g",
			base, m.Checks["target_logit"], m.Checks["baseline_logit"], m.Checks["relevance_sum"], m.Checks["completeness_error"])
		if e := m.Checks["completeness_error"]; !(e < 0.01) {
			t.Errorf("%s baseline: completeness error %.3g at m = 64", base, e)
		}
		one := compute(t, ex, IntegratedGradients, in, Options{Baseline: base, Steps: 64, Batch: 1})
		if d := relDiff(one.Values, m.Values); d > 1e-5 {
			t.Errorf("%s baseline: batch 1 and batch 8 maps differ by %.3g", base, d)
		}
	}
}

// A blurred baseline is the input smoothed: same mean inside (the kernel is
// normalised) and less variation.
func TestBlurBaseline(t *testing.T) {
	in := testInput(testGrid, 2)
	b := blurTensor(in, [3]float64{2, 2, 2})
	var ma, mb, va, vb float64
	for i := range b {
		ma += float64(in.Data[i])
		mb += float64(b[i])
	}
	ma /= float64(len(b))
	mb /= float64(len(b))
	for i := range b {
		va += sq(float64(in.Data[i]) - ma)
		vb += sq(float64(b[i]) - mb)
	}
	if math.Abs(ma-mb) > 0.1 || !(vb < 0.8*va) {
		t.Errorf("blur: mean %.3g → %.3g, variance %.3g → %.3g", ma, mb, va, vb)
	}
	if k := gaussian(1.5); math.Abs(sum32(k)-1) > 1e-12 || len(k) != 11 {
		t.Errorf("gaussian(1.5): %d taps summing to %v", len(k), sum32(k))
	}
}

func sum32(k []float64) float64 {
	var s float64
	for _, v := range k {
		s += v
	}
	return s
}

// A model with an operator the Go executor lacks keeps occlusion (through
// ONNX Runtime) and switches the executor methods off, naming the operator;
// one the executor runs but LRP has no rule for switches off LRP only.
func TestUnsupportedOperators(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid, insert: "Tanh"}, true)
	in := testInput(testGrid, 1)
	for _, a := range ex.Available() {
		want := a.Method == Occlusion
		if a.Available != want || (!want && !strings.Contains(a.Reason, "Tanh")) {
			t.Errorf("Tanh model: %s available %v, reason %q", a.Method, a.Available, a.Reason)
		}
	}
	if _, err := ex.Compute(context.Background(), LRP, in, Options{}); err == nil || !strings.Contains(err.Error(), "Tanh") {
		t.Errorf("LRP on the Tanh model: %v", err)
	}
	m := compute(t, ex, Occlusion, in, Options{Patch: 8, Stride: 8})
	if m.Passes != 9 {
		t.Errorf("occlusion 8³ on 16³ with stride 8: %d passes, want 9", m.Passes)
	}

	ex = testExplainer(t, modelSpec{grid: testGrid, insert: "Sigmoid"}, false)
	for _, a := range ex.Available() {
		want := a.Method != LRP && a.Method != Occlusion // no session here
		if a.Available != want {
			t.Errorf("Sigmoid model: %s available %v, reason %q", a.Method, a.Available, a.Reason)
		}
		if a.Method == LRP && !strings.Contains(a.Reason, "no LRP rule for Sigmoid") {
			t.Errorf("Sigmoid model: LRP reason %q", a.Reason)
		}
	}
	compute(t, ex, GradientInput, in, Options{})
}

// Occlusion (Zeiler & Fergus 2014, section 4.2) with non-overlapping cubes:
// every voxel's value is the drop of the logit when its cube is set to the
// fill value, computed here with the Go executor on inputs the test builds,
// against the package's ONNX Runtime passes.
func TestOcclusionDefinition(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, true)
	in := testInput(testGrid, 4)
	const patch, fill = 4, 0.5
	var calls []int
	m := compute(t, ex, Occlusion, in, Options{Patch: patch, Stride: patch, Fill: fill, Batch: 5,
		Progress: func(done, total int) { calls = append(calls, done) }})
	if m.Passes != 65 || len(calls) == 0 || calls[len(calls)-1] != 65 {
		t.Fatalf("passes %d, progress %v", m.Passes, calls)
	}
	score := func(data []float32) float64 {
		tr, err := ex.exec.Forward(map[string]*onnx.Tensor{"scan": onnx.FromData(data, 1, 1, testGrid, testGrid, testGrid)})
		if err != nil {
			t.Fatal(err)
		}
		return float64(tr.Value("logits").Data[1])
	}
	f := score(in.Data)
	for _, p := range [][3]int{{0, 0, 0}, {4, 8, 12}, {12, 12, 12}, {8, 0, 4}} {
		occ := append([]float32(nil), in.Data...)
		for z := p[2]; z < p[2]+patch; z++ {
			for y := p[1]; y < p[1]+patch; y++ {
				for x := p[0]; x < p[0]+patch; x++ {
					occ[in.GridIndex(x, y, z)] = fill
				}
			}
		}
		want := f - score(occ)
		got := float64(m.Values[p[0]+1+testGrid*(p[1]+2+testGrid*(p[2]+3))])
		if math.Abs(got-want) > 1e-4+1e-3*math.Abs(want) {
			t.Errorf("cube at %v: drop %.6g, executor says %.6g", p, got, want)
		}
	}
}

// The slow methods stop when their context is cancelled.
func TestCancellation(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, true)
	in := testInput(testGrid, 4)
	for _, m := range []Method{IntegratedGradients, Occlusion} {
		ctx, cancel := context.WithCancel(context.Background())
		calls := 0
		_, err := ex.Compute(ctx, m, in, Options{Batch: 2, Patch: 4, Stride: 2, Progress: func(done, total int) {
			if calls++; done > 0 {
				cancel()
			}
		}})
		cancel()
		if !errors.Is(err, context.Canceled) || calls > 3 {
			t.Errorf("%s: error %v after %d progress calls; want context.Canceled soon", m, err, calls)
		}
	}
}

func TestTargetAndInputErrors(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 1)
	if _, err := ex.Compute(context.Background(), LRP, in, Options{Class: "other"}); err == nil || !strings.Contains(err.Error(), "other") {
		t.Errorf("unknown class: %v", err)
	}
	bad := *in
	bad.Data = bad.Data[:10]
	for _, m := range []Method{LRP, GradientInput, IntegratedGradients} {
		if _, err := ex.Compute(context.Background(), m, &bad, Options{}); err == nil {
			t.Errorf("%s: truncated tensor accepted", m)
		}
	}
	if _, err := ex.Compute(context.Background(), Occlusion, in, Options{}); err == nil || !strings.Contains(err.Error(), "session") {
		t.Errorf("occlusion without a session: %v", err)
	}
	if _, err := ParseMethod("heat"); err == nil {
		t.Error("ParseMethod accepted heat")
	}
	pos := compute(t, ex, GradientInput, in, Options{})
	neg := compute(t, ex, GradientInput, in, Options{Class: "negative"})
	if pos.Class != "positive" || neg.Class != "negative" || pos.Target == neg.Target {
		t.Errorf("targets: %s %.4g, %s %.4g", pos.Class, pos.Target, neg.Class, neg.Target)
	}
}

func TestPatchStarts(t *testing.T) {
	for _, c := range []struct {
		n, p, s int
		want    []int
	}{{16, 4, 4, []int{0, 4, 8, 12}}, {10, 4, 4, []int{0, 4, 6}}, {3, 8, 4, []int{0}}, {8, 8, 4, []int{0}}} {
		got := patchStarts(c.n, min(c.p, c.n), c.s)
		if len(got) != len(c.want) {
			t.Errorf("patchStarts(%d, %d, %d) = %v, want %v", c.n, c.p, c.s, got, c.want)
			continue
		}
		for i := range got {
			if got[i] != c.want[i] {
				t.Errorf("patchStarts(%d, %d, %d) = %v, want %v", c.n, c.p, c.s, got, c.want)
			}
		}
	}
}

// Relevance mass accuracy (Arras et al. 2022, section 4.2) by its
// definition: only positive relevance counts; a map equal to the mask
// scores 1, a uniform map scores the mask's share (chance); a map without
// positive values (all negative, all zero, NaN) has no share and is an
// error, not 0.
func TestMassAccuracyDefinition(t *testing.T) {
	mask := []bool{true, false, false, true, false, false, false, false}
	for _, c := range []struct {
		v    []float32
		want float64
	}{
		{[]float32{1, 0, 0, 1, 0, 0, 0, 0}, 1},
		{[]float32{1, 1, 1, 1, 1, 1, 1, 1}, 0.25},
		{[]float32{3, -5, 0, 1, 1, -1, 0, 0}, 0.8},
	} {
		if got, err := MassAccuracy(c.v, mask); err != nil || math.Abs(got-c.want) > 1e-12 {
			t.Errorf("MassAccuracy(%v) = %v, %v; want %v", c.v, got, err, c.want)
		}
	}
	nan := float32(math.NaN())
	for _, v := range [][]float32{{-1, -1, -1, -1, -1, -1, -1, -1}, make([]float32, 8), {nan, nan, 0, 0, 0, 0, 0, 0}} {
		if got, err := MassAccuracy(v, mask); !errors.Is(err, ErrNoPositiveRelevance) {
			t.Errorf("MassAccuracy(%v) = %v, %v; want ErrNoPositiveRelevance", v, got, err)
		}
	}
}

// ToScan carries a map back through the inverse of the preprocessing
// transform: on a left-handed, anisotropic scan (LPS axes, 1 × 1.2 × 0.9 mm),
// a single hot model-grid voxel lands on the scan voxel nearest the grid
// voxel's RAS position (GridAffine), the result has the scan's dims and
// affine, and an additive map keeps its sum.
func TestToScanGeometry(t *testing.T) {
	dims := [3]int{70, 60, 80}
	sp := [3]float64{1, 1.2, 0.9}
	var a volume.Affine
	a[0][0], a[1][1], a[2][2], a[3][3] = -sp[0], -sp[1], sp[2], 1
	a[0][3], a[1][3], a[2][3] = 40, 30, -30
	scan, err := volume.New(dims, a)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
				d := sq((p[0]-5)/25) + sq((p[1]+2)/30) + sq((p[2]-4)/28)
				if d < 1 {
					scan.Data[scan.Index(i, j, k)] = float32(100 + 20*p[0]/25)
				}
			}
		}
	}
	card := testCard(testModel(t, modelSpec{grid: testGrid}), testGrid)
	pr, err := inference.PrepareForCard(scan, card)
	if err != nil {
		t.Fatal(err)
	}
	g := [3]int{5, 9, 7}
	m := &Map{Grid: pr.Transform.GridDims, Values: make([]float32, testGrid*testGrid*testGrid), Additive: true}
	m.Values[g[0]+testGrid*(g[1]+testGrid*g[2])] = 1
	out, err := m.ToScan(pr.Transform)
	if err != nil {
		t.Fatal(err)
	}
	if out.Dims != scan.Dims || out.Affine != scan.Affine {
		t.Fatalf("map on %v %v, scan %v %v", out.Dims, out.Affine, scan.Dims, scan.Affine)
	}
	want := pr.Transform.GridAffine.Apply([3]float64{float64(g[0]), float64(g[1]), float64(g[2])})
	pk := Peak(out)
	got := out.Affine.Apply([3]float64{float64(pk[0]), float64(pk[1]), float64(pk[2])})
	if d := math.Sqrt(sq(got[0]-want[0]) + sq(got[1]-want[1]) + sq(got[2]-want[2])); d > 1 {
		t.Errorf("hot voxel at RAS %v, peak on the scan at %v (%.2f mm away)", want, got, d)
	}
	var s float64
	for _, v := range out.Data {
		s += float64(v)
	}
	if math.Abs(s-1) > 0.02 {
		t.Errorf("additive map sums to %.4f on the scan, 1 on the grid", s)
	}
}

// With Contrast the explained score is the class logit minus the other's
// (two classes): LRP still conserves it and integrated gradients still add
// up to its change.
func TestContrastTarget(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 3)
	pos := compute(t, ex, GradientInput, in, Options{})
	neg := compute(t, ex, GradientInput, in, Options{Class: "negative"})
	con := compute(t, ex, GradientInput, in, Options{Contrast: true})
	if math.Abs(con.Target-(pos.Target-neg.Target)) > 1e-5 {
		t.Errorf("contrast %.6g, logits %.6g − %.6g", con.Target, pos.Target, neg.Target)
	}
	for i := range con.Values {
		if d := con.Values[i] - (pos.Values[i] - neg.Values[i]); math.Abs(float64(d)) > 1e-5 {
			t.Fatalf("voxel %d: contrast %.6g, difference of the maps %.6g", i, con.Values[i], pos.Values[i]-neg.Values[i])
		}
	}
	lrp := compute(t, ex, LRP, in, Options{Contrast: true})
	ig := compute(t, ex, IntegratedGradients, in, Options{Contrast: true})
	if lrp.Checks["consistency_error"] > 1e-5 || ig.Checks["completeness_error"] > 0.01 {
		t.Errorf("contrast: LRP consistency %.3g, completeness %.3g", lrp.Checks["consistency_error"], ig.Checks["completeness_error"])
	}
}

// With a tolerance, integrated gradients triple the steps while the
// completeness error exceeds it; the refined map equals the map computed
// directly with the final number of steps (the midpoints nest).
func TestIGRefinement(t *testing.T) {
	ex := testExplainer(t, modelSpec{grid: testGrid}, false)
	in := testInput(testGrid, 6)
	coarse := compute(t, ex, IntegratedGradients, in, Options{Steps: 2})
	if coarse.Checks["completeness_error"] < 1e-4 {
		t.Fatalf("two steps are already complete on this input (error %.3g); the test needs a coarse error", coarse.Checks["completeness_error"])
	}
	ref := compute(t, ex, IntegratedGradients, in, Options{Steps: 2, Tolerance: 1e-4, MaxSteps: 54})
	n := int(ref.Checks["steps"])
	if n <= 2 || n > 54 || (n < 54 && ref.Checks["completeness_error"] > 1e-4) {
		t.Errorf("refined to %d steps, error %.3g", n, ref.Checks["completeness_error"])
	}
	direct := compute(t, ex, IntegratedGradients, in, Options{Steps: n})
	if d := relDiff(ref.Values, direct.Values); d > 1e-5 {
		t.Errorf("refined and direct %d-step maps differ by %.3g", n, d)
	}
	if ref.Passes != n+2 {
		t.Errorf("%d passes for %d steps", ref.Passes, n)
	}
}

// The sparse scatter of Wᵀs agrees with the executor's own backward pass
// (the input gradient of ONNX Conv) for 1D, 2D and 3D convolutions with
// strides, dilations and asymmetric padding.
func TestSparseConvTranspose(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 5))
	for _, c := range []struct {
		x, w          []int
		strides, dils []int64
		pads          []int64
	}{
		{[]int{2, 3, 9, 8, 7}, []int{4, 3, 3, 3, 3}, []int64{1, 1, 1}, []int64{1, 1, 1}, []int64{1, 1, 1, 1, 1, 1}},
		{[]int{1, 2, 10, 9, 11}, []int{3, 2, 3, 2, 3}, []int64{2, 1, 2}, []int64{1, 2, 1}, []int64{0, 1, 2, 1, 0, 1}},
		{[]int{2, 2, 12, 10}, []int{3, 2, 3, 3}, []int64{2, 2}, []int64{2, 1}, []int64{1, 0, 2, 1}},
		{[]int{1, 3, 20}, []int{2, 3, 5}, []int64{3}, []int64{1}, []int64{2, 2}},
	} {
		w := randTensor(r, 1, c.w...)
		n := &onnx.Node{OpType: "Conv", Name: "c", Attrs: []*onnx.Attribute{
			onnx.IntsAttr("strides", c.strides...), onnx.IntsAttr("dilations", c.dils...), onnx.IntsAttr("pads", c.pads...)}}
		l, err := newLinearLayer(n, 13, w, nil)
		if err != nil {
			t.Fatal(err)
		}
		if !l.sparse {
			t.Fatalf("%v: no sparse geometry", c.w)
		}
		x := randTensor(r, 1, c.x...)
		z, err := forward(l.full, x)
		if err != nil {
			t.Fatal(err)
		}
		s := onnx.New(z.Shape...)
		for i := range s.Data {
			if r.IntN(6) == 0 {
				s.Data[i] = float32(r.NormFloat64())
			}
		}
		want, err := vjp(l.full, w, nil, x, z, s)
		if err != nil {
			t.Fatal(err)
		}
		got := l.geom.transpose(s, x, []*onnx.Tensor{w, l.wPos})
		if d := relDiff(got[0].Data, want.Data); d > 1e-5 {
			t.Errorf("%v over %v: sparse Wᵀs differs from the executor by %.3g", c.w, c.x, d)
		}
		wantPos, _ := vjp(l.pos, l.wPos, nil, x, z, s)
		if d := relDiff(got[1].Data, wantPos.Data); d > 1e-5 {
			t.Errorf("%v over %v: sparse W⁺ᵀs differs from the executor by %.3g", c.w, c.x, d)
		}
	}
}

// The share sentence leads with the input share and names the ledger check
// as an implementation check, for each kind of method.
func TestShareSentence(t *testing.T) {
	for _, c := range []struct {
		m      Method
		checks map[string]float64
		want   []string
	}{
		{LRP, map[string]float64{"input_share": 0.146, "bias_share": 0.96, "stabiliser_share": -0.106, "consistency_error": 3e-7},
			[]string{"The voxels carry 15 % of the explained logit", "biases keep 96 %", "stabilisers -11 %", "Implementation check", "3e-07"}},
		{IntegratedGradients, map[string]float64{"input_share": 1.2, "completeness_error": 0.004}, []string{"120 %", "baseline", "Completeness error 0.004"}},
		{GradientInput, map[string]float64{"input_share": 0.05}, []string{"5.0 %", "need not add up"}},
		{Occlusion, map[string]float64{"passes": 3}, []string{"not shares"}},
	} {
		s := ShareSentence(c.m, c.checks)
		for _, w := range c.want {
			if !strings.Contains(s, w) {
				t.Errorf("%s: %q lacks %q", c.m, s, w)
			}
		}
	}
}
