package exec

import (
	"fmt"

	"brightfold/internal/onnx"
)

func init() {
	register("Add", func(c *buildCtx) (kernel, error) { return binaryOp(c, opAdd) })
	register("Sub", func(c *buildCtx) (kernel, error) { return binaryOp(c, opSub) })
	register("Mul", func(c *buildCtx) (kernel, error) { return binaryOp(c, opMul) })
	register("Div", func(c *buildCtx) (kernel, error) { return binaryOp(c, opDiv) })
}

type binKind int

const (
	opAdd binKind = iota
	opSub
	opMul
	opDiv
)

// binaryOp builds Add, Sub, Mul or Div with multidirectional (numpy)
// broadcasting (ONNX Broadcasting.md); before opset 7 the legacy broadcast
// attribute form is refused unless the shapes already agree.
func binaryOp(c *buildCtx, kind binKind) (kernel, error) {
	if c.opset < 7 && c.attrs.int("broadcast", 0) != 0 {
		return nil, c.unsupported("legacy broadcast attribute (opset < 7)")
	}
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) { return binaryForward(kind, in) },
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) { return binaryBackward(kind, in, gout[0]) },
	}, nil
}

// broadcastShape returns the broadcast result shape of a and b.
func broadcastShape(a, b []int) ([]int, error) {
	r := max(len(a), len(b))
	out := make([]int, r)
	for i := 0; i < r; i++ {
		da, db := dimFromEnd(a, r-1-i), dimFromEnd(b, r-1-i)
		switch {
		case da == db:
			out[i] = da
		case da == 1:
			out[i] = db
		case db == 1:
			out[i] = da
		default:
			return nil, fmt.Errorf("shapes %v and %v do not broadcast", a, b)
		}
	}
	return out, nil
}

// dimFromEnd returns dim k counted from the end (0 = last), 1 beyond rank.
func dimFromEnd(s []int, k int) int {
	if k >= len(s) {
		return 1
	}
	return s[len(s)-1-k]
}

// broadcastIndex returns, for each element of the output shape, the index
// of the element of a tensor of shape s that broadcasts to it.
func broadcastIndex(s, out []int) []int {
	r := len(out)
	src := make([]int, r) // source stride per output axis (0 when broadcast)
	acc := 1
	for i := r - 1; i >= 0; i-- {
		d := dimFromEnd(s, r-1-i)
		if d != 1 {
			src[i] = acc
		}
		acc *= d
	}
	return stridedIndex(out, src)
}

// stridedIndex enumerates the row-major positions of shape out and returns,
// for each, the source offset sum_a pos[a]*src[a].
func stridedIndex(out, src []int) []int {
	r := len(out)
	idx := make([]int, onnx.Numel(out))
	pos := make([]int, r)
	cur := 0
	for i := range idx {
		idx[i] = cur
		for ax := r - 1; ax >= 0; ax-- {
			pos[ax]++
			cur += src[ax]
			if pos[ax] < out[ax] {
				break
			}
			cur -= src[ax] * pos[ax]
			pos[ax] = 0
		}
	}
	return idx
}

func binaryForward(kind binKind, in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	a, err := anyIn(in, 0)
	if err != nil {
		return nil, err
	}
	b, err := anyIn(in, 1)
	if err != nil {
		return nil, err
	}
	if a.IsFloat() != b.IsFloat() {
		return nil, fmt.Errorf("operands are %v and %v", a.DType, b.DType)
	}
	shape, err := broadcastShape(a.Shape, b.Shape)
	if err != nil {
		return nil, err
	}
	if err := checkAlloc(shape, binaryBytes(a, b, shape)); err != nil {
		return nil, err
	}
	if !a.IsFloat() {
		return []*onnx.Tensor{intBinary(kind, a, b, shape)}, nil
	}
	out := onnx.New(shape...)
	if onnx.SameShape(a.Shape, shape) && onnx.SameShape(b.Shape, shape) {
		floatBinarySame(kind, a.Data, b.Data, out.Data)
		return []*onnx.Tensor{out}, nil
	}
	ia, ib := broadcastIndex(a.Shape, shape), broadcastIndex(b.Shape, shape)
	for i := range out.Data {
		out.Data[i] = apply(kind, a.Data[ia[i]], b.Data[ib[i]])
	}
	return []*onnx.Tensor{out}, nil
}

