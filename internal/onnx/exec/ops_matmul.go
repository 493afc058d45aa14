package exec

import (
	"fmt"

	"brightfold/internal/onnx"
)

func init() {
	register("Gemm", buildGemm)
	register("MatMul", buildMatMul)
}

// gemmKernel is ONNX Gemm: Y = alpha·A'·B' + beta·C with A' = A or Aᵀ
// (transA) and B' = B or Bᵀ (transB); C broadcasts to (M, N).
type gemmKernel struct {
	alpha, beta    float32
	transA, transB bool
	workers        int
}

func buildGemm(c *buildCtx) (kernel, error) {
	return &gemmKernel{
		alpha:   c.attrs.float("alpha", 1),
		beta:    c.attrs.float("beta", 1),
		transA:  c.attrs.int("transA", 0) != 0,
		transB:  c.attrs.int("transB", 0) != 0,
		workers: c.workers,
	}, nil
}

// views returns A' and B' and the sizes M, K, N.
func (g *gemmKernel) views(a, b *onnx.Tensor) (mat, mat, int, int, int, error) {
	if len(a.Shape) != 2 || len(b.Shape) != 2 {
		return mat{}, mat{}, 0, 0, 0, fmt.Errorf("A %v and B %v must be matrices", a.Shape, b.Shape)
	}
	av, bv := rowMajor(a.Data, a.Shape[1]), rowMajor(b.Data, b.Shape[1])
	m, k := a.Shape[0], a.Shape[1]
	if g.transA {
		av, m, k = av.t(), k, m
	}
	kb, n := b.Shape[0], b.Shape[1]
	if g.transB {
		bv, kb, n = bv.t(), n, kb
	}
	if kb != k {
		return mat{}, mat{}, 0, 0, 0, fmt.Errorf("A' is %d×%d but B' is %d×%d", m, k, kb, n)
	}
	return av, bv, m, k, n, nil
}

func (g *gemmKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	a, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	b, err := floatIn(in, 1)
	if err != nil {
		return nil, err
	}
	av, bv, m, k, n, err := g.views(a, b)
	if err != nil {
		return nil, err
	}
	if err := checkAlloc([]int{m, n}, 4); err != nil {
		return nil, err
	}
	y := onnx.New(m, n)
	gemmParallel(g.workers, m, n, k, av, bv, y.Data, n, false)
	if g.alpha != 1 {
		for i := range y.Data {
			y.Data[i] *= g.alpha
		}
	}
	if optional(in, 2) && g.beta != 0 {
		cT, err := floatIn(in, 2)
		if err != nil {
			return nil, err
		}
		if bs, err := broadcastShape(cT.Shape, y.Shape); err != nil || !onnx.SameShape(bs, y.Shape) {
			return nil, fmt.Errorf("C %v does not broadcast to %v", cT.Shape, y.Shape)
		}
		idx := broadcastIndex(cT.Shape, y.Shape)
		for i := range y.Data {
			y.Data[i] += g.beta * cT.Data[idx[i]]
		}
	}
	return []*onnx.Tensor{y}, nil
}

func (g *gemmKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	a, b, gy := in[0], in[1], gout[0]
	av, bv, m, k, n, err := g.views(a, b)
	if err != nil {
		return nil, err
	}
	grads := make([]*onnx.Tensor, len(in))
	dy := rowMajor(gy.Data, n)
	// dA' = alpha·dY·B'ᵀ (m×k); stored transposed when transA.
	ga := onnx.New(a.Shape...)
	if g.transA {
		gemmParallel(g.workers, k, m, n, bv, dy.t(), ga.Data, m, false)
	} else {
		gemmParallel(g.workers, m, k, n, dy, bv.t(), ga.Data, k, false)
	}
	// dB' = alpha·A'ᵀ·dY (k×n); stored transposed when transB.
	gb := onnx.New(b.Shape...)
	if g.transB {
		gemmParallel(g.workers, n, k, m, dy.t(), av, gb.Data, k, false)
	} else {
		gemmParallel(g.workers, k, n, m, av.t(), dy, gb.Data, n, false)
	}
	scale(ga.Data, g.alpha)
	scale(gb.Data, g.alpha)
	grads[0], grads[1] = ga, gb
	if optional(in, 2) && in[2].IsFloat() {
		gc := onnx.New(in[2].Shape...)
		if g.beta != 0 {
			idx := broadcastIndex(in[2].Shape, gy.Shape)
			for i, v := range gy.Data {
				gc.Data[idx[i]] += g.beta * v
			}
		}
		grads[2] = gc
	}
	return grads, nil
}

