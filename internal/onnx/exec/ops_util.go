package exec

import (
	"fmt"

	"brightfold/internal/onnx"
	"brightfold/internal/parallel"
)

// funcKernel adapts two functions to the kernel interface; bwd nil means the
// op passes no gradient to any input.
type funcKernel struct {
	fwd func(in []*onnx.Tensor) ([]*onnx.Tensor, error)
	bwd func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error)
}

// needAll asks for every input's gradient.
func needAll(n int) []bool {
	need := make([]bool, n)
	for i := range need {
		need[i] = true
	}
	return need
}

func (k funcKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) { return k.fwd(in) }

func (k funcKernel) backward(in, out, gout []*onnx.Tensor, _ []bool) ([]*onnx.Tensor, error) {
	if k.bwd == nil {
		return make([]*onnx.Tensor, len(in)), nil
	}
	return k.bwd(in, out, gout)
}

// register adds an op constructor; called from init functions only.
func register(op string, b func(c *buildCtx) (kernel, error)) { opBuilders[op] = b }

// floatIn returns input i, checking that it is present and float.
func floatIn(in []*onnx.Tensor, i int) (*onnx.Tensor, error) {
	if i >= len(in) || in[i] == nil {
		return nil, fmt.Errorf("input %d missing", i)
	}
	if !in[i].IsFloat() {
		return nil, fmt.Errorf("input %d is %v, want float32", i, in[i].DType)
	}
	if len(in[i].Data) != in[i].Len() {
		return nil, fmt.Errorf("input %d: %d values for shape %v", i, len(in[i].Data), in[i].Shape)
	}
	return in[i], nil
}

// anyIn returns input i (float or integer), checking that it is present.
func anyIn(in []*onnx.Tensor, i int) (*onnx.Tensor, error) {
	if i >= len(in) || in[i] == nil {
		return nil, fmt.Errorf("input %d missing", i)
	}
	if err := in[i].Check(); err != nil {
		return nil, fmt.Errorf("input %d: %w", i, err)
	}
	return in[i], nil
}

// intsIn returns input i as int64 values (a shape, axes or indices tensor).
func intsIn(in []*onnx.Tensor, i int) ([]int64, error) {
	t, err := anyIn(in, i)
	if err != nil {
		return nil, err
	}
	if t.IsFloat() {
		return nil, fmt.Errorf("input %d is float32, want an integer tensor", i)
	}
	return t.Ints, nil
}

// optional reports whether input i is present.
func optional(in []*onnx.Tensor, i int) bool { return i < len(in) && in[i] != nil }

// normAxis resolves a possibly negative axis against rank r.
func normAxis(axis int64, r int) (int, error) {
	a := int(axis)
	if a < 0 {
		a += r
	}
	if a < 0 || a >= r {
		return 0, fmt.Errorf("axis %d out of range for rank %d", axis, r)
	}
	return a, nil
}

// strides returns row-major element strides of shape.
func strides(shape []int) []int {
	s := make([]int, len(shape))
	acc := 1
	for i := len(shape) - 1; i >= 0; i-- {
		s[i] = acc
		acc *= shape[i]
	}
	return s
}

// withShape returns a tensor sharing t's elements under another shape.
func withShape(t *onnx.Tensor, shape []int) *onnx.Tensor {
	return &onnx.Tensor{Shape: append([]int{}, shape...), Data: t.Data, Ints: t.Ints, DType: t.DType}
}

// gatherElems builds a tensor of the given shape whose element i is src's
// element idx[i] (works for float and integer tensors).
func gatherElems(src *onnx.Tensor, idx []int, shape []int) *onnx.Tensor {
	out := &onnx.Tensor{Shape: append([]int{}, shape...), DType: src.DType}
	if src.IsFloat() {
		out.Data = make([]float32, len(idx))
		for i, j := range idx {
			out.Data[i] = src.Data[j]
		}
	} else {
		out.Ints = make([]int64, len(idx))
		for i, j := range idx {
			out.Ints[i] = src.Ints[j]
		}
	}
	return out
}

// scatterAdd is the adjoint of gatherElems for float tensors.
func scatterAdd(g *onnx.Tensor, idx []int, shape []int) *onnx.Tensor {
	out := onnx.New(shape...)
	for i, j := range idx {
		out.Data[j] += g.Data[i]
	}
	return out
}

// chunks splits [0, n) into ranges of at least 1<<16 elements and runs
// fn(lo, hi) on them on up to workers goroutines.
func chunks(workers, n int, fn func(lo, hi int)) {
	const minChunk = 1 << 16
	parts := min(workers, max(1, n/minChunk))
	per := (n + parts - 1) / max(parts, 1)
	parallel.Each(parts, parts, func(_, i int) {
		lo := i * per
		if lo < n {
			fn(lo, min(n, lo+per))
		}
	})
}
