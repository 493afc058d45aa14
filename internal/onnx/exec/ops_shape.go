package exec

import (
	"fmt"
	"sort"

	"brightfold/internal/onnx"
)

func init() {
	register("Flatten", buildFlatten)
	register("Reshape", buildReshape)
	register("Transpose", buildTranspose)
	register("Squeeze", func(c *buildCtx) (kernel, error) { return buildSqueeze(c, false) })
	register("Unsqueeze", func(c *buildCtx) (kernel, error) { return buildSqueeze(c, true) })
	register("Concat", buildConcat)
	register("Shape", buildShape)
	register("Gather", buildGather)
	register("Cast", buildCast)
	register("Constant", buildConstant)
}

// reshapeKernel gives its input a new shape computed from the input (and
// other inputs); the gradient is reshaped back.
func reshapeKernel(shapeOf func(in []*onnx.Tensor) ([]int, error)) kernel {
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := anyIn(in, 0)
			if err != nil {
				return nil, err
			}
			s, err := shapeOf(in)
			if err != nil {
				return nil, err
			}
			if onnx.Numel(s) != x.Len() {
				return nil, fmt.Errorf("cannot reshape %v to %v", x.Shape, s)
			}
			return []*onnx.Tensor{withShape(x, s)}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			g := make([]*onnx.Tensor, len(in))
			g[0] = withShape(gout[0], in[0].Shape)
			return g, nil
		},
	}
}

// buildFlatten: ONNX Flatten, output (prod d[:axis], prod d[axis:]).
func buildFlatten(c *buildCtx) (kernel, error) {
	axis := c.attrs.int("axis", 1)
	return reshapeKernel(func(in []*onnx.Tensor) ([]int, error) {
		r := len(in[0].Shape)
		a := int(axis)
		if a < 0 {
			a += r
		}
		if a < 0 || a > r {
			return nil, fmt.Errorf("axis %d out of range for rank %d", axis, r)
		}
		return []int{onnx.Numel(in[0].Shape[:a]), onnx.Numel(in[0].Shape[a:])}, nil
	}), nil
}

// buildReshape: ONNX Reshape (shape attribute before opset 5, shape input
// after; 0 copies the input dimension unless allowzero=1, -1 is inferred).
func buildReshape(c *buildCtx) (kernel, error) {
	allowZero := c.attrs.int("allowzero", 0) != 0
	attrShape := c.attrs.ints("shape", nil)
	legacy := c.opset < 5
	return reshapeKernel(func(in []*onnx.Tensor) ([]int, error) {
		spec := attrShape
		if !legacy {
			var err error
			if spec, err = intsIn(in, 1); err != nil {
				return nil, fmt.Errorf("shape: %w", err)
			}
		}
		return resolveShape(in[0].Shape, spec, allowZero)
	}), nil
}

func resolveShape(inShape []int, spec []int64, allowZero bool) ([]int, error) {
	out := make([]int, len(spec))
	infer := -1
	known := 1
	for i, d := range spec {
		switch {
		case d == -1:
			if infer >= 0 {
				return nil, fmt.Errorf("shape %v has two -1 entries", spec)
			}
			infer = i
			continue
		case d == 0 && !allowZero:
			if i >= len(inShape) {
				return nil, fmt.Errorf("shape %v copies dimension %d of a rank-%d input", spec, i, len(inShape))
			}
			out[i] = inShape[i]
		case d < 0 || d > onnx.MaxElements:
			return nil, fmt.Errorf("invalid dimension %d in shape %v", d, spec)
		default:
			out[i] = int(d)
		}
		if out[i] != 0 && known > onnx.MaxElements/out[i] {
			return nil, fmt.Errorf("shape %v too large", spec)
		}
		known *= out[i]
	}
	total := onnx.Numel(inShape)
	if infer >= 0 {
		if known == 0 || total%known != 0 {
			return nil, fmt.Errorf("cannot infer -1 in shape %v for %d elements", spec, total)
		}
		out[infer] = total / known
	}
	return out, nil
}

