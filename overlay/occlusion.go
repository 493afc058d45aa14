package overlay

import (
	"context"
	"fmt"

	"brightfold/inference/preprocess"
)

// patchStarts are the first voxels of the patches along an axis of n voxels:
// 0, stride, 2·stride, … and n − patch last, so that every voxel is covered.
func patchStarts(n, patch, stride int) []int {
	if patch >= n {
		return []int{0}
	}
	var s []int
	for p := 0; p+patch <= n; p += stride {
		s = append(s, p)
	}
	if last := n - patch; s[len(s)-1] != last {
		s = append(s, last)
	}
	return s
}

// computeOcclusion is occlusion sensitivity (Zeiler & Fergus 2014, section
// 4.2): a cube of Patch voxels is set to Fill at positions Stride apart, the
// model runs on each occluded input through ONNX Runtime, and every voxel
// gets the mean drop f(x) − f(x occluded) over the patches that cover it.
func (e *Explainer) computeOcclusion(ctx context.Context, t *preprocess.Tensor, tg target, opt Options) (*Map, error) {
	if len(t.Shape) < 2 || t.Shape[0] != 1 {
		return nil, fmt.Errorf("overlay: tensor of shape %v; want one case", t.Shape)
	}
	g := t.Grid
	if g[0]*g[1]*g[2] != len(t.Data) {
		return nil, fmt.Errorf("overlay: tensor holds %d values, its grid %v needs %d", len(t.Data), g, g[0]*g[1]*g[2])
	}
	var starts [3][]int
	for a := range starts {
		starts[a] = patchStarts(g[a], min(opt.Patch, g[a]), opt.Stride)
	}
	var patches [][3]int
	for _, z := range starts[2] {
		for _, y := range starts[1] {
			for _, x := range starts[0] {
				patches = append(patches, [3]int{x, y, z})
			}
		}
	}
	total := len(patches) + 1
	opt.progress(0, total)
	out, err := e.session.Run([]*preprocess.Tensor{t})
	if err != nil {
		return nil, err
	}
	f := e.score(out[0].Logits, tg)
	drop := make([]float64, len(t.Data))
	count := make([]int32, len(t.Data))
	batch := max(1, opt.Batch)
	for lo := 0; lo < len(patches); lo += batch {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		hi := min(len(patches), lo+batch)
		ts := make([]*preprocess.Tensor, hi-lo)
		for i := range ts {
			ts[i] = occluded(t, patches[lo+i], opt.Patch, opt.Fill)
		}
		outs, err := e.session.Run(ts)
		if err != nil {
			return nil, err
		}
		for i, o := range outs {
			d := f - e.score(o.Logits, tg)
			eachVoxel(t, patches[lo+i], opt.Patch, func(off int) {
				drop[off] += d
				count[off]++
			})
		}
		opt.progress(hi+1, total)
	}
	v := make([]float32, len(t.Data))
	for i, c := range count {
		if c > 0 {
			v[i] = float32(drop[i] / float64(c))
		}
	}
	return &Map{
		Rule:   fmt.Sprintf("occlusion, %d-voxel cube, stride %d, fill %g, through ONNX Runtime", opt.Patch, opt.Stride, opt.Fill),
		Target: f, Values: toGrid(t, v), Passes: total,
		Checks:   map[string]float64{"target_logit": f, "passes": float64(total)},
		Settings: map[string]any{"patch_voxels": opt.Patch, "stride_voxels": opt.Stride, "fill": opt.Fill},
	}, nil
}

// score is the target's score from one case's logits.
func (e *Explainer) score(logits []float64, tg target) float64 {
	var s float64
	for j, z := range logits {
		s += float64(tg.weight(j, len(logits))) * z
	}
	return s
}

// occluded returns a copy of t with the cube at p set to fill.
func occluded(t *preprocess.Tensor, p [3]int, patch int, fill float32) *preprocess.Tensor {
	c := *t
	c.Data = append([]float32(nil), t.Data...)
	eachVoxel(t, p, patch, func(off int) { c.Data[off] = fill })
	return &c
}

// eachVoxel calls fn with the data offset of every voxel of the cube at p
// (clipped to the grid).
func eachVoxel(t *preprocess.Tensor, p [3]int, patch int, fn func(off int)) {
	g := t.Grid
	for z := p[2]; z < min(p[2]+patch, g[2]); z++ {
		for y := p[1]; y < min(p[1]+patch, g[1]); y++ {
			for x := p[0]; x < min(p[0]+patch, g[0]); x++ {
				fn(t.GridIndex(x, y, z))
			}
		}
	}
}
