package train

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
	"brightfold/internal/parallel"
)

// batchState keeps what one training forward pass needs for its backward
// pass: each segment's trace per case and each normalisation's statistics.
type batchState struct {
	traces [][]*exec.Trace // [segment][case]
	mean   [][]float64     // [bn][channel] batch mean
	invStd [][]float64     // [bn][channel] 1/√(var + ε)
	logits [][]float64     // [case][class]
}

// trainForward runs the batch through the segments with batch statistics.
// xs are the cases' input values ([1, 1, z, y, x] each). momentum updates
// the running statistics (0 leaves them unchanged).
func (n *Net) trainForward(xs [][]float32, workers int, momentum float64) (*batchState, error) {
	st := &batchState{traces: make([][]*exec.Trace, len(n.segs))}
	acts := make([]*onnx.Tensor, len(xs))
	for i, x := range xs {
		acts[i] = onnx.FromData(x, n.segs[0].shape...)
	}
	for k, seg := range n.segs {
		st.traces[k] = make([]*exec.Trace, len(xs))
		err := parallel.EachErr(len(xs), workers, func(_, i int) error {
			tr, err := seg.exec.Forward(map[string]*onnx.Tensor{seg.in: acts[i]})
			if err != nil {
				return fmt.Errorf("segment %d: %w", k, err)
			}
			st.traces[k][i] = tr
			return nil
		})
		if err != nil {
			return nil, err
		}
		outs := make([]*onnx.Tensor, len(xs))
		for i, tr := range st.traces[k] {
			outs[i] = tr.Value(seg.out)
		}
		if k == len(n.segs)-1 {
			st.logits = make([][]float64, len(xs))
			for i, o := range outs {
				st.logits[i] = toFloat64(o.Data)
			}
			break
		}
		bn := n.bns[k]
		mean, invStd, err := bn.batchStats(outs, workers, momentum)
		if err != nil {
			return nil, err
		}
		st.mean = append(st.mean, mean)
		st.invStd = append(st.invStd, invStd)
		acts = make([]*onnx.Tensor, len(xs))
		if err := parallel.EachErr(len(xs), workers, func(_, i int) error {
			acts[i] = bn.normalise(outs[i], mean, invStd)
			return nil
		}); err != nil {
			return nil, err
		}
	}
	return st, nil
}

func toFloat64(x []float32) []float64 {
	out := make([]float64, len(x))
	for i, v := range x {
		out[i] = float64(v)
	}
	return out
}

// batchStats returns the per-channel mean and 1/√(var+ε) over the cases and
// positions of xs (biased variance, as batch normalisation uses), and moves
// the running statistics towards them (unbiased variance for the running
// estimate, as Ioffe & Szegedy 2015, Algorithm 2, step 10, and PyTorch do).
func (bn *bnLayer) batchStats(xs []*onnx.Tensor, workers int, momentum float64) ([]float64, []float64, error) {
	c, p := bn.channels, bn.positions
	s1 := make([][]float64, len(xs))
	s2 := make([][]float64, len(xs))
	if err := parallel.EachErr(len(xs), workers, func(_, i int) error {
		if len(xs[i].Data) != c*p {
			return fmt.Errorf("%s: case %d has %d values, want %d", bn.name, i, len(xs[i].Data), c*p)
		}
		s1[i], s2[i] = make([]float64, c), make([]float64, c)
		for ch := 0; ch < c; ch++ {
			var a, b float64
			for _, v := range xs[i].Data[ch*p : (ch+1)*p] {
				a += float64(v)
				b += float64(v) * float64(v)
			}
			s1[i][ch], s2[i][ch] = a, b
		}
		return nil
	}); err != nil {
		return nil, nil, err
	}
	m := float64(len(xs) * p)
	mean, invStd := make([]float64, c), make([]float64, c)
	for ch := 0; ch < c; ch++ {
		var a, b float64
		for i := range xs { // case order: deterministic
			a += s1[i][ch]
			b += s2[i][ch]
		}
		mu := a / m
		v := math.Max(0, b/m-mu*mu)
		mean[ch] = mu
		invStd[ch] = 1 / math.Sqrt(v+float64(bn.eps))
		if momentum > 0 {
			unbiased := v
			if m > 1 {
				unbiased = v * m / (m - 1)
			}
			bn.runMean.Data[ch] = float32((1-momentum)*float64(bn.runMean.Data[ch]) + momentum*mu)
			bn.runVar.Data[ch] = float32((1-momentum)*float64(bn.runVar.Data[ch]) + momentum*unbiased)
		}
	}
	return mean, invStd, nil
}

// normalise returns scale·(x − mean)·invStd + bias for one case.
func (bn *bnLayer) normalise(x *onnx.Tensor, mean, invStd []float64) *onnx.Tensor {
	y := onnx.New(x.Shape...)
	p := bn.positions
	for ch := 0; ch < bn.channels; ch++ {
		a := float64(bn.scale.Data[ch]) * invStd[ch]
		b := float64(bn.bias.Data[ch]) - a*mean[ch]
		af, bf := float32(a), float32(b)
		src, dst := x.Data[ch*p:(ch+1)*p], y.Data[ch*p:(ch+1)*p]
		for j, v := range src {
			dst[j] = v*af + bf
		}
	}
	return y
}

