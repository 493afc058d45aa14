package fitcheck

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// ThresholdAt returns the threshold that keeps at least the fraction
// retention of values: for direction "max" (higher is worse) the smallest
// order statistic with at least that fraction at or below it, for "min" the
// largest with at least that fraction at or above it; and the fraction of
// values that pass it. A NaN value is an error (it has no order).
func ThresholdAt(values []float64, retention float64, direction string) (thr, kept float64, err error) {
	n := len(values)
	if n == 0 || !(retention > 0 && retention <= 1) {
		return 0, 0, fmt.Errorf("threshold: need values and a retention in (0, 1], got %d values, %v", n, retention)
	}
	for i, v := range values {
		if math.IsNaN(v) {
			return 0, 0, fmt.Errorf("threshold: value %d is NaN", i)
		}
	}
	s := append([]float64(nil), values...)
	sort.Float64s(s)
	k := int(math.Ceil(retention*float64(n) - 1e-9))
	k = max(1, min(n, k))
	pass := 0
	if direction == "min" {
		thr = s[n-k]
		for _, v := range s {
			if v >= thr {
				pass++
			}
		}
	} else {
		thr = s[k-1]
		for _, v := range s {
			if v <= thr {
				pass++
			}
		}
	}
	return thr, float64(pass) / float64(n), nil
}

// ClassMeansAndCentred returns the per-class means of the feature rows and
// the rows centred on their own class mean (the pooled, class-conditional
// centring of Lee et al. 2018, Section 2). Every class must have a row.
func ClassMeansAndCentred(features [][]float64, labels []int, classes int) ([][]float64, [][]float64, error) {
	if len(features) != len(labels) || len(features) == 0 {
		return nil, nil, errors.New("class means: need features and labels of the same, non-zero length")
	}
	p := len(features[0])
	means := make([][]float64, classes)
	count := make([]float64, classes)
	for c := range means {
		means[c] = make([]float64, p)
	}
	for i, f := range features {
		c := labels[i]
		if c < 0 || c >= classes || len(f) != p {
			return nil, nil, fmt.Errorf("class means: row %d has label %d or %d values (want 0..%d, %d)", i, c, len(f), classes-1, p)
		}
		count[c]++
		for j, x := range f {
			means[c][j] += x
		}
	}
	for c := range means {
		if count[c] == 0 {
			return nil, nil, fmt.Errorf("class means: class %d has no rows", c)
		}
		for j := range means[c] {
			means[c][j] /= count[c]
		}
	}
	centred := make([][]float64, len(features))
	for i, f := range features {
		centred[i] = make([]float64, p)
		for j, x := range f {
			centred[i][j] = x - means[labels[i]][j]
		}
	}
	return means, centred, nil
}
