package stats

import (
	"math"
	"sort"
)

// AUROC is the area under the ROC curve of scores for telling positives
// (labels true) from negatives: the probability that a random positive scores
// higher than a random negative, ties counting half (the Mann-Whitney U
// statistic divided by n₊·n₋; Hanley & McNeil 1982). It equals sklearn's
// roc_auc_score. NaN when either class is empty, when the lengths differ
// and when any score is NaN (a NaN has no rank; a diverging training run
// gives NaN scores and must get a NaN AUROC, not a hang). ±Inf scores are
// ranked like any other value.
func AUROC(scores []float64, labels []bool) float64 {
	n := len(scores)
	if n != len(labels) || anyNaN(scores) {
		return math.NaN()
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return scores[idx[a]] < scores[idx[b]] })
	var rankSum float64
	var npos, nneg float64
	for i := 0; i < n; {
		j := i
		for j < n && scores[idx[j]] == scores[idx[i]] {
			j++
		}
		avg := float64(i+j+1) / 2 // ranks i+1..j averaged
		for k := i; k < j; k++ {
			if labels[idx[k]] {
				rankSum += avg
				npos++
			} else {
				nneg++
			}
		}
		i = j
	}
	if npos == 0 || nneg == 0 {
		return math.NaN()
	}
	return (rankSum - npos*(npos+1)/2) / (npos * nneg)
}

// anyNaN reports whether x holds a NaN.
func anyNaN(x []float64) bool {
	for _, v := range x {
		if math.IsNaN(v) {
			return true
		}
	}
	return false
}

// allFinite reports whether every value of x is finite (neither NaN nor ±Inf).
func allFinite(x []float64) bool {
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return true
}