// buildTranspose: ONNX Transpose, perm default reverses the axes.
func buildTranspose(c *buildCtx) (kernel, error) {
	perm := c.attrs.ints("perm", nil)
	permOf := func(r int) ([]int, error) {
		p := make([]int, r)
		if perm == nil {
			for i := range p {
				p[i] = r - 1 - i
			}
			return p, nil
		}
		if len(perm) != r {
			return nil, fmt.Errorf("perm %v for rank %d", perm, r)
		}
		seen := make([]bool, r)
		for i, v := range perm {
			if v < 0 || int(v) >= r || seen[v] {
				return nil, fmt.Errorf("perm %v is not a permutation", perm)
			}
			seen[v] = true
			p[i] = int(v)
		}
		return p, nil
	}
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := anyIn(in, 0)
			if err != nil {
				return nil, err
			}
			p, err := permOf(len(x.Shape))
			if err != nil {
				return nil, err
			}
			idx, shape := transposeIndex(x.Shape, p)
			return []*onnx.Tensor{gatherElems(x, idx, shape)}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			p, err := permOf(len(in[0].Shape))
			if err != nil {
				return nil, err
			}
			idx, _ := transposeIndex(in[0].Shape, p)
			return []*onnx.Tensor{scatterAdd(gout[0], idx, in[0].Shape)}, nil
		},
	}, nil
}

// transposeIndex returns the source index of each output element and the
// output shape for permutation p.
func transposeIndex(shape []int, p []int) ([]int, []int) {
	r := len(shape)
	st := strides(shape)
	out := make([]int, r)
	src := make([]int, r)
	for i, a := range p {
		out[i] = shape[a]
		src[i] = st[a]
	}
	return stridedIndex(out, src), out
}

// buildSqueeze builds Squeeze or Unsqueeze; axes are an attribute before
// opset 13 and an input from opset 13.
func buildSqueeze(c *buildCtx, unsq bool) (kernel, error) {
	attrAxes := c.attrs.ints("axes", nil)
	fromInput := c.opset >= 13
	return reshapeKernel(func(in []*onnx.Tensor) ([]int, error) {
		axes := attrAxes
		if fromInput {
			if optional(in, 1) {
				var err error
				if axes, err = intsIn(in, 1); err != nil {
					return nil, fmt.Errorf("axes: %w", err)
				}
			} else {
				axes = nil
			}
		}
		if unsq {
			return unsqueezeShape(in[0].Shape, axes)
		}
		return squeezeShape(in[0].Shape, axes)
	}), nil
}

func squeezeShape(shape []int, axes []int64) ([]int, error) {
	drop := make([]bool, len(shape))
	if len(axes) == 0 {
		for i, d := range shape {
			drop[i] = d == 1
		}
	}
	for _, a := range axes {
		ax, err := normAxis(a, len(shape))
		if err != nil {
			return nil, err
		}
		if shape[ax] != 1 {
			return nil, fmt.Errorf("cannot squeeze axis %d of size %d", a, shape[ax])
		}
		drop[ax] = true
	}
	var out []int
	for i, d := range shape {
		if !drop[i] {
			out = append(out, d)
		}
	}
	return out, nil
}

func unsqueezeShape(shape []int, axes []int64) ([]int, error) {
	r := len(shape) + len(axes)
	ins := make([]bool, r)
	for _, a := range axes {
		ax, err := normAxis(a, r)
		if err != nil {
			return nil, err
		}
		if ins[ax] {
			return nil, fmt.Errorf("axis %d repeated", a)
		}
		ins[ax] = true
	}
	out := make([]int, 0, r)
	j := 0
	for i := 0; i < r; i++ {
		if ins[i] {
			out = append(out, 1)
		} else {
			out = append(out, shape[j])
			j++
		}
	}
	return out, nil
}

// buildConcat: ONNX Concat along axis (negative allowed from opset 11).
func buildConcat(c *buildCtx) (kernel, error) {
	axis := c.attrs.int("axis", 1)
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) { return concat(in, axis) },
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) { return concatBackward(in, gout[0], axis) },
	}, nil
}

