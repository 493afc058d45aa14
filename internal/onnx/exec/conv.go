package exec

import (
	"fmt"

	"brightfold/internal/onnx"
	"brightfold/internal/parallel"
)

func init() { register("Conv", buildConv) }

// convKernel is ONNX Conv for 1 to 3 spatial dimensions: X (N, C, ...),
// W (M, C/group, k...), optional B (M). It computes, per column block of
// output positions, an im2col block and a packed matrix product; blocks run
// on separate goroutines.
type convKernel struct {
	spec    windowSpec
	group   int
	workers int
}

func buildConv(c *buildCtx) (kernel, error) {
	ws, err := readWindowSpec(c, true)
	if err != nil {
		return nil, err
	}
	g := c.attrs.int("group", 1)
	if g < 1 || g > 1<<20 {
		return nil, fmt.Errorf("%s: group %d", c.node.Describe(), g)
	}
	return &convKernel{spec: ws, group: int(g), workers: c.workers}, nil
}

// convPlan is one resolved convolution problem.
type convPlan struct {
	w          window
	n, c, m    int // batch, input channels, output channels
	cg, mg     int // per group
	kdim       int // rows of the im2col matrix: cg × taps
	p          int // output positions per plane
	block      int // output positions per column block
	blocks     int // column blocks per plane
	group      int
	pointwise  bool // 1×1 kernel, stride 1, no padding: im2col is the input itself
	outShape   []int
	inPlane    int // input positions per plane
	kernelSize []int
}

func (k *convKernel) plan(x, wt *onnx.Tensor) (*convPlan, error) {
	if len(x.Shape) < 3 || len(x.Shape) > 5 {
		return nil, fmt.Errorf("X has shape %v; want (N, C, spatial...) with 1 to 3 spatial axes", x.Shape)
	}
	if len(wt.Shape) != len(x.Shape) {
		return nil, fmt.Errorf("W %v and X %v differ in rank", wt.Shape, x.Shape)
	}
	p := &convPlan{n: x.Shape[0], c: x.Shape[1], m: wt.Shape[0], group: k.group}
	if p.c%k.group != 0 || p.m%k.group != 0 || wt.Shape[1]*k.group != p.c {
		return nil, fmt.Errorf("X %v, W %v and group %d do not agree", x.Shape, wt.Shape, k.group)
	}
	p.cg, p.mg = p.c/k.group, p.m/k.group
	p.kernelSize = wt.Shape[2:]
	if k.spec.kernel != nil {
		for i, v := range k.spec.kernel {
			if i >= len(p.kernelSize) || int64(p.kernelSize[i]) != v {
				return nil, fmt.Errorf("kernel_shape %v does not match W %v", k.spec.kernel, wt.Shape)
			}
		}
	}
	w, err := k.spec.geometry(x.Shape[2:], p.kernelSize)
	if err != nil {
		return nil, err
	}
	p.w = w
	p.kdim = p.cg * w.kCount()
	p.p = w.outCount()
	p.inPlane = w.inCount()
	p.outShape = append([]int{p.n, p.m}, w.spatialOut...)
	if _, err := onnx.CheckedNumel(p.outShape); err != nil {
		return nil, err
	}
	p.pointwise = w.kCount() == 1 && w.s == [3]int{1, 1, 1} && w.padLo == [3]int{} && w.padHi == [3]int{}
	// Column blocks of about 64k im2col values (fits in L2 cache), a
	// multiple of the register tile width.
	p.block = min(max(65536/max(p.kdim, 1), 64), 1024) / gemmNR * gemmNR
	if p.block > p.p {
		p.block = (p.p + gemmNR - 1) / gemmNR * gemmNR
	}
	p.blocks = (p.p + p.block - 1) / p.block
	return p, nil
}

// segment is a run of output positions [j, j+n) in one output row whose
// tap r reads input row at offset row (within the channel plane) at
// positions o*stride+offX for o in [xlo, xhi), relative to the row start;
// inside is false when the whole run reads padding.
type segment struct {
	j, n, ox     int
	row, offX    int
	xlo, xhi     int
	inside       bool
	channelPlane int
}

