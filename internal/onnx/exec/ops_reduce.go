package exec

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
)

func init() {
	register("ReduceSum", func(c *buildCtx) (kernel, error) { return buildReduce(c, reduceSum) })
	register("ReduceMean", func(c *buildCtx) (kernel, error) { return buildReduce(c, reduceMean) })
	register("ReduceMax", func(c *buildCtx) (kernel, error) { return buildReduce(c, reduceMax) })
}

type reduceKind int

const (
	reduceSum reduceKind = iota
	reduceMean
	reduceMax
)

// reduceKernel is ONNX ReduceSum, ReduceMean or ReduceMax over axes (an
// attribute, or for ReduceSum from opset 13 an optional input), keepdims
// default 1; empty axes reduce everything unless noop_with_empty_axes.
type reduceKernel struct {
	kind      reduceKind
	attrAxes  []int64
	axesInput bool
	keepDims  bool
	noopEmpty bool
}

func buildReduce(c *buildCtx, kind reduceKind) (kernel, error) {
	k := &reduceKernel{
		kind:      kind,
		attrAxes:  c.attrs.ints("axes", nil),
		axesInput: kind == reduceSum && c.opset >= 13 || c.opset >= 18,
		keepDims:  c.attrs.int("keepdims", 1) != 0,
		noopEmpty: c.attrs.int("noop_with_empty_axes", 0) != 0,
	}
	return k, nil
}

// reducePlan maps each input element to its output element.
type reducePlan struct {
	outShape []int
	index    []int // output index of each input element
	counts   []int // input elements per output element
	noop     bool
}

func (k *reduceKernel) plan(in []*onnx.Tensor) (*reducePlan, error) {
	x := in[0]
	axes := k.attrAxes
	if k.axesInput {
		axes = nil
		if optional(in, 1) {
			var err error
			if axes, err = intsIn(in, 1); err != nil {
				return nil, fmt.Errorf("axes: %w", err)
			}
		}
	}
	r := len(x.Shape)
	p := &reducePlan{}
	if len(axes) == 0 && k.noopEmpty {
		p.noop = true
		return p, nil
	}
	red := make([]bool, r)
	for _, a := range axes {
		ax, err := normAxis(a, r)
		if err != nil {
			return nil, err
		}
		red[ax] = true
	}
	if len(axes) == 0 {
		for i := range red {
			red[i] = true
		}
	}
	keep := make([]int, r) // output shape with reduced axes as 1
	src := make([]int, r)  // output stride of each input axis (0 when reduced)
	acc := 1
	for i := r - 1; i >= 0; i-- {
		keep[i] = x.Shape[i]
		if red[i] {
			keep[i] = 1
		} else {
			src[i] = acc
		}
		acc *= keep[i]
	}
	p.index = stridedIndex(x.Shape, src)
	p.counts = make([]int, onnx.Numel(keep))
	for _, o := range p.index {
		p.counts[o]++
	}
	for i, d := range keep {
		if !red[i] || k.keepDims {
			p.outShape = append(p.outShape, d)
		}
	}
	return p, nil
}

func (k *reduceKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	x, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	p, err := k.plan(in)
	if err != nil {
		return nil, err
	}
	if p.noop {
		return []*onnx.Tensor{x}, nil
	}
	y := onnx.New(p.outShape...)
	if k.kind == reduceMax {
		for i := range y.Data {
			y.Data[i] = float32(math.Inf(-1))
		}
		for i, o := range p.index {
			y.Data[o] = max(y.Data[o], x.Data[i])
		}
		return []*onnx.Tensor{y}, nil
	}
	acc := make([]float64, len(y.Data))
	for i, o := range p.index {
		acc[o] += float64(x.Data[i])
	}
	for o, v := range acc {
		if k.kind == reduceMean && p.counts[o] > 0 {
			v /= float64(p.counts[o])
		}
		y.Data[o] = float32(v)
	}
	return []*onnx.Tensor{y}, nil
}

func (k *reduceKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	p, err := k.plan(in)
	if err != nil {
		return nil, err
	}
	grads := make([]*onnx.Tensor, len(in))
	if p.noop {
		grads[0] = gout[0]
		return grads, nil
	}
	x, y, g := in[0], out[0], gout[0]
	gx := onnx.New(x.Shape...)
	taken := make([]bool, len(y.Data)) // ReduceMax routes to the first maximum
	for i, o := range p.index {
		switch k.kind {
		case reduceSum:
			gx.Data[i] = g.Data[o]
		case reduceMean:
			gx.Data[i] = g.Data[o] / float32(p.counts[o])
		default:
			if !taken[o] && x.Data[i] == y.Data[o] {
				gx.Data[i], taken[o] = g.Data[o], true
			}
		}
	}
	grads[0] = gx
	return grads, nil
}
