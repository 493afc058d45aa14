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
	// Skip, when set, is asked about a case that cannot be loaded or
	// aligned (never about a cancelled context): true leaves the case out of
	// this and every later round, false stops with the error. Nil stops.
	Skip func(index int, err error) bool
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
	b := templateBuild{ctx: ctx, load: load, o: o, left: make([]bool, n)}
	ref, err := b.firstReadable(n)
	if err != nil {
		return nil, err
	}
	for round := 0; round <= rounds; round++ {
		if ref, err = b.average(round, ref); err != nil {
			return nil, err
		}
	}
	return ref, nil
}

// templateBuild is the state of one BuildTemplate: the cases left out so far.
type templateBuild struct {
	ctx  context.Context
	load func(i int) (*volume.Volume, error)
	o    TemplateOptions
	left []bool // cases left out (Skip said so)
}

// skip decides about case i's error: nil when the case is left out.
func (b *templateBuild) skip(i int, err error) error {
	if b.ctx.Err() != nil || b.o.Skip == nil || !b.o.Skip(i, err) {
		return err
	}
	b.left[i] = true
	return nil
}

// firstReadable loads the first case that loads (the starting reference).
func (b *templateBuild) firstReadable(n int) (*volume.Volume, error) {
	for i := 0; i < n; i++ {
		v, err := b.load(i)
		if err == nil {
			return v.Clone(), nil
		}
		if err := b.skip(i, err); err != nil {
			return nil, err
		}
	}
	return nil, fmt.Errorf("register: none of the %d template cases could be loaded", n)
}

// average aligns every case not left out to ref and returns their average
// on ref's grid; it needs at least 2 cases.
func (b *templateBuild) average(round int, ref *volume.Volume) (*volume.Volume, error) {
	avg, err := volume.New(ref.Dims, ref.Affine)
	if err != nil {
		return nil, err
	}
	n, used := len(b.left), 0
	for i := 0; i < n; i++ {
		if b.left[i] {
			continue
		}
		v, err := b.load(i)
		var res *Result
		if err == nil {
			opts := b.o.Registration
			opts.Start, opts.Progress = nil, nil
			res, err = Register(b.ctx, ref, v, opts)
			if err != nil {
				err = fmt.Errorf("register: template round %d, case %d: %w", round, i+1, err)
			}
		}
		if err != nil {
			if err := b.skip(i, err); err != nil {
				return nil, err
			}
			continue
		}
		addNormalised(avg.Data, res.Aligned.Data)
		used++
		if b.o.Progress != nil {
			b.o.Progress(round, i, n)
		}
	}
	if used < 2 {
		return nil, fmt.Errorf("register: a template needs at least 2 cases, %d could be aligned", used)
	}
	for j := range avg.Data {
		avg.Data[j] /= float32(used)
	}
	avg.Meta = volume.Metadata{Format: "nifti", Description: fmt.Sprintf("template of %d cases", used)}
	return avg, nil
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
