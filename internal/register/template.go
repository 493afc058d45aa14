package register

import (
	"context"
	"fmt"
	"math"

	"brightfold/internal/volume"
)

// TemplateOptions control BuildTemplate.
type TemplateOptions struct {
	// Registration is used for every alignment (its Start is ignored).
	Registration Options
	// Rounds of realignment to the average after the first; 0 means 2.
	Rounds int
	// Progress, when set, is told each case aligned (round from 0).
	Progress func(round, index, n int)
}

// BuildTemplate makes a template from n cases (load(i) returns case i, so
// that only one case is in memory at a time besides the template): every
// case is aligned to case 0 and the aligned cases averaged; then, Rounds
// times, every case is aligned to that average and averaged again. Each
// aligned case is scaled to unit mean over its voxels above its mean before
// averaging, so that scanners' intensity scales weigh alike. The result is
// on case 0's grid.
func BuildTemplate(ctx context.Context, n int, load func(i int) (*volume.Volume, error), o TemplateOptions) (*volume.Volume, error) {
	if n < 2 {
		return nil, fmt.Errorf("register: a template needs at least 2 cases, got %d", n)
	}
	rounds := o.Rounds
	if rounds == 0 {
		rounds = 2
	}
	ref, err := load(0)
	if err != nil {
		return nil, err
	}
	ref = ref.Clone()
	for round := 0; round <= rounds; round++ {
		avg, err := volume.New(ref.Dims, ref.Affine)
		if err != nil {
			return nil, err
		}
		for i := 0; i < n; i++ {
			v, err := load(i)
			if err != nil {
				return nil, err
			}
			opts := o.Registration
			opts.Start, opts.Progress = nil, nil
			res, err := Register(ctx, ref, v, opts)
			if err != nil {
				return nil, fmt.Errorf("register: template round %d, case %d: %w", round, i+1, err)
			}
			addNormalised(avg.Data, res.Aligned.Data)
			if o.Progress != nil {
				o.Progress(round, i, n)
			}
		}
		for j := range avg.Data {
			avg.Data[j] /= float32(n)
		}
		avg.Meta = volume.Metadata{Format: "nifti", Description: fmt.Sprintf("template of %d cases", n)}
		ref = avg
	}
	return ref, nil
}

// addNormalised adds x/m to sum, m the mean of x's values above x's mean.
func addNormalised(sum, x []float32) {
	var mean float64
	for _, v := range x {
		mean += float64(v)
	}
	mean /= float64(len(x))
	var s float64
	k := 0
	for _, v := range x {
		if float64(v) > mean {
			s += float64(v)
			k++
		}
	}
	scale := 1.0
	if k > 0 && s > 0 && !math.IsInf(s, 0) {
		scale = float64(k) / s
	}
	for j, v := range x {
		sum[j] += float32(float64(v) * scale)
	}
}
