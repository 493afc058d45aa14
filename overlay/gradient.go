package overlay

import (
	"context"
	"fmt"
	"math"

	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

// computeLRP runs the planned LRP rules and reports their conservation.
func (e *Explainer) computeLRP(ctx context.Context, t *preprocess.Tensor, tg target, opt Options) (*Map, error) {
	x, err := e.input1(t)
	if err != nil {
		return nil, err
	}
	res, err := e.lrp.run(ctx, x, tg, opt)
	if err != nil {
		return nil, err
	}
	f := res.target
	rsum := sum(res.input.Data)
	checks := map[string]float64{
		// The ledger adds up by construction: every rule books what it
		// does not pass on (the bias terms from the biases, the
		// stabiliser terms from the epsilons). This is a consistency
		// check of the implementation (forward pass against backward
		// rules), not a measure of how much of the logit reaches the
		// voxels; input_share is that measure.
		"consistency_error": math.Abs(rsum+res.ledger.bias+res.ledger.stab-f) / math.Max(math.Abs(f), 1e-12),
		"relevance_sum":     rsum,
		"target_logit":      f,
	}
	// Bach et al. 2015, eq. 2 and section 3: relevance is conserved from
	// layer to layer when nothing is absorbed; the shares say how much of
	// the logit f the voxels, the biases and the stabilisers carry
	// (input + bias + stabiliser = 1).
	if f != 0 {
		checks["input_share"] = rsum / f
		checks["bias_share"] = res.ledger.bias / f
		checks["stabiliser_share"] = res.ledger.stab / f
	}
	return &Map{
		Rule:     e.lrp.describe(opt),
		Target:   f,
		Values:   toGrid(t, res.input.Data),
		Additive: true,
		Passes:   1,
		Checks:   checks,
		Settings: map[string]any{"rule": string(opt.Rule), "epsilon": opt.Epsilon, "bias": string(opt.Bias), "lower_convs": e.lrp.lowerConvs(opt), "gamma": opt.Gamma, "input": string(opt.Input)},
	}, nil
}

// input1 checks t's size and wraps it as a one-case executor input.
func (e *Explainer) input1(t *preprocess.Tensor) (*onnx.Tensor, error) {
	n := 1
	for _, d := range t.Shape[1:] {
		n *= int(d)
	}
	if len(t.Shape) < 2 || t.Shape[0] != 1 || len(t.Data) != n {
		return nil, fmt.Errorf("overlay: tensor of shape %v holds %d values; want one case", t.Shape, len(t.Data))
	}
	return graphInput(t), nil
}

// gradSum returns the sum over n cases (made by fill into a buffer of one's
// size) of the gradient of the target score, and each case's score, running
// the executor in batches of at most batch cases.
func (e *Explainer) gradSum(ctx context.Context, one *onnx.Tensor, n int, fill func(i int, dst []float32), tg target, batch int, onBatch func(done int)) ([]float64, []float64, error) {
	batch = max(1, min(batch, e.maxBatch, n))
	per := one.Len()
	acc := make([]float64, per)
	var scores []float64
	for lo := 0; lo < n; lo += batch {
		if err := ctx.Err(); err != nil {
			return nil, nil, err
		}
		hi := min(n, lo+batch)
		x := onnx.New(append([]int{hi - lo}, one.Shape[1:]...)...)
		for i := lo; i < hi; i++ {
			fill(i, x.Data[(i-lo)*per:(i-lo+1)*per])
		}
		g, s, err := e.gradBatch(x, tg)
		if err != nil {
			return nil, nil, err
		}
		for i, v := range g.Data {
			acc[i%per] += float64(v)
		}
		scores = append(scores, s...)
		if onBatch != nil {
			onBatch(hi)
		}
	}
	return acc, scores, nil
}

// gradBatch is one forward and backward pass on a batch.
func (e *Explainer) gradBatch(x *onnx.Tensor, tg target) (*onnx.Tensor, []float64, error) {
	tr, err := e.exec.Forward(map[string]*onnx.Tensor{e.input: x})
	if err != nil {
		return nil, nil, err
	}
	z := tr.Value(e.logits)
	if z == nil {
		return nil, nil, fmt.Errorf("overlay: the model computes no %q", e.logits)
	}
	seed, err := tg.seed(z)
	if err != nil {
		return nil, nil, err
	}
	g, err := e.exec.BackwardWith(tr, map[string]*onnx.Tensor{e.logits: seed}, exec.BackwardOptions{NoParams: true})
	if err != nil {
		return nil, nil, err
	}
	gx := g.Of(e.input)
	if gx == nil {
		gx = onnx.New(x.Shape...)
	}
	return gx, tg.scores(z), nil
}

// scoresOf runs the executor forward on cases and returns their scores.
func (e *Explainer) scoresOf(one *onnx.Tensor, cases [][]float32, tg target) ([]float64, error) {
	var out []float64
	per := one.Len()
	batch := max(1, min(len(cases), e.maxBatch))
	for lo := 0; lo < len(cases); lo += batch {
		hi := min(len(cases), lo+batch)
		x := onnx.New(append([]int{hi - lo}, one.Shape[1:]...)...)
		for i, c := range cases[lo:hi] {
			copy(x.Data[i*per:], c)
		}
		tr, err := e.exec.Forward(map[string]*onnx.Tensor{e.input: x})
		if err != nil {
			return nil, err
		}
		out = append(out, tg.scores(tr.Value(e.logits))...)
	}
	return out, nil
}

// computeGradInput is gradient × input (Shrikumar et al. 2016).
func (e *Explainer) computeGradInput(ctx context.Context, t *preprocess.Tensor, tg target) (*Map, error) {
	x, err := e.input1(t)
	if err != nil {
		return nil, err
	}
	g, s, err := e.gradSum(ctx, x, 1, func(_ int, dst []float32) { copy(dst, x.Data) }, tg, 1, nil)
	if err != nil {
		return nil, err
	}
	v := make([]float32, len(x.Data))
	for i, xv := range x.Data {
		v[i] = float32(float64(xv) * g[i])
	}
	rsum := sum(v)
	return &Map{
		Rule: "gradient of the target logit times the input", Target: s[0], Values: toGrid(t, v),
		Additive: true, Passes: 1,
		Checks: withInputShare(map[string]float64{"relevance_sum": rsum, "target_logit": s[0]}),
	}, nil
}

// computeIG is integrated gradients (Sundararajan et al. 2017, eq. 3),
// approximated with the midpoint rule on m steps:
// (x − x')·(1/m)·Σ_k ∇f(x' + (k − ½)/m·(x − x')). With a tolerance, while
// the completeness error exceeds it, the steps are tripled (the midpoints of
// m steps are among those of 3m, so no gradient is computed twice), as the
// paper advises ("check completeness; if the error is large, use more
// steps"), up to MaxSteps.
func (e *Explainer) computeIG(ctx context.Context, t *preprocess.Tensor, tg target, opt Options) (*Map, error) {
	x, err := e.input1(t)
	if err != nil {
		return nil, err
	}
	base, err := e.baseline(t, opt)
	if err != nil {
		return nil, err
	}
	ends, err := e.scoresOf(x, [][]float32{x.Data, base}, tg)
	if err != nil {
		return nil, err
	}
	diff := ends[0] - ends[1]
	n, passes := opt.Steps, 2
	alphas := make([]float64, n)
	for k := range alphas {
		alphas[k] = (float64(k) + 0.5) / float64(n)
	}
	acc := make([]float64, len(x.Data))
	v := make([]float32, len(x.Data))
	var rsum, cerr float64
	for {
		total := passes + len(alphas)
		opt.progress(passes, total)
		point := func(k int, dst []float32) {
			a := float32(alphas[k])
			for i, xv := range x.Data {
				dst[i] = base[i] + a*(xv-base[i])
			}
		}
		done := passes
		g, _, err := e.gradSum(ctx, x, len(alphas), point, tg, opt.Batch, func(d int) { opt.progress(done+d, total) })
		if err != nil {
			return nil, err
		}
		passes = total
		for i, gv := range g {
			acc[i] += gv
		}
		for i, xv := range x.Data {
			v[i] = float32(float64(xv-base[i]) * acc[i] / float64(n))
		}
		rsum = sum(v)
		cerr = math.Abs(rsum-diff) / math.Max(math.Abs(diff), 1e-12)
		if opt.Tolerance <= 0 || cerr <= opt.Tolerance || 3*n > opt.MaxSteps {
			break
		}
		alphas = alphas[:0]
		for j := 0; j < 3*n; j++ {
			if j%3 != 1 {
				alphas = append(alphas, (float64(j)+0.5)/float64(3*n))
			}
		}
		n *= 3
	}
	return &Map{
		Rule:   fmt.Sprintf("integrated gradients, %s baseline, %d midpoint steps", opt.Baseline, n),
		Target: ends[0], Values: toGrid(t, v), Additive: true, Passes: passes,
		Checks: withInputShare(map[string]float64{
			// Sundararajan et al. 2017, Proposition 1 (completeness):
			// Σ_i IG_i = f(x) − f(x').
			"completeness_error": cerr,
			"relevance_sum":      rsum,
			"target_logit":       ends[0],
			"baseline_logit":     ends[1],
			"steps":              float64(n),
		}),
		Settings: map[string]any{"steps": n, "baseline": string(opt.Baseline), "blur_sigma_mm": blurSetting(opt), "tolerance": opt.Tolerance},
	}, nil
}

// withInputShare adds input_share, the map's sum over the target logit
// (relevance_sum / target_logit), when the logit is not 0. For integrated
// gradients it is 1 − f(x')/f(x): the baseline keeps the rest.
func withInputShare(c map[string]float64) map[string]float64 {
	if f := c["target_logit"]; f != 0 {
		c["input_share"] = c["relevance_sum"] / f
	}
	return c
}

func blurSetting(opt Options) any {
	if opt.Baseline != BaselineBlur {
		return nil
	}
	return opt.BlurSigmaMM
}

// baseline returns the integrated-gradients baseline in t's layout.
func (e *Explainer) baseline(t *preprocess.Tensor, opt Options) ([]float32, error) {
	switch opt.Baseline {
	case BaselineZero:
		return make([]float32, len(t.Data)), nil
	case BaselineBlur:
		sp := e.card.Preprocessing.SpacingMm
		var sigma [3]float64
		for a := range sigma {
			sigma[a] = opt.BlurSigmaMM / sp[a]
		}
		return blurTensor(t, sigma), nil
	}
	return nil, fmt.Errorf("overlay: unknown baseline %q (want %s or %s)", opt.Baseline, BaselineZero, BaselineBlur)
}
