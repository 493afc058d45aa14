package exec

import (
	"fmt"

	"brightfold/internal/onnx"
)

// window is the sliding-window geometry shared by convolution and pooling,
// for 1 to 3 spatial dimensions. Shorter problems are padded to three
// dimensions with leading size-1 axes, so that every loop is 3D.
type window struct {
	nsp          int    // spatial rank of the problem (1..3)
	in, out      [3]int // spatial sizes
	k, s, d      [3]int // kernel, stride, dilation
	padLo, padHi [3]int // padding before and after
	spatialIn    []int  // original spatial input shape
	spatialOut   []int  // original spatial output shape
}

// windowSpec is what an operator's attributes say about its window.
type windowSpec struct {
	kernel    []int64
	strides   []int64
	dilations []int64
	pads      []int64
	autoPad   string
	ceil      bool
}

func readWindowSpec(c *buildCtx, withDilations bool) (windowSpec, error) {
	ws := windowSpec{
		kernel:  c.attrs.ints("kernel_shape", nil),
		strides: c.attrs.ints("strides", nil),
		pads:    c.attrs.ints("pads", nil),
		autoPad: c.attrs.str("auto_pad", "NOTSET"),
		ceil:    c.attrs.int("ceil_mode", 0) != 0,
	}
	if withDilations {
		ws.dilations = c.attrs.ints("dilations", nil)
	} else if c.node.Attr("dilations") != nil {
		return ws, c.unsupported("dilations on %s", c.node.OpType)
	}
	switch ws.autoPad {
	case "NOTSET", "VALID", "SAME_UPPER", "SAME_LOWER", "":
	default:
		return ws, c.unsupported("auto_pad %q", ws.autoPad)
	}
	return ws, nil
}

// geometry resolves the window for a spatial input shape.
func (ws windowSpec) geometry(spatial []int, kernel []int) (window, error) {
	var w window
	n := len(spatial)
	if n < 1 || n > 3 {
		return w, fmt.Errorf("%d spatial dimensions (1 to 3 supported)", n)
	}
	if len(kernel) != n {
		return w, fmt.Errorf("kernel %v for %d spatial dimensions", kernel, n)
	}
	get := func(v []int64, i, def int) (int, error) {
		if v == nil {
			return def, nil
		}
		if len(v) != n {
			return 0, fmt.Errorf("attribute %v has %d entries for %d spatial dimensions", v, len(v), n)
		}
		if v[i] < 1 || v[i] > 1<<20 {
			return 0, fmt.Errorf("invalid value %d in %v", v[i], v)
		}
		return int(v[i]), nil
	}
	if ws.pads != nil && len(ws.pads) != 2*n {
		return w, fmt.Errorf("pads %v for %d spatial dimensions", ws.pads, n)
	}
	w.nsp = n
	w.spatialIn = append([]int{}, spatial...)
	off := 3 - n
	for i := 0; i < 3; i++ {
		w.in[i], w.out[i], w.k[i], w.s[i], w.d[i] = 1, 1, 1, 1, 1
	}
	for i := 0; i < n; i++ {
		j := off + i
		var err error
		w.in[j] = spatial[i]
		w.k[j] = kernel[i]
		if w.k[j] < 1 {
			return w, fmt.Errorf("kernel size %d", w.k[j])
		}
		if w.s[j], err = get(ws.strides, i, 1); err != nil {
			return w, err
		}
		if w.d[j], err = get(ws.dilations, i, 1); err != nil {
			return w, err
		}
		if err := ws.resolvePad(&w, i, j); err != nil {
			return w, err
		}
	}
	w.spatialOut = append([]int{}, w.out[off:]...)
	if w.k[0]*w.k[1]*w.k[2] > maxTaps {
		return w, fmt.Errorf("window of %v taps exceeds %d", kernel, maxTaps)
	}
	if _, err := onnx.CheckedNumel(w.spatialOut); err != nil {
		return w, err
	}
	return w, nil
}

// resolvePad sets padding and output size of axis j (attribute index i).
func (ws windowSpec) resolvePad(w *window, i, j int) error {
	in, k, s, d := w.in[j], w.k[j], w.s[j], w.d[j]
	ext := (k-1)*d + 1
	switch ws.autoPad {
	case "SAME_UPPER", "SAME_LOWER":
		out := (in + s - 1) / s
		total := max(0, (out-1)*s+ext-in)
		lo := total / 2
		if ws.autoPad == "SAME_LOWER" {
			lo = total - total/2
		}
		w.padLo[j], w.padHi[j], w.out[j] = lo, total-lo, out
		return nil
	case "VALID":
		w.padLo[j], w.padHi[j] = 0, 0
	default:
		if ws.pads != nil {
			lo, hi := ws.pads[i], ws.pads[i+len(ws.pads)/2]
			if lo < 0 || hi < 0 || lo > 1<<20 || hi > 1<<20 {
				return fmt.Errorf("invalid pads %v", ws.pads)
			}
			w.padLo[j], w.padHi[j] = int(lo), int(hi)
		}
	}
	span := in + w.padLo[j] + w.padHi[j] - ext
	if span < 0 {
		return fmt.Errorf("window of extent %d larger than padded input %d", ext, in+w.padLo[j]+w.padHi[j])
	}
	if ws.ceil {
		w.out[j] = (span+s-1)/s + 1
	} else {
		w.out[j] = span/s + 1
	}
	return nil
}

// outCount is the number of output positions per plane.
func (w *window) outCount() int { return w.out[0] * w.out[1] * w.out[2] }

// inCount is the number of input positions per plane.
func (w *window) inCount() int { return w.in[0] * w.in[1] * w.in[2] }

// kCount is the number of kernel taps.
func (w *window) kCount() int { return w.k[0] * w.k[1] * w.k[2] }

// validRange returns the output positions [lo, hi) along axis j whose tap t
// lands inside the input.
func (w *window) validRange(j, t int) (int, int) {
	off := t*w.d[j] - w.padLo[j] // input position = o*s + off
	s := w.s[j]
	lo := 0
	if off < 0 {
		lo = (-off + s - 1) / s
	}
	hi := 0
	if w.in[j]-1-off >= 0 {
		hi = (w.in[j]-1-off)/s + 1
	}
	hi = min(hi, w.out[j])
	if lo > hi {
		lo = hi
	}
	return lo, hi
}

// maxTaps bounds the number of taps of a convolution or pooling window.
const maxTaps = 1 << 16