// segments calls fn for each output-row run of the column block
// [j0, j0+cols) for im2col row r (an input channel and a kernel tap).
func (p *convPlan) segments(r, j0, cols int, fn func(s segment)) {
	w := &p.w
	taps := w.kCount()
	ch, t := r/taps, r%taps
	tz, ty, tx := t/(w.k[1]*w.k[2]), t/w.k[2]%w.k[1], t%w.k[2]
	zlo, zhi := w.validRange(0, tz)
	ylo, yhi := w.validRange(1, ty)
	xlo, xhi := w.validRange(2, tx)
	offZ, offY := tz*w.d[0]-w.padLo[0], ty*w.d[1]-w.padLo[1]
	s := segment{offX: tx*w.d[2] - w.padLo[2], xlo: xlo, xhi: xhi, channelPlane: ch * p.inPlane}
	for j, end := j0, j0+cols; j < end; j += s.n {
		oz, oy, ox := j/(w.out[1]*w.out[2]), j/w.out[2]%w.out[1], j%w.out[2]
		s.j, s.n, s.ox = j-j0, min(w.out[2]-ox, end-j), ox
		s.inside = oz >= zlo && oz < zhi && oy >= ylo && oy < yhi
		if s.inside {
			s.row = s.channelPlane + ((oz*w.s[0]+offZ)*w.in[1]+oy*w.s[1]+offY)*w.in[2]
		}
		fn(s)
	}
}

// im2colPanels writes the input patches of output positions [j0, j0+cols)
// as the packed B operand of the forward product: column panels of
// gemmNR positions over the kdim patch rows, dst[(j/16*kdim+r)*16+j%16],
// zero-padded to whole panels.
func (p *convPlan) im2colPanels(x []float32, j0, cols int, dst []float32) {
	k16 := p.kdim * gemmNR
	if cols%gemmNR != 0 {
		clear(dst[(cols/gemmNR)*k16 : (cols/gemmNR+1)*k16])
	}
	p.im2colInto(x, j0, cols, dst, false)
}

// im2colPanelsT writes the patches as the packed B operand of the weight
// gradient (the transposed patch matrix): panels of gemmNR patch rows over
// the cols positions, dst[(r/16*cols+j)*16+r%16], zero-padded.
func (p *convPlan) im2colPanelsT(x []float32, j0, cols int, dst []float32) {
	if p.kdim%gemmNR != 0 {
		last := p.kdim / gemmNR * cols * gemmNR
		clear(dst[last : last+cols*gemmNR])
	}
	p.im2colInto(x, j0, cols, dst, true)
}

// im2colInto writes patch element (r, j) in the layout of im2colPanels, or
// of im2colPanelsT when transposed; taps reading padding give zeros.
func (p *convPlan) im2colInto(x []float32, j0, cols int, dst []float32, transposed bool) {
	sx := p.w.s[2]
	k16 := p.kdim * gemmNR
	for r := 0; r < p.kdim; r++ {
		rowT := (r>>4)*cols*gemmNR + r&15
		p.segments(r, j0, cols, func(s segment) {
			a, b, base := 0, 0, 0
			if s.inside {
				a, b = min(max(s.xlo-s.ox, 0), s.n), max(min(s.xhi-s.ox, s.n), 0)
				base = s.row + s.ox*sx + s.offX
			}
			b = max(a, b)
			if transposed {
				d := dst[rowT+s.j*gemmNR:]
				for i := 0; i < a; i++ {
					d[i*gemmNR] = 0
				}
				for i := a; i < b; i++ {
					d[i*gemmNR] = x[base+i*sx]
				}
				for i := b; i < s.n; i++ {
					d[i*gemmNR] = 0
				}
				return
			}
			// Runs of positions within one panel are contiguous in dst.
			for i := 0; i < s.n; {
				j := s.j + i
				n := min(gemmNR-j&15, s.n-i)
				d := dst[(j>>4)*k16+r*gemmNR+j&15:][:n]
				lo, hi := min(max(a-i, 0), n), min(max(b-i, 0), n)
				clear(d[:lo])
				if hi <= lo {
					clear(d)
				} else if sx == 1 {
					copy(d[lo:hi], x[base+i+lo:base+i+hi])
				} else {
					for q := lo; q < hi; q++ {
						d[q] = x[base+(i+q)*sx]
					}
				}
				clear(d[hi:])
				i += n
			}
		})
	}
}

