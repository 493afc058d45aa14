package exec

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
	"brightfold/internal/parallel"
)

func init() {
	register("MaxPool", func(c *buildCtx) (kernel, error) { return buildPool(c, true) })
	register("AveragePool", func(c *buildCtx) (kernel, error) { return buildPool(c, false) })
	register("GlobalAveragePool", func(c *buildCtx) (kernel, error) { return &globalPool{}, nil })
	register("GlobalMaxPool", func(c *buildCtx) (kernel, error) { return &globalPool{isMax: true}, nil })
}

// poolKernel is ONNX MaxPool (with the optional Indices output) or
// AveragePool (count_include_pad) over 1 to 3 spatial dimensions.
type poolKernel struct {
	spec         windowSpec
	isMax        bool
	includePad   bool
	storageOrder int64
	workers      int
}

func buildPool(c *buildCtx, isMax bool) (kernel, error) {
	ws, err := readWindowSpec(c, isMax)
	if err != nil {
		return nil, err
	}
	if ws.kernel == nil {
		return nil, fmt.Errorf("%s: kernel_shape missing", c.node.Describe())
	}
	k := &poolKernel{spec: ws, isMax: isMax, workers: c.workers}
	if isMax {
		k.storageOrder = c.attrs.int("storage_order", 0)
	} else {
		k.includePad = c.attrs.int("count_include_pad", 0) != 0
	}
	return k, nil
}

func (k *poolKernel) plan(x *onnx.Tensor) (window, []int, error) {
	if len(x.Shape) < 3 || len(x.Shape) > 5 {
		return window{}, nil, fmt.Errorf("X has shape %v; want (N, C, spatial...) with 1 to 3 spatial axes", x.Shape)
	}
	ks := make([]int, len(k.spec.kernel))
	for i, v := range k.spec.kernel {
		if v < 1 || v > 1<<20 {
			return window{}, nil, fmt.Errorf("kernel_shape %v", k.spec.kernel)
		}
		ks[i] = int(v)
	}
	w, err := k.spec.geometry(x.Shape[2:], ks)
	if err != nil {
		return w, nil, err
	}
	shape := append([]int{x.Shape[0], x.Shape[1]}, w.spatialOut...)
	// the values and, for max pooling, their int64 indices
	return w, shape, checkAlloc(shape, 4+8)
}

// axisTaps describes, for one output coordinate along one axis, the first
// input coordinate of its window, the taps [lo, hi) that land inside the
// input, and how many taps land inside the padded input.
type axisTaps struct{ start, lo, hi, padCount int }

// axisTable precomputes axisTaps for every output coordinate of axis a.
func (w *window) axisTable(a int) []axisTaps {
	tab := make([]axisTaps, w.out[a])
	for o := range tab {
		t := axisTaps{start: o*w.s[a] - w.padLo[a], lo: w.k[a]}
		for k := 0; k < w.k[a]; k++ {
			p := t.start + k*w.d[a]
			if p >= -w.padLo[a] && p < w.in[a]+w.padHi[a] {
				t.padCount++
			}
			if p >= 0 && p < w.in[a] {
				t.lo, t.hi = min(t.lo, k), k+1
			}
		}
		if t.hi == 0 {
			t.lo = 0
		}
		tab[o] = t
	}
	return tab
}

// each calls fn for every output position o of a plane with the input
// offsets (within the plane) of the window's taps that fall inside the
// input, and the tap count a count_include_pad divisor uses.
func (w *window) each(fn func(o int, taps []int, padCount int)) {
	tz, ty, tx := w.axisTable(0), w.axisTable(1), w.axisTable(2)
	taps := make([]int, 0, w.kCount())
	o := 0
	for _, az := range tz {
		for _, ay := range ty {
			for _, ax := range tx {
				taps = taps[:0]
				for kz := az.lo; kz < az.hi; kz++ {
					z := az.start + kz*w.d[0]
					for ky := ay.lo; ky < ay.hi; ky++ {
						row := (z*w.in[1] + ay.start + ky*w.d[1]) * w.in[2]
						for kx := ax.lo; kx < ax.hi; kx++ {
							taps = append(taps, row+ax.start+kx*w.d[2])
						}
					}
				}
				fn(o, taps, az.padCount*ay.padCount*ax.padCount)
				o++
			}
		}
	}
}

