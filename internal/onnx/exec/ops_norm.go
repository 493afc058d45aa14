package exec

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
	"brightfold/internal/parallel"
)

func init() {
	register("BatchNormalization", buildBatchNorm)
	register("Softmax", buildSoftmax)
}

// batchNormKernel is ONNX BatchNormalization in inference mode:
// Y = scale·(X − mean)/sqrt(var + epsilon) + B per channel (axis 1).
type batchNormKernel struct {
	eps     float32
	workers int
}

func buildBatchNorm(c *buildCtx) (kernel, error) {
	if c.attrs.int("training_mode", 0) != 0 {
		return nil, c.unsupported("BatchNormalization training_mode=1 (inference only)")
	}
	if c.opset < 9 && c.attrs.int("spatial", 1) == 0 {
		return nil, c.unsupported("BatchNormalization spatial=0")
	}
	if c.opset < 7 && c.attrs.int("is_test", 0) == 0 {
		return nil, c.unsupported("BatchNormalization is_test=0 (training mode)")
	}
	if len(c.node.Outputs) > 1 {
		return nil, c.unsupported("BatchNormalization with %d outputs (training-mode statistics)", len(c.node.Outputs))
	}
	return &batchNormKernel{eps: c.attrs.float("epsilon", 1e-5), workers: c.workers}, nil
}

// channelParams returns the per-channel multiplier a = scale/sqrt(var+eps)
// and the inputs, after checking shapes.
func (k *batchNormKernel) channelParams(in []*onnx.Tensor) (x *onnx.Tensor, a []float64, err error) {
	if x, err = floatIn(in, 0); err != nil {
		return
	}
	if len(x.Shape) < 2 {
		return nil, nil, fmt.Errorf("X has shape %v, want (N, C, ...)", x.Shape)
	}
	ch := x.Shape[1]
	for i := 1; i <= 4; i++ {
		t, e := floatIn(in, i)
		if e != nil {
			return nil, nil, e
		}
		if t.Len() != ch {
			return nil, nil, fmt.Errorf("input %d has shape %v, want (%d)", i, t.Shape, ch)
		}
	}
	a = make([]float64, ch)
	for c := range a {
		a[c] = float64(in[1].Data[c]) / math.Sqrt(float64(in[4].Data[c])+float64(k.eps))
	}
	return x, a, nil
}

func (k *batchNormKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	x, a, err := k.channelParams(in)
	if err != nil {
		return nil, err
	}
	y := onnx.New(x.Shape...)
	ch, inner := x.Shape[1], onnx.Numel(x.Shape[2:])
	parallel.Each(x.Shape[0]*ch, k.workers, func(_, plane int) {
		c := plane % ch
		mul := float32(a[c])
		add := in[2].Data[c] - mul*in[3].Data[c]
		off := plane * inner
		src, dst := x.Data[off:off+inner], y.Data[off:off+inner]
		for i, v := range src {
			dst[i] = v*mul + add
		}
	})
	return []*onnx.Tensor{y}, nil
}

func (k *batchNormKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	x, a, err := k.channelParams(in)
	if err != nil {
		return nil, err
	}
	g := gout[0]
	ch, inner := x.Shape[1], onnx.Numel(x.Shape[2:])
	gx := onnx.New(x.Shape...)
	sumG, sumGX := make([]float64, ch), make([]float64, ch) // Σ dY and Σ dY·(X−mean)
	for n := 0; n < x.Shape[0]; n++ {
		for c := 0; c < ch; c++ {
			off := (n*ch + c) * inner
			mul, mean := float32(a[c]), in[3].Data[c]
			var s, sx float64
			for i, gv := range g.Data[off : off+inner] {
				gx.Data[off+i] = gv * mul
				s += float64(gv)
				sx += float64(gv) * float64(x.Data[off+i]-mean)
			}
			sumG[c] += s
			sumGX[c] += sx
		}
	}
	gScale, gB, gMean, gVar := onnx.New(in[1].Shape...), onnx.New(in[2].Shape...), onnx.New(in[3].Shape...), onnx.New(in[4].Shape...)
	for c := 0; c < ch; c++ {
		inv := 1 / math.Sqrt(float64(in[4].Data[c])+float64(k.eps))
		gScale.Data[c] = float32(sumGX[c] * inv)
		gB.Data[c] = float32(sumG[c])
		gMean.Data[c] = float32(-sumG[c] * a[c])
		gVar.Data[c] = float32(-0.5 * sumGX[c] * float64(in[1].Data[c]) * inv * inv * inv)
	}
	return []*onnx.Tensor{gx, gScale, gB, gMean, gVar}, nil
}