// col2im adds the column block dcol (kdim × cols) back onto the input
// gradient dx of one group of one sample; the adjoint of im2col.
func (p *convPlan) col2im(dcol []float32, j0, cols int, dx []float32) {
	sx := p.w.s[2]
	for r := 0; r < p.kdim; r++ {
		src := dcol[r*cols : (r+1)*cols]
		p.segments(r, j0, cols, func(s segment) {
			if !s.inside {
				return
			}
			seg := src[s.j : s.j+s.n]
			base := s.row + s.ox*sx + s.offX
			for i := max(s.xlo-s.ox, 0); i < min(s.xhi-s.ox, s.n); i++ {
				dx[base+i*sx] += seg[i]
			}
		})
	}
}

// task identifies one unit of parallel work: a column block of one group
// of one sample.
type convTask struct{ n, g, j0, cols int }

func (p *convPlan) tasks() []convTask {
	ts := make([]convTask, 0, p.n*p.group*p.blocks)
	for n := 0; n < p.n; n++ {
		for g := 0; g < p.group; g++ {
			for b := 0; b < p.blocks; b++ {
				j0 := b * p.block
				ts = append(ts, convTask{n, g, j0, min(p.block, p.p-j0)})
			}
		}
	}
	return ts
}

// groupInput returns the input channels of a task's sample and group.
func (p *convPlan) groupInput(x []float32, t convTask) []float32 {
	return x[(t.n*p.c+t.g*p.cg)*p.inPlane:]
}

// pointwiseView is the input of a pointwise convolution as the B operand.
func (p *convPlan) pointwiseView(x []float32, t convTask) mat {
	return mat{d: p.groupInput(x, t)[t.j0:], rs: p.inPlane, cs: 1}
}

// panelBufLen is the size of a packed patch buffer for one column block.
func (p *convPlan) panelBufLen() int {
	return (p.kdim + gemmNR) * (p.block + gemmNR)
}

func (k *convKernel) inputs(in []*onnx.Tensor) (x, wt, b *onnx.Tensor, p *convPlan, err error) {
	if x, err = floatIn(in, 0); err != nil {
		return
	}
	if wt, err = floatIn(in, 1); err != nil {
		return
	}
	if optional(in, 2) {
		if b, err = floatIn(in, 2); err != nil {
			return
		}
	}
	if p, err = k.plan(x, wt); err != nil {
		return
	}
	if b != nil && (len(b.Shape) != 1 || b.Shape[0] != p.m) {
		err = fmt.Errorf("B has shape %v, want (%d)", b.Shape, p.m)
	}
	return
}

func (k *convKernel) forward(in []*onnx.Tensor) ([]*onnx.Tensor, error) {
	x, wt, b, p, err := k.inputs(in)
	if err != nil {
		return nil, err
	}
	if err := checkAlloc(p.outShape, 4); err != nil {
		return nil, err
	}
	y := onnx.New(p.outShape...)
	tasks := p.tasks()
	bufs := make([][]float32, k.workers)
	parallel.Each(len(tasks), k.workers, func(w, i int) {
		t := tasks[i]
		wv := rowMajor(wt.Data[t.g*p.mg*p.kdim:], p.kdim)
		yv := y.Data[(t.n*p.m+t.g*p.mg)*p.p+t.j0:]
		if p.pointwise {
			gemm(p.mg, t.cols, p.kdim, wv, p.pointwiseView(x.Data, t), yv, p.p, false)
		} else {
			if bufs[w] == nil {
				bufs[w] = make([]float32, p.panelBufLen())
			}
			p.im2colPanels(p.groupInput(x.Data, t), t.j0, t.cols, bufs[w])
			gemmPackedB(p.mg, t.cols, p.kdim, wv, bufs[w], yv, p.p, false)
		}
		if b != nil {
			for o := 0; o < p.mg; o++ {
				bias := b.Data[t.g*p.mg+o]
				row := yv[o*p.p : o*p.p+t.cols]
				for j := range row {
					row[j] += bias
				}
			}
		}
	})
	return []*onnx.Tensor{y}, nil
}