// bnBackward turns the gradients with respect to the normalised outputs of
// all cases into gradients with respect to the inputs, and returns the
// scale and shift gradients (Ioffe & Szegedy 2015, Section 3.1):
// dx = γ·σ⁻¹·(dy − mean(dy) − x̂·mean(dy·x̂)), dγ = Σ dy·x̂, dβ = Σ dy.
func (bn *bnLayer) backward(xs, gys []*onnx.Tensor, mean, invStd []float64, workers int) ([]*onnx.Tensor, []float32, []float32, error) {
	c, p := bn.channels, bn.positions
	sg := make([][]float64, len(xs))
	sgx := make([][]float64, len(xs))
	if err := parallel.EachErr(len(xs), workers, func(_, i int) error {
		sg[i], sgx[i] = make([]float64, c), make([]float64, c)
		for ch := 0; ch < c; ch++ {
			var a, b float64
			xd, gd := xs[i].Data[ch*p:(ch+1)*p], gys[i].Data[ch*p:(ch+1)*p]
			for j, g := range gd {
				a += float64(g)
				b += float64(g) * (float64(xd[j]) - mean[ch]) * invStd[ch]
			}
			sg[i][ch], sgx[i][ch] = a, b
		}
		return nil
	}); err != nil {
		return nil, nil, nil, err
	}
	dScale, dBias := make([]float32, c), make([]float32, c)
	meanG, meanGX := make([]float64, c), make([]float64, c)
	m := float64(len(xs) * p)
	for ch := 0; ch < c; ch++ {
		var a, b float64
		for i := range xs {
			a += sg[i][ch]
			b += sgx[i][ch]
		}
		dBias[ch], dScale[ch] = float32(a), float32(b)
		meanG[ch], meanGX[ch] = a/m, b/m
	}
	dxs := make([]*onnx.Tensor, len(xs))
	err := parallel.EachErr(len(xs), workers, func(_, i int) error {
		dx := onnx.New(xs[i].Shape...)
		for ch := 0; ch < c; ch++ {
			k := float64(bn.scale.Data[ch]) * invStd[ch]
			xd, gd, dd := xs[i].Data[ch*p:(ch+1)*p], gys[i].Data[ch*p:(ch+1)*p], dx.Data[ch*p:(ch+1)*p]
			for j, g := range gd {
				xh := (float64(xd[j]) - mean[ch]) * invStd[ch]
				dd[j] = float32(k * (float64(g) - meanG[ch] - xh*meanGX[ch]))
			}
		}
		dxs[i] = dx
		return nil
	})
	return dxs, dScale, dBias, err
}

// trainBackward propagates the logit gradients (one row per case) back
// through the batch and returns the parameter gradients, summed over the
// cases in case order.
func (n *Net) trainBackward(st *batchState, gLogits [][]float64, workers int) (map[string][]float32, error) {
	grads := map[string][]float32{}
	add := func(name string, g []float32) {
		acc := grads[name]
		if acc == nil {
			acc = make([]float32, len(g))
			grads[name] = acc
		}
		for j, v := range g {
			acc[j] += v
		}
	}
	cases := len(gLogits)
	gOut := make([]*onnx.Tensor, cases)
	for i, g := range gLogits {
		t := onnx.New(1, len(g))
		for j, v := range g {
			t.Data[j] = float32(v)
		}
		gOut[i] = t
	}
	for k := len(n.segs) - 1; k >= 0; k-- {
		seg := n.segs[k]
		res := make([]*exec.Grads, cases)
		err := parallel.EachErr(cases, workers, func(_, i int) error {
			g, err := seg.exec.BackwardWith(st.traces[k][i], map[string]*onnx.Tensor{seg.out: gOut[i]},
				exec.BackwardOptions{NoInputs: k == 0})
			if err != nil {
				return fmt.Errorf("segment %d: %w", k, err)
			}
			res[i] = g
			return nil
		})
		if err != nil {
			return nil, err
		}
		for i := 0; i < cases; i++ { // case order: deterministic
			for _, name := range seg.params {
				if g := res[i].Of(name); g != nil {
					add(name, g.Data)
				}
			}
		}
		if k == 0 {
			break
		}
		bn := n.bns[k-1]
		xs := make([]*onnx.Tensor, cases)
		gys := make([]*onnx.Tensor, cases)
		for i := 0; i < cases; i++ {
			xs[i] = st.traces[k-1][i].Value(n.segs[k-1].out)
			gys[i] = res[i].Of(seg.in)
			if gys[i] == nil {
				gys[i] = onnx.New(xs[i].Shape...)
			}
		}
		dxs, dScale, dBias, err := bn.backward(xs, gys, st.mean[k-1], st.invStd[k-1], workers)
		if err != nil {
			return nil, err
		}
		add(bn.name+".weight", dScale)
		add(bn.name+".bias", dBias)
		gOut = dxs
	}
	return grads, nil
}

// Output is the exported model's output for one case.
type Output struct {
	Logits   []float64
	Features []float64
}

// Predict runs the exported model (inference-mode batch normalisation) on
// each case, one goroutine per case up to workers.
func (n *Net) Predict(xs [][]float32, workers int) ([]Output, error) {
	out := make([]Output, len(xs))
	shape := []int{1, 1, n.Arch.Grid[2], n.Arch.Grid[1], n.Arch.Grid[0]}
	err := parallel.EachErr(len(xs), workers, func(_, i int) error {
		tr, err := n.infer.Forward(map[string]*onnx.Tensor{n.Arch.Input: onnx.FromData(xs[i], shape...)})
		if err != nil {
			return err
		}
		out[i] = Output{Logits: toFloat64(tr.Value(n.Arch.Logits).Data), Features: toFloat64(tr.Value(n.Arch.Features).Data)}
		return nil
	})
	return out, err
}