func (k *poolKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	if k.isMax && optional(in, 0) && !in[0].IsFloat() {
		// Integer max pooling through float32, exact below 2^24.
		out, err := k.forward([]*onnx.Tensor{castTo(in[0], onnx.Float)})
		if err != nil {
			return nil, err
		}
		out[0] = castTo(out[0], in[0].DType)
		return out, nil
	}
	x, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	w, shape, err := k.plan(x)
	if err != nil {
		return nil, err
	}
	y := onnx.New(shape...)
	var ind *onnx.Tensor
	if k.isMax {
		ind = &onnx.Tensor{Shape: append([]int{}, shape...), Ints: make([]int64, len(y.Data)), DType: onnx.Int64}
	}
	planes := x.Shape[0] * x.Shape[1]
	inP, outP := w.inCount(), w.outCount()
	parallel.Each(planes, k.workers, func(_, pl int) {
		xs, ys := x.Data[pl*inP:(pl+1)*inP], y.Data[pl*outP:(pl+1)*outP]
		w.each(func(o int, taps []int, padCount int) {
			if k.isMax {
				best, arg := argmax(xs, taps)
				ys[o] = best
				ind.Ints[pl*outP+o] = -1 // a window wholly in the padding
				if arg >= 0 {
					ind.Ints[pl*outP+o] = int64(pl*inP + k.storedIndex(&w, arg))
				}
				return
			}
			var s float32
			for _, t := range taps {
				s += xs[t]
			}
			div := len(taps)
			if k.includePad {
				div = padCount
			}
			if div > 0 {
				ys[o] = s / float32(div)
			}
		})
	})
	if k.isMax {
		return []*onnx.Tensor{y, ind}, nil
	}
	return []*onnx.Tensor{y}, nil
}

// argmax returns the largest of xs[t] for t in taps and the first t that
// holds it (-Inf and -1 when taps is empty).
func argmax(xs []float32, taps []int) (float32, int) {
	best, arg := float32(math.Inf(-1)), -1
	for _, t := range taps {
		if v := xs[t]; v > best || arg < 0 {
			best, arg = v, t
		}
	}
	return best, arg
}

// storedIndex converts a row-major plane offset to the storage order the
// MaxPool Indices output uses (storage_order 1 is column-major).
func (k *poolKernel) storedIndex(w *window, off int) int {
	if k.storageOrder == 0 {
		return off
	}
	z, y, x := off/(w.in[1]*w.in[2]), off/w.in[2]%w.in[1], off%w.in[2]
	return (x*w.in[1]+y)*w.in[0] + z
}

func (k *poolKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	x := in[0]
	if k.isMax && k.storageOrder == 0 && len(out) > 1 && out[1] != nil && len(out[1].Ints) == len(gout[0].Data) {
		// The forward pass's Indices route each gradient to its winner.
		gx := onnx.New(x.Shape...)
		for i, idx := range out[1].Ints {
			if idx >= 0 && int(idx) < len(gx.Data) {
				gx.Data[idx] += gout[0].Data[i]
			}
		}
		return []*onnx.Tensor{gx}, nil
	}
	w, _, err := k.plan(x)
	if err != nil {
		return nil, err
	}
	g := gout[0]
	gx := onnx.New(x.Shape...)
	planes := x.Shape[0] * x.Shape[1]
	inP, outP := w.inCount(), w.outCount()
	parallel.Each(planes, k.workers, func(_, pl int) {
		xs, gs, gxs := x.Data[pl*inP:(pl+1)*inP], g.Data[pl*outP:(pl+1)*outP], gx.Data[pl*inP:(pl+1)*inP]
		w.each(func(o int, taps []int, padCount int) {
			if k.isMax {
				if _, arg := argmax(xs, taps); arg >= 0 {
					gxs[arg] += gs[o]
				}
				return
			}
			div := len(taps)
			if k.includePad {
				div = padCount
			}
			if div == 0 {
				return
			}
			v := gs[o] / float32(div)
			for _, t := range taps {
				gxs[t] += v
			}
		})
	})
	return []*onnx.Tensor{gx}, nil
}

// globalPool is ONNX GlobalAveragePool or GlobalMaxPool: one value per
// channel, spatial dimensions kept as size 1.
type globalPool struct{ isMax bool }

func (k *globalPool) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	x, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	if len(x.Shape) < 2 {
		return nil, fmt.Errorf("X has shape %v, want (N, C, ...)", x.Shape)
	}
	shape := []int{x.Shape[0], x.Shape[1]}
	for range x.Shape[2:] {
		shape = append(shape, 1)
	}
	y := onnx.New(shape...)
	inner := onnx.Numel(x.Shape[2:])
	for p := range y.Data {
		seg := x.Data[p*inner : (p+1)*inner]
		if k.isMax {
			m := float32(math.Inf(-1))
			for _, v := range seg {
				m = max(m, v)
			}
			y.Data[p] = m
			continue
		}
		var s float64
		for _, v := range seg {
			s += float64(v)
		}
		if inner > 0 {
			y.Data[p] = float32(s / float64(inner))
		}
	}
	return []*onnx.Tensor{y}, nil
}

func (k *globalPool) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	x, g := in[0], gout[0]
	gx := onnx.New(x.Shape...)
	inner := onnx.Numel(x.Shape[2:])
	for p, gv := range g.Data {
		seg := x.Data[p*inner : (p+1)*inner]
		dst := gx.Data[p*inner : (p+1)*inner]
		if k.isMax {
			arg := 0
			for i, v := range seg {
				if v > seg[arg] {
					arg = i
				}
			}
			if inner > 0 {
				dst[arg] = gv
			}
			continue
		}
		v := gv / float32(inner)
		for i := range dst {
			dst[i] = v
		}
	}
	return []*onnx.Tensor{gx}, nil
}
