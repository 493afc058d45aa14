package stats

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
)

// BootstrapInterval is a statistic with its percentile bootstrap interval.
type BootstrapInterval struct {
	Estimate float64
	Lo, Hi   float64
	Reps     int // resamples whose statistic was finite
}

// Bootstrap resamples n cases with replacement reps times (a PCG stream
// seeded with seed, so the interval is reproducible), computes stat on the
// indices of each resample, and returns the percentile interval at level
// (Efron and Tibshirani 1993, An Introduction to the Bootstrap, ch. 13).
// Estimate is stat on the original cases. Resamples where stat is not
// finite (e.g. one class missing) are dropped and counted out of Reps.
func Bootstrap(n, reps int, seed uint64, level float64, stat func(idx []int) float64) (BootstrapInterval, error) {
	if n < 1 || reps < 1 || !(level > 0 && level < 1) {
		return BootstrapInterval{}, errors.New("bootstrap: need cases, resamples and a level in (0, 1)")
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	out := BootstrapInterval{Estimate: stat(idx)}
	rng := rand.New(rand.NewPCG(seed, 0x9e3779b97f4a7c15))
	vals := make([]float64, 0, reps)
	for r := 0; r < reps; r++ {
		for i := range idx {
			idx[i] = rng.IntN(n)
		}
		if v := stat(idx); !math.IsNaN(v) && !math.IsInf(v, 0) {
			vals = append(vals, v)
		}
	}
	out.Reps = len(vals)
	if len(vals) == 0 {
		return out, errors.New("bootstrap: the statistic was never finite")
	}
	sort.Float64s(vals)
	a := (1 - level) / 2
	out.Lo, out.Hi = Quantile(vals, a), Quantile(vals, 1-a)
	return out, nil
}

// BootstrapPairs is Bootstrap of stat over paired cases (a value and an
// outcome each, such as a probability and the truth): each resample hands
// stat the resampled pairs, in the resampled order.
func BootstrapPairs(x []float64, y []bool, reps int, seed uint64, level float64, stat func(x []float64, y []bool) float64) (BootstrapInterval, error) {
	if len(x) != len(y) {
		return BootstrapInterval{}, fmt.Errorf("bootstrap: %d values but %d outcomes", len(x), len(y))
	}
	bx, by := make([]float64, len(x)), make([]bool, len(x))
	return Bootstrap(len(x), reps, seed, level, func(idx []int) float64 {
		for k, i := range idx {
			bx[k], by[k] = x[i], y[i]
		}
		return stat(bx[:len(idx)], by[:len(idx)])
	})
}