// softmaxKernel is ONNX Softmax. Before opset 13 the input is coerced to 2D
// at axis (default 1) and normalised over the flattened trailing block; from
// opset 13 it is normalised along the single axis (default −1).
type softmaxKernel struct {
	axis   int64
	legacy bool
}

func buildSoftmax(c *buildCtx) (kernel, error) {
	legacy := c.opset < 13
	def := int64(-1)
	if legacy {
		def = 1
	}
	return &softmaxKernel{axis: c.attrs.int("axis", def), legacy: legacy}, nil
}

// groups returns (outer, length, inner): the normalised groups are
// x[o, 0:length, i] for each o and i.
func (k *softmaxKernel) groups(shape []int) (int, int, int, error) {
	r := len(shape)
	if r == 0 {
		return 1, 1, 1, nil
	}
	ax := int(k.axis)
	if ax < 0 {
		ax += r
	}
	if k.legacy {
		if ax < 0 || ax > r {
			return 0, 0, 0, fmt.Errorf("axis %d out of range for rank %d", k.axis, r)
		}
		return onnx.Numel(shape[:ax]), onnx.Numel(shape[ax:]), 1, nil
	}
	if ax < 0 || ax >= r {
		return 0, 0, 0, fmt.Errorf("axis %d out of range for rank %d", k.axis, r)
	}
	return onnx.Numel(shape[:ax]), shape[ax], onnx.Numel(shape[ax+1:]), nil
}

func (k *softmaxKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	x, err := floatIn(in, 0)
	if err != nil {
		return nil, err
	}
	outer, length, inner, err := k.groups(x.Shape)
	if err != nil {
		return nil, err
	}
	y := onnx.New(x.Shape...)
	for o := 0; o < outer; o++ {
		for i := 0; i < inner; i++ {
			base := o*length*inner + i
			m := float32(math.Inf(-1))
			for j := 0; j < length; j++ {
				m = max(m, x.Data[base+j*inner])
			}
			var s float64
			for j := 0; j < length; j++ {
				e := math.Exp(float64(x.Data[base+j*inner] - m))
				y.Data[base+j*inner] = float32(e)
				s += e
			}
			for j := 0; j < length; j++ {
				y.Data[base+j*inner] = float32(float64(y.Data[base+j*inner]) / s)
			}
		}
	}
	return []*onnx.Tensor{y}, nil
}

func (k *softmaxKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	y, g := out[0], gout[0]
	outer, length, inner, err := k.groups(y.Shape)
	if err != nil {
		return nil, err
	}
	gx := onnx.New(y.Shape...)
	for o := 0; o < outer; o++ {
		for i := 0; i < inner; i++ {
			base := o*length*inner + i
			var dot float64
			for j := 0; j < length; j++ {
				dot += float64(g.Data[base+j*inner]) * float64(y.Data[base+j*inner])
			}
			for j := 0; j < length; j++ {
				idx := base + j*inner
				gx.Data[idx] = float32(float64(y.Data[idx]) * (float64(g.Data[idx]) - dot))
			}
		}
	}
	return []*onnx.Tensor{gx}, nil
}
