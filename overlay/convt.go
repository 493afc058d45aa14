package overlay

import (
	"brightfold/internal/onnx"
)

// convGeom is the geometry of a Conv node without groups and with explicit
// padding, as three spatial axes (1D and 2D convolutions get leading axes of
// size 1). LRP uses it for the input-side products Wᵀs of a convolution
// when s is sparse: the relevance reaching a convolution's output has
// passed a ReLU and usually a max pooling, so most of its entries are zero,
// and scattering only the non-zero ones is several times cheaper than the
// dense backward pass.
type convGeom struct {
	rank              int // spatial axes of the node (1 to 3)
	k, stride, dil, p [3]int
}

// convGeometry reads n's attributes; ok is false for a Conv the sparse
// path does not handle (groups, auto_pad other than NOTSET or VALID).
func convGeometry(n *onnx.Node, w *onnx.Tensor) (convGeom, bool) {
	var g convGeom
	if n.OpType != "Conv" || len(w.Shape) < 3 || len(w.Shape) > 5 {
		return g, false
	}
	if grp, err := n.AttrInt("group", 1); err != nil || grp != 1 {
		return g, false
	}
	if ap, err := n.AttrString("auto_pad", "NOTSET"); err != nil || (ap != "NOTSET" && ap != "VALID" && ap != "") {
		return g, false
	}
	g.rank = len(w.Shape) - 2
	ones := make([]int64, g.rank)
	for i := range ones {
		ones[i] = 1
	}
	strides, err1 := n.AttrInts("strides", ones)
	dils, err2 := n.AttrInts("dilations", ones)
	pads, err3 := n.AttrInts("pads", make([]int64, 2*g.rank))
	if err1 != nil || err2 != nil || err3 != nil || len(strides) != g.rank || len(dils) != g.rank || len(pads) != 2*g.rank {
		return g, false
	}
	off := 3 - g.rank
	for a := 0; a < 3; a++ {
		g.k[a], g.stride[a], g.dil[a] = 1, 1, 1
	}
	for i := 0; i < g.rank; i++ {
		g.k[off+i], g.stride[off+i], g.dil[off+i], g.p[off+i] = w.Shape[2+i], int(strides[i]), int(dils[i]), int(pads[i])
		if g.stride[off+i] < 1 || g.dil[off+i] < 1 || g.p[off+i] < 0 {
			return g, false
		}
	}
	return g, true
}

// dims3 returns the three spatial sizes of a (N, C, spatial...) shape.
func (g convGeom) dims3(shape []int) [3]int {
	d := [3]int{1, 1, 1}
	copy(d[3-g.rank:], shape[2:])
	return d
}

// transpose returns Wᵀs for each weight tensor of ws (one or two, all
// M × C × k), shaped like x, visiting only the non-zero entries of s
// (N, M, out...), both weights in the same pass.
func (g convGeom) transpose(s, x *onnx.Tensor, ws []*onnx.Tensor) []*onnx.Tensor {
	in, out := g.dims3(x.Shape), g.dims3(s.Shape)
	n, c, m := x.Shape[0], x.Shape[1], s.Shape[1]
	inPlane, outPlane := in[0]*in[1]*in[2], out[0]*out[1]*out[2]
	taps := g.k[0] * g.k[1] * g.k[2]
	res := make([]*onnx.Tensor, len(ws))
	for j := range ws {
		res[j] = onnx.New(x.Shape...)
	}
	for b := 0; b < n; b++ {
		for mo := 0; mo < m; mo++ {
			src := s.Data[(b*m+mo)*outPlane : (b*m+mo+1)*outPlane]
			for ci := 0; ci < c; ci++ {
				d, k := (b*c+ci)*inPlane, (mo*c+ci)*taps
				var p scatterPair
				p.dstA, p.kernA = res[0].Data[d:d+inPlane], ws[0].Data[k:k+taps]
				if len(ws) > 1 {
					p.dstB, p.kernB = res[1].Data[d:d+inPlane], ws[1].Data[k:k+taps]
				}
				g.scatter(p, src, in, out)
			}
		}
	}
	return res
}

// scatterPair is one (input channel, output channel) pair of one or two
// weights: kernels and the input-shaped planes they scatter into.
type scatterPair struct {
	dstA, kernA, dstB, kernB []float32
}

// scatter adds, for every non-zero s[o] of one output channel, s[o] times
// the kernels onto the input positions of o's window.
func (g convGeom) scatter(p scatterPair, src []float32, in, out [3]int) {
	k1, k2 := g.k[1], g.k[2]
	o := 0
	for oz := 0; oz < out[0]; oz++ {
		for oy := 0; oy < out[1]; oy++ {
			for ox := 0; ox < out[2]; ox, o = ox+1, o+1 {
				sv := src[o]
				if sv == 0 {
					continue
				}
				x0 := ox*g.stride[2] - g.p[2]
				for kz := 0; kz < g.k[0]; kz++ {
					iz := oz*g.stride[0] - g.p[0] + kz*g.dil[0]
					if iz < 0 || iz >= in[0] {
						continue
					}
					for ky := 0; ky < k1; ky++ {
						iy := oy*g.stride[1] - g.p[1] + ky*g.dil[1]
						if iy < 0 || iy >= in[1] {
							continue
						}
						r, kr := (iz*in[1]+iy)*in[2], (kz*k1+ky)*k2
						rowA, ka := p.dstA[r:r+in[2]], p.kernA[kr:kr+k2]
						if p.kernB == nil {
							for kx, w := range ka {
								if ix := x0 + kx*g.dil[2]; ix >= 0 && ix < len(rowA) {
									rowA[ix] += w * sv
								}
							}
							continue
						}
						rowB, kb := p.dstB[r:r+in[2]], p.kernB[kr:kr+k2]
						for kx, w := range ka {
							if ix := x0 + kx*g.dil[2]; ix >= 0 && ix < len(rowA) {
								rowA[ix] += w * sv
								rowB[ix] += kb[kx] * sv
							}
						}
					}
				}
			}
		}
	}
}

// sparseEnough reports whether at most a quarter of s is non-zero, where
// the scatter beats the dense backward pass.
func sparseEnough(s *onnx.Tensor) bool {
	nz := 0
	for _, v := range s.Data {
		if v != 0 {
			nz++
		}
	}
	return 4*nz <= len(s.Data)
}
