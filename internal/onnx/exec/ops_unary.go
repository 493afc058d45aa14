package exec

import (
	"fmt"
	"math"

	"brightfold/internal/onnx"
)

func init() {
	register("Relu", func(c *buildCtx) (kernel, error) { return leaky(0, c.workers), nil })
	register("LeakyRelu", func(c *buildCtx) (kernel, error) {
		return leaky(c.attrs.float("alpha", 0.01), c.workers), nil
	})
	register("Sigmoid", func(c *buildCtx) (kernel, error) {
		return unary(sigmoid, func(x, y float32) float32 { return y * (1 - y) }), nil
	})
	register("Exp", func(c *buildCtx) (kernel, error) {
		return unary(func(x float32) float32 { return float32(math.Exp(float64(x))) },
			func(x, y float32) float32 { return y }), nil
	})
	register("Identity", func(c *buildCtx) (kernel, error) { return passThrough(), nil })
	register("Dropout", buildDropout)
}

func sigmoid(x float32) float32 {
	if x >= 0 {
		return float32(1 / (1 + math.Exp(-float64(x))))
	}
	e := math.Exp(float64(x))
	return float32(e / (1 + e))
}

// unary is an elementwise float op with derivative d(x, y) at input x and
// output y.
func unary(f func(float32) float32, d func(x, y float32) float32) kernel {
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := floatIn(in, 0)
			if err != nil {
				return nil, err
			}
			y := onnx.New(x.Shape...)
			for i, v := range x.Data {
				y.Data[i] = f(v)
			}
			return []*onnx.Tensor{y}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, y, g := in[0], out[0], gout[0]
			gx := onnx.New(x.Shape...)
			for i, v := range x.Data {
				gx.Data[i] = g.Data[i] * d(v, y.Data[i])
			}
			return []*onnx.Tensor{gx}, nil
		},
	}
}

// leaky is Relu (alpha 0) or LeakyRelu: x for x ≥ 0, alpha·x below; the
// derivative at 0 is taken as alpha. Written out rather than through unary
// because these run on every activation of a CNN.
func leaky(alpha float32, workers int) kernel {
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := floatIn(in, 0)
			if err != nil {
				return nil, err
			}
			y := onnx.New(x.Shape...)
			chunks(workers, len(x.Data), func(lo, hi int) {
				yd := y.Data[lo:hi]
				for i, v := range x.Data[lo:hi] {
					if v < 0 {
						v *= alpha
					}
					yd[i] = v
				}
			})
			return []*onnx.Tensor{y}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, g := in[0], gout[0]
			gx := onnx.New(x.Shape...)
			chunks(workers, len(x.Data), func(lo, hi int) {
				gd, gs := gx.Data[lo:hi], g.Data[lo:hi]
				for i, v := range x.Data[lo:hi] {
					if v > 0 {
						gd[i] = gs[i]
					} else {
						gd[i] = alpha * gs[i]
					}
				}
			})
			return []*onnx.Tensor{gx}, nil
		},
	}
}

// passThrough returns its first input unchanged (Identity, and Dropout at
// inference).
func passThrough() kernel {
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := anyIn(in, 0)
			if err != nil {
				return nil, err
			}
			return []*onnx.Tensor{x}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			g := make([]*onnx.Tensor, len(in))
			g[0] = gout[0]
			return g, nil
		},
	}
}

// buildDropout runs Dropout in inference mode: the output is the input and
// the optional mask is all true (ONNX Dropout). Training mode (is_test=0
// before opset 7, or a training_mode input that is true) draws random
// numbers and is unsupported, except with ratio 0, where it is the
// identity too.
func buildDropout(c *buildCtx) (kernel, error) {
	if c.opset < 7 && c.attrs.int("is_test", 0) == 0 {
		return nil, c.unsupported("Dropout with is_test=0 (training mode) before opset 7")
	}
	if t := c.constInput(2); t != nil && len(t.Ints) == 1 && t.Ints[0] != 0 {
		if r := c.constInput(1); r == nil || len(r.Data) != 1 || r.Data[0] != 0 {
			return nil, c.unsupported("Dropout in training mode (training_mode input is true)")
		}
	}
	unsupported := c.unsupported("Dropout in training mode with a nonzero ratio draws random numbers")
	return funcKernel{
		fwd: func(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
			x, err := anyIn(in, 0)
			if err != nil {
				return nil, err
			}
			if optional(in, 2) {
				if len(in[2].Ints) != 1 {
					return nil, fmt.Errorf("training_mode must be a boolean scalar")
				}
				ratio := float32(0.5)
				if optional(in, 1) && len(in[1].Data) == 1 {
					ratio = in[1].Data[0]
				}
				if in[2].Ints[0] != 0 && ratio != 0 {
					return nil, unsupported
				}
			}
			mask := &onnx.Tensor{Shape: append([]int{}, x.Shape...), Ints: make([]int64, x.Len()), DType: onnx.Bool}
			for i := range mask.Ints {
				mask.Ints[i] = 1
			}
			return []*onnx.Tensor{x, mask}, nil
		},
		bwd: func(in, out, gout []*onnx.Tensor) ([]*onnx.Tensor, error) {
			g := make([]*onnx.Tensor, len(in))
			g[0] = gout[0]
			return g, nil
		},
	}, nil
}