func scale(d []float32, s float32) {
	if s == 1 {
		return
	}
	for i := range d {
		d[i] *= s
	}
}

// matmulKernel is ONNX MatMul with numpy semantics: 1-D operands are
// promoted, batch dimensions broadcast.
type matmulKernel struct{ workers int }

func buildMatMul(c *buildCtx) (kernel, error) { return &matmulKernel{workers: c.workers}, nil }

// matmulPlan describes one MatMul: the batch shape and, per batch entry,
// the offsets of the A and B matrices.
type matmulPlan struct {
	m, k, n    int
	outShape   []int
	aOff, bOff []int
}

func planMatMul(a, b []int) (*matmulPlan, error) {
	if len(a) == 0 || len(b) == 0 {
		return nil, fmt.Errorf("MatMul of a scalar")
	}
	as, bs := append([]int{}, a...), append([]int{}, b...)
	if len(as) == 1 {
		as = []int{1, as[0]}
	}
	if len(bs) == 1 {
		bs = []int{bs[0], 1}
	}
	p := &matmulPlan{m: as[len(as)-2], k: as[len(as)-1], n: bs[len(bs)-1]}
	if bs[len(bs)-2] != p.k {
		return nil, fmt.Errorf("shapes %v and %v: inner dimensions differ", a, b)
	}
	batch, err := broadcastShape(as[:len(as)-2], bs[:len(bs)-2])
	if err != nil {
		return nil, err
	}
	ai := broadcastIndex(as[:len(as)-2], batch)
	bi := broadcastIndex(bs[:len(bs)-2], batch)
	p.aOff, p.bOff = make([]int, len(ai)), make([]int, len(bi))
	for i := range ai {
		p.aOff[i], p.bOff[i] = ai[i]*p.m*p.k, bi[i]*p.k*p.n
	}
	p.outShape = append([]int{}, batch...)
	if len(a) > 1 {
		p.outShape = append(p.outShape, p.m)
	}
	if len(b) > 1 {
		p.outShape = append(p.outShape, p.n)
	}
	return p, nil
}

func (mk *matmulKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	a, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	b, err := floatIn(in, 1)
	if err != nil {
		return nil, err
	}
	p, err := planMatMul(a.Shape, b.Shape)
	if err != nil {
		return nil, err
	}
	if err := checkAlloc(p.outShape, 4); err != nil {
		return nil, err
	}
	y := onnx.New(p.outShape...)
	mn := p.m * p.n
	for i := range p.aOff {
		gemmParallel(mk.workers, p.m, p.n, p.k, rowMajor(a.Data[p.aOff[i]:], p.k),
			rowMajor(b.Data[p.bOff[i]:], p.n), y.Data[i*mn:], p.n, false)
	}
	return []*onnx.Tensor{y}, nil
}

func (mk *matmulKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	a, b, gy := in[0], in[1], gout[0]
	p, err := planMatMul(a.Shape, b.Shape)
	if err != nil {
		return nil, err
	}
	ga, gb := onnx.New(a.Shape...), onnx.New(b.Shape...)
	mn := p.m * p.n
	for i := range p.aOff {
		dy := rowMajor(gy.Data[i*mn:], p.n)
		// dA += dY·Bᵀ, dB += Aᵀ·dY, accumulating over broadcast batches.
		gemm(p.m, p.k, p.n, dy, rowMajor(b.Data[p.bOff[i]:], p.n).t(), ga.Data[p.aOff[i]:], p.k, true)
		gemm(p.k, p.n, p.m, rowMajor(a.Data[p.aOff[i]:], p.k).t(), dy, gb.Data[p.bOff[i]:], p.n, true)
	}
	return []*onnx.Tensor{ga, gb}, nil
}