func (k *convKernel) backward(in, out, gout []*onnx.Tensor, need []bool) ([]*onnx.Tensor, error) {
	x, wt, b, p, err := k.inputs(in)
	if err != nil {
		return nil, err
	}
	gy := gout[0]
	needX, needW := need[0], len(need) > 1 && need[1]
	tasks := p.tasks()
	workers := min(k.workers, len(tasks))
	type scratch struct {
		col, dcol []float32
		dw, dx    *onnx.Tensor
	}
	sc := make([]scratch, workers)
	parallel.Each(len(tasks), workers, func(w, i int) {
		t := tasks[i]
		s := &sc[w]
		if s.col == nil {
			s.col = make([]float32, p.panelBufLen())
			s.dcol = make([]float32, p.kdim*p.block)
		}
		dyv := mat{d: gy.Data[(t.n*p.m+t.g*p.mg)*p.p+t.j0:], rs: p.p, cs: 1}
		if needW {
			if s.dw == nil {
				s.dw = onnx.New(wt.Shape...)
			}
			// dW_g += dY_block · colᵀ
			dw := s.dw.Data[t.g*p.mg*p.kdim:]
			if p.pointwise {
				gemm(p.mg, p.kdim, t.cols, dyv, p.pointwiseView(x.Data, t).t(), dw, p.kdim, true)
			} else {
				p.im2colPanelsT(p.groupInput(x.Data, t), t.j0, t.cols, s.col)
				gemmPackedB(p.mg, p.kdim, t.cols, dyv, s.col, dw, p.kdim, true)
			}
		}
		if needX {
			if s.dx == nil {
				s.dx = onnx.New(x.Shape...)
			}
			wv := rowMajor(wt.Data[t.g*p.mg*p.kdim:], p.kdim)
			dxs := s.dx.Data[(t.n*p.c+t.g*p.cg)*p.inPlane:]
			if p.pointwise {
				// dX block = W_gᵀ · dY_block, straight into the input layout.
				gemm(p.kdim, t.cols, p.mg, wv.t(), dyv, dxs[t.j0:], p.inPlane, true)
				return
			}
			// dcol = W_gᵀ · dY_block, then scattered back.
			gemm(p.kdim, t.cols, p.mg, wv.t(), dyv, s.dcol, t.cols, false)
			p.col2im(s.dcol, t.j0, t.cols, dxs)
		}
	})
	grads := make([]*onnx.Tensor, len(in))
	if needX {
		grads[0] = sumScratch(x.Shape, workers, func(w int) *onnx.Tensor { return sc[w].dx })
	}
	if needW {
		grads[1] = sumScratch(wt.Shape, workers, func(w int) *onnx.Tensor { return sc[w].dw })
	}
	if b != nil && len(need) > 2 && need[2] {
		gb := onnx.New(p.m)
		for n := 0; n < p.n; n++ {
			for o := 0; o < p.m; o++ {
				var s float64
				for _, v := range gy.Data[(n*p.m+o)*p.p : (n*p.m+o+1)*p.p] {
					s += float64(v)
				}
				gb.Data[o] += float32(s)
			}
		}
		grads[2] = gb
	}
	return grads, nil
}

// sumScratch adds up per-worker partial results (nil ones are skipped).
func sumScratch(shape []int, workers int, get func(w int) *onnx.Tensor) *onnx.Tensor {
	var total *onnx.Tensor
	for w := 0; w < workers; w++ {
		t := get(w)
		if t == nil {
			continue
		}
		if total == nil {
			total = t
			continue
		}
		for i, v := range t.Data {
			total.Data[i] += v
		}
	}
	if total == nil {
		total = onnx.New(shape...)
	}
	return total
}
