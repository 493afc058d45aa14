package train

import (
	"math"
	"sort"

	"brightfold/internal/onnx"
)

// Adam is the optimiser of Kingma & Ba 2015 (Algorithm 1, with the bias
// corrections), with decoupled weight decay (Loshchilov & Hutter 2019,
// AdamW) on the tensors Decay selects.
type Adam struct {
	Beta1, Beta2, Eps float64
	WeightDecay       float64
	Decay             func(name string) bool

	t    int
	m, v map[string][]float64
}

// NewAdam returns Adam with the paper's defaults β₁ = 0.9, β₂ = 0.999,
// ε = 1e-8.
func NewAdam(weightDecay float64, decay func(string) bool) *Adam {
	return &Adam{Beta1: 0.9, Beta2: 0.999, Eps: 1e-8, WeightDecay: weightDecay, Decay: decay,
		m: map[string][]float64{}, v: map[string][]float64{}}
}

// Step applies one update with learning rate lr to the named tensors from
// their gradients (a missing gradient counts as zero).
func (a *Adam) Step(params map[string]*onnx.Tensor, grads map[string][]float32, lr float64) {
	a.t++
	c1 := 1 - math.Pow(a.Beta1, float64(a.t))
	c2 := 1 - math.Pow(a.Beta2, float64(a.t))
	names := make([]string, 0, len(params))
	for name := range params {
		names = append(names, name)
	}
	sort.Strings(names)
	for _, name := range names {
		p := params[name]
		g := grads[name]
		m, v := a.m[name], a.v[name]
		if m == nil {
			m, v = make([]float64, len(p.Data)), make([]float64, len(p.Data))
			a.m[name], a.v[name] = m, v
		}
		wd := 0.0
		if a.Decay != nil && a.Decay(name) {
			wd = a.WeightDecay
		}
		for i := range p.Data {
			gi := 0.0
			if g != nil {
				gi = float64(g[i])
			}
			m[i] = a.Beta1*m[i] + (1-a.Beta1)*gi
			v[i] = a.Beta2*v[i] + (1-a.Beta2)*gi*gi
			step := lr * (m[i] / c1) / (math.Sqrt(v[i]/c2) + a.Eps)
			x := float64(p.Data[i])
			p.Data[i] = float32(x - step - lr*wd*x)
		}
	}
}