func floatBinarySame(kind binKind, a, b, out []float32) {
	out = out[:len(a)]
	b = b[:len(a)]
	switch kind {
	case opAdd:
		for i := range a {
			out[i] = a[i] + b[i]
		}
	case opSub:
		for i := range a {
			out[i] = a[i] - b[i]
		}
	case opMul:
		for i := range a {
			out[i] = a[i] * b[i]
		}
	default:
		for i := range a {
			out[i] = a[i] / b[i]
		}
	}
}

func apply(kind binKind, x, y float32) float32 {
	switch kind {
	case opAdd:
		return x + y
	case opSub:
		return x - y
	case opMul:
		return x * y
	}
	return x / y
}

func intBinary(kind binKind, a, b *onnx.Tensor, shape []int) *onnx.Tensor {
	ia, ib := broadcastIndex(a.Shape, shape), broadcastIndex(b.Shape, shape)
	out := &onnx.Tensor{Shape: shape, Ints: make([]int64, len(ia)), DType: a.DType}
	for i := range out.Ints {
		x, y := a.Ints[ia[i]], b.Ints[ib[i]]
		switch kind {
		case opAdd:
			out.Ints[i] = x + y
		case opSub:
			out.Ints[i] = x - y
		case opMul:
			out.Ints[i] = x * y
		default:
			if y != 0 {
				out.Ints[i] = x / y
			}
		}
		out.Ints[i] = onnx.NormaliseInt(a.DType, out.Ints[i])
	}
	return out
}

// binaryBackward returns the gradients of both operands, summed over the
// broadcast axes.
func binaryBackward(kind binKind, in []*onnx.Tensor, g *onnx.Tensor) ([]*onnx.Tensor, error) {
	a, b := in[0], in[1]
	if !a.IsFloat() {
		return []*onnx.Tensor{nil, nil}, nil
	}
	shape := g.Shape
	n := len(g.Data)
	same := onnx.SameShape(a.Shape, shape) && onnx.SameShape(b.Shape, shape)
	var ia, ib []int
	if !same {
		ia, ib = broadcastIndex(a.Shape, shape), broadcastIndex(b.Shape, shape)
	}
	at := func(t *onnx.Tensor, idx []int, i int) float32 {
		if idx == nil {
			return t.Data[i]
		}
		return t.Data[idx[i]]
	}
	ga, gb := onnx.New(a.Shape...), onnx.New(b.Shape...)
	for i := 0; i < n; i++ {
		var da, db float32
		gi := g.Data[i]
		switch kind {
		case opAdd:
			da, db = gi, gi
		case opSub:
			da, db = gi, -gi
		case opMul:
			da, db = gi*at(b, ib, i), gi*at(a, ia, i)
		default:
			y := at(b, ib, i)
			da = gi / y
			db = -gi * at(a, ia, i) / (y * y)
		}
		if same {
			ga.Data[i] += da
			gb.Data[i] += db
		} else {
			ga.Data[ia[i]] += da
			gb.Data[ib[i]] += db
		}
	}
	return []*onnx.Tensor{ga, gb}, nil
}

// binaryBytes is the memory per output element of a binary operator: the
// element, and two index tables unless both operands already have the
// output's shape (floats only; integers always broadcast through them).
func binaryBytes(a, b *onnx.Tensor, shape []int) int64 {
	if !a.IsFloat() {
		return 8 + 16
	}
	if onnx.SameShape(a.Shape, shape) && onnx.SameShape(b.Shape, shape) {
		return 4
	}
	return 4 + 16
}