func concat(in []*onnx.Tensor, axis int64) ([]*onnx.Tensor, error) {
	if len(in) == 0 {
		return nil, fmt.Errorf("no inputs")
	}
	for i := range in {
		if _, err := anyIn(in, i); err != nil {
			return nil, err
		}
	}
	first := in[0]
	r := len(first.Shape)
	ax, err := normAxis(axis, r)
	if err != nil {
		return nil, err
	}
	shape := append([]int{}, first.Shape...)
	shape[ax] = 0
	for i, t := range in {
		if len(t.Shape) != r || t.IsFloat() != first.IsFloat() {
			return nil, fmt.Errorf("input %d (%v) does not match input 0 (%v)", i, t, first)
		}
		for d := range t.Shape {
			if d != ax && t.Shape[d] != first.Shape[d] {
				return nil, fmt.Errorf("input %d shape %v does not match %v off axis %d", i, t.Shape, first.Shape, ax)
			}
		}
		shape[ax] += t.Shape[ax]
	}
	out := &onnx.Tensor{Shape: shape, DType: first.DType}
	outer, inner := onnx.Numel(shape[:ax]), onnx.Numel(shape[ax+1:])
	if first.IsFloat() {
		out.Data = make([]float32, 0, onnx.Numel(shape))
	} else {
		out.Ints = make([]int64, 0, onnx.Numel(shape))
	}
	for o := 0; o < outer; o++ {
		for _, t := range in {
			blk := t.Shape[ax] * inner
			if first.IsFloat() {
				out.Data = append(out.Data, t.Data[o*blk:(o+1)*blk]...)
			} else {
				out.Ints = append(out.Ints, t.Ints[o*blk:(o+1)*blk]...)
			}
		}
	}
	return []*onnx.Tensor{out}, nil
}

func concatBackward(in []*onnx.Tensor, g *onnx.Tensor, axis int64) ([]*onnx.Tensor, error) {
	grads := make([]*onnx.Tensor, len(in))
	if !in[0].IsFloat() {
		return grads, nil
	}
	ax, err := normAxis(axis, len(g.Shape))
	if err != nil {
		return nil, err
	}
	outer, inner := onnx.Numel(g.Shape[:ax]), onnx.Numel(g.Shape[ax+1:])
	for i, t := range in {
		grads[i] = onnx.New(t.Shape...)
	}
	off := 0
	for o := 0; o < outer; o++ {
		for i, t := range in {
			blk := t.Shape[ax] * inner
			copy(grads[i].Data[o*blk:(o+1)*blk], g.Data[off:off+blk])
			off += blk
		}
	}
	return grads, nil
}

// buildShape: ONNX Shape (start and end attributes from opset 15).
func buildShape(c *buildCtx) (kernel, error) {
	start := c.attrs.int("start", 0)
	endAttr := c.node.Attr("end")
	end := c.attrs.int("end", 0)
	return funcKernel{fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
		x, err := anyIn(in, 0)
		if err != nil {
			return nil, err
		}
		r := int64(len(x.Shape))
		s, e := clampRange(start, r), r
		if endAttr != nil {
			e = clampRange(end, r)
		}
		var v []int64
		for i := s; i < e; i++ {
			v = append(v, int64(x.Shape[i]))
		}
		if v == nil {
			v = []int64{}
		}
		return []*onnx.Tensor{onnx.FromInts(v, len(v))}, nil
	}}, nil
}

// clampRange resolves a negative index and clamps it to [0, r].
func clampRange(i, r int64) int64 {
	if i < 0 {
		i += r
	}
	return min(max(i, 0), r)
}

// buildGather: ONNX Gather along axis; negative indices count from the end.
func buildGather(c *buildCtx) (kernel, error) {
	axis := c.attrs.int("axis", 0)
	index := func(in []*onnx.Tensor) ([]int, []int, error) {
		x, err := anyIn(in, 0)
		if err != nil {
			return nil, nil, err
		}
		ind, err := anyIn(in, 1)
		if err != nil || ind.IsFloat() {
			return nil, nil, fmt.Errorf("indices must be an integer tensor")
		}
		return gatherIndex(x.Shape, ind, axis)
	}
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			idx, shape, err := index(in)
			if err != nil {
				return nil, err
			}
			return []*onnx.Tensor{gatherElems(in[0], idx, shape)}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			if !in[0].IsFloat() {
				return []*onnx.Tensor{nil, nil}, nil
			}
			idx, _, err := index(in)
			if err != nil {
				return nil, err
			}
			return []*onnx.Tensor{scatterAdd(gout[0], idx, in[0].Shape), nil}, nil
		},
	}, nil
}

