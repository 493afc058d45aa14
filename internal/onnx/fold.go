package onnx

import (
	"fmt"
	"math"
)

// Clone returns a deep copy of the model (through Encode and Decode), for
// edits such as randomising weights that must not touch the original.
func (m *Model) Clone() (*Model, error) {
	b, err := m.Encode()
	if err != nil {
		return nil, fmt.Errorf("clone model: %w", err)
	}
	c, err := Decode(b)
	if err != nil {
		return nil, fmt.Errorf("clone model: %w", err)
	}
	return c, nil
}

// FoldBatchNorm returns a copy of m in which every inference-mode
// BatchNormalization that directly follows a Conv (whose output nothing
// else reads) is folded into that convolution: W'[o] = W[o]·a[o] and
// b'[o] = (b[o] − mean[o])·a[o] + beta[o] with a = scale/sqrt(var + eps).
// The result computes the same function; relevance rules that treat
// convolutions need it. It also returns the number of folded nodes.
func FoldBatchNorm(m *Model) (*Model, int, error) {
	c, err := m.Clone()
	if err != nil {
		return nil, 0, err
	}
	g := c.Graph
	folded := 0
	var keep []*Node
	removed := map[*Node]bool{}
	for _, bn := range g.Nodes {
		if bn.OpType != "BatchNormalization" {
			continue
		}
		conv := g.Producer(bn.Input(0))
		if conv == nil || conv.OpType != "Conv" || len(g.Consumers(bn.Input(0))) != 1 || isGraphOutput(g, bn.Input(0)) {
			continue
		}
		ok, err := foldOne(g, conv, bn)
		if err != nil {
			return nil, 0, err
		}
		if ok {
			removed[bn] = true
			folded++
		}
	}
	for _, n := range g.Nodes {
		if !removed[n] {
			keep = append(keep, n)
		}
	}
	g.Nodes = keep
	pruneUnused(g)
	return c, folded, nil
}

// foldOne folds bn into conv when all their parameters are float
// initializers; it reports whether it did.
func foldOne(g *Graph, conv, bn *Node) (bool, error) {
	param := func(name string) *Tensor {
		if in := g.Initializer(name); in != nil && in.Tensor != nil && in.Tensor.IsFloat() {
			return in.Tensor
		}
		return nil
	}
	w := param(conv.Input(1))
	scale, beta, mean, variance := param(bn.Input(1)), param(bn.Input(2)), param(bn.Input(3)), param(bn.Input(4))
	if w == nil || scale == nil || beta == nil || mean == nil || variance == nil || len(bn.Outputs) != 1 {
		return false, nil
	}
	if tm, _ := bn.AttrInt("training_mode", 0); tm != 0 {
		return false, nil
	}
	eps, err := bn.AttrFloat("epsilon", 1e-5)
	if err != nil {
		return false, err
	}
	mOut := w.Shape[0]
	var bias *Tensor
	if conv.Input(2) != "" {
		if bias = param(conv.Input(2)); bias == nil {
			return false, nil
		}
	}
	for _, t := range []*Tensor{scale, beta, mean, variance} {
		if t.Len() != mOut {
			return false, fmt.Errorf("fold %s into %s: %d channels, parameters of %d", bn.Describe(), conv.Describe(), mOut, t.Len())
		}
	}
	nw, nb := w.Clone(), New(mOut)
	per := w.Len() / mOut
	for o := 0; o < mOut; o++ {
		a := float64(scale.Data[o]) / math.Sqrt(float64(variance.Data[o])+float64(eps))
		for i := o * per; i < (o+1)*per; i++ {
			nw.Data[i] = float32(float64(w.Data[i]) * a)
		}
		b0 := 0.0
		if bias != nil {
			b0 = float64(bias.Data[o])
		}
		nb.Data[o] = float32((b0-float64(mean.Data[o]))*a + float64(beta.Data[o]))
	}
	out := bn.Outputs[0]
	wName, bName := uniqueName(g, out+".folded_weight"), uniqueName(g, out+".folded_bias")
	g.Initializers = append(g.Initializers,
		&Initializer{Name: wName, DType: Float, Tensor: nw},
		&Initializer{Name: bName, DType: Float, Tensor: nb})
	conv.Inputs = []string{conv.Input(0), wName, bName}
	conv.Outputs[0] = out
	return true, nil
}

func isGraphOutput(g *Graph, name string) bool {
	for _, o := range g.Outputs {
		if o.Name == name {
			return true
		}
	}
	return false
}

// uniqueName returns base, or base with a numeric suffix, unused in g.
func uniqueName(g *Graph, base string) string {
	used := func(s string) bool {
		if g.Initializer(s) != nil || g.hasInput(s) {
			return true
		}
		return g.Producer(s) != nil
	}
	name := base
	for i := 2; used(name); i++ {
		name = fmt.Sprintf("%s_%d", base, i)
	}
	return name
}

// pruneUnused drops initializers, and value information, that no node or
// output refers to any more.
func pruneUnused(g *Graph) {
	refs := map[string]bool{}
	for _, n := range g.Nodes {
		for _, s := range n.Inputs {
			refs[s] = true
		}
		for _, s := range n.Outputs {
			refs[s] = true
		}
	}
	for _, o := range g.Outputs {
		refs[o.Name] = true
	}
	var inits []*Initializer
	dropped := map[string]bool{}
	for _, in := range g.Initializers {
		if refs[in.Name] {
			inits = append(inits, in)
		} else {
			dropped[in.Name] = true
		}
	}
	g.Initializers = inits
	var inputs []*ValueInfo
	for _, v := range g.Inputs {
		if !dropped[v.Name] { // real inputs stay even when unused
			inputs = append(inputs, v)
		}
	}
	g.Inputs = inputs
	var vis []*ValueInfo
	for _, v := range g.ValueInfo {
		if refs[v.Name] {
			vis = append(vis, v)
		}
	}
	g.ValueInfo = vis
}