func gatherIndex(shape []int, ind *onnx.Tensor, axis int64) ([]int, []int, error) {
	ax, err := normAxis(axis, len(shape))
	if err != nil {
		return nil, nil, err
	}
	outer, inner, dim := onnx.Numel(shape[:ax]), onnx.Numel(shape[ax+1:]), shape[ax]
	out := append(append(append([]int{}, shape[:ax]...), ind.Shape...), shape[ax+1:]...)
	// the index table and the gathered elements
	if err := checkAlloc(out, 8+8); err != nil {
		return nil, nil, err
	}
	idx := make([]int, 0, onnx.Numel(out))
	for o := 0; o < outer; o++ {
		for _, k := range ind.Ints {
			if k < 0 {
				k += int64(dim)
			}
			if k < 0 || k >= int64(dim) {
				return nil, nil, fmt.Errorf("index %d out of range for axis of size %d", k, dim)
			}
			base := (o*dim + int(k)) * inner
			for i := 0; i < inner; i++ {
				idx = append(idx, base+i)
			}
		}
	}
	return idx, out, nil
}

// buildCast: ONNX Cast between float32 and the integer/boolean types.
func buildCast(c *buildCtx) (kernel, error) {
	to := onnx.DataType(c.attrs.int("to", int64(onnx.Float)))
	if to != onnx.Float && !to.IsInt() {
		return nil, c.unsupported("Cast to %v", to)
	}
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := anyIn(in, 0)
			if err != nil {
				return nil, err
			}
			return []*onnx.Tensor{castTo(x, to)}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			if in[0].IsFloat() && to == onnx.Float {
				return []*onnx.Tensor{gout[0]}, nil
			}
			return []*onnx.Tensor{nil}, nil
		},
	}, nil
}

func castTo(x *onnx.Tensor, to onnx.DataType) *onnx.Tensor {
	out := &onnx.Tensor{Shape: append([]int{}, x.Shape...), DType: to}
	switch {
	case to == onnx.Float && x.IsFloat():
		out.Data = x.Data
	case to == onnx.Float:
		out.Data = make([]float32, len(x.Ints))
		for i, v := range x.Ints {
			out.Data[i] = float32(v)
		}
	case x.IsFloat():
		out.Ints = make([]int64, len(x.Data))
		for i, v := range x.Data {
			if to == onnx.Bool {
				if v != 0 {
					out.Ints[i] = 1
				}
				continue
			}
			out.Ints[i] = onnx.NormaliseInt(to, int64(v))
		}
	default:
		out.Ints = make([]int64, len(x.Ints))
		for i, v := range x.Ints {
			out.Ints[i] = onnx.NormaliseInt(to, v)
		}
	}
	return out
}

// buildConstant: ONNX Constant with value, or value_float(s)/value_int(s)
// (opset 12).
func buildConstant(c *buildCtx) (kernel, error) {
	var t *onnx.Tensor
	n := c.node
	switch {
	case n.Attr("value") != nil:
		a := n.Attr("value")
		if a.T == nil {
			return nil, c.unsupported("Constant value of an element type the executor does not hold")
		}
		t = a.T
	case n.Attr("value_float") != nil:
		t = onnx.FromData([]float32{c.attrs.float("value_float", 0)})
	case n.Attr("value_floats") != nil:
		v := n.Attr("value_floats").Floats
		t = onnx.FromData(append([]float32{}, v...), len(v))
	case n.Attr("value_int") != nil:
		t = onnx.FromInts([]int64{c.attrs.int("value_int", 0)})
	case n.Attr("value_ints") != nil:
		v := c.attrs.ints("value_ints", nil)
		t = onnx.FromInts(append([]int64{}, v...), len(v))
	default:
		var names []string
		for _, a := range n.Attrs {
			names = append(names, a.Name)
		}
		sort.Strings(names)
		return nil, c.unsupported("Constant with attributes %v", names)
	}
	if err := t.Check(); err != nil {
		return nil, fmt.Errorf("%s: %w", n.Describe(), err)
	}
	return funcKernel{fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) { return []*onnx.Tensor{t}, nil }}, nil
}
