package stats

import (
	"errors"
	"math"
	"math/rand/v2"
	"sort"
)

// PartialConfounderTest is the result of the partial confounder test.
type PartialConfounderTest struct {
	R2    float64 // the statistic: R² of the predictions on the confounder
	P     float64 // permutation p-value
	Perms int
}

// PartialConfounder tests H0: the model's predictions are independent of a
// confounder given the target (prediction ⫫ confounder | target), the
// partial confounder test of Spisak 2022 (GigaScience 12:giac082), by
// conditional permutation (Berrett et al. 2020, JRSS-B 82:175). The
// statistic is the R² of the predictions regressed on the confounder's
// columns (one column for a numeric confounder, indicator columns for a
// categorical one). The confounder is permuted from its distribution given
// the target: for a discrete target (as here, the label) that is its
// empirical distribution within each class, so the permutations shuffle
// the confounder within classes, which keeps its relation to the target and
// breaks only a relation to the predictions beyond it. p = (1 + #{R²* ≥
// R²}) / (1 + perms). A small p says the model's output depends on the
// confounder beyond what the label explains.
func PartialConfounder(pred []float64, confounder [][]float64, target []int, perms int, seed uint64) (PartialConfounderTest, error) {
	n := len(pred)
	if n < 3 || len(confounder) != n || len(target) != n || perms < 1 {
		return PartialConfounderTest{}, errors.New("partial confounder test: need 3 or more cases, one confounder row and target per case, and permutations")
	}
	stat, err := confoundR2(pred, confounder)
	if err != nil {
		return PartialConfounderTest{}, err
	}
	byClass := map[int][]int{}
	for i, t := range target {
		byClass[t] = append(byClass[t], i)
	}
	classes := make([]int, 0, len(byClass))
	for c := range byClass {
		classes = append(classes, c)
	}
	sort.Ints(classes) // a fixed order, so that a seed gives one p
	strata := make([][]int, len(classes))
	for k, c := range classes {
		strata[k] = byClass[c]
	}
	rng := rand.New(rand.NewPCG(seed, 0xda942042e4dd58b5))
	perm := make([][]float64, n)
	ge := 0
	for r := 0; r < perms; r++ {
		for _, idx := range strata {
			sh := append([]int(nil), idx...)
			rng.Shuffle(len(sh), func(a, b int) { sh[a], sh[b] = sh[b], sh[a] })
			for k, i := range idx {
				perm[i] = confounder[sh[k]]
			}
		}
		s, err := confoundR2(pred, perm)
		if err != nil {
			return PartialConfounderTest{}, err
		}
		if s >= stat-1e-12 {
			ge++
		}
	}
	return PartialConfounderTest{R2: stat, P: float64(1+ge) / float64(1+perms), Perms: perms}, nil
}

// confoundR2 is the R² of y regressed by least squares on the columns of x
// with an intercept (normal equations, ridge 1e-9 against collinear
// indicator columns).
func confoundR2(y []float64, x [][]float64) (float64, error) {
	n := len(y)
	p := len(x[0]) + 1
	xtx := make([][]float64, p)
	for j := range xtx {
		xtx[j] = make([]float64, p)
	}
	xty := make([]float64, p)
	row := make([]float64, p)
	var my float64
	for i := range y {
		my += y[i] / float64(n)
	}
	for i := range y {
		row[0] = 1
		copy(row[1:], x[i])
		for j := 0; j < p; j++ {
			xty[j] += row[j] * y[i]
			for k := 0; k < p; k++ {
				xtx[j][k] += row[j] * row[k]
			}
		}
	}
	for j := 0; j < p; j++ {
		xtx[j][j] += 1e-9 * (1 + xtx[j][j])
	}
	inv, err := InverseSPD(xtx)
	if err != nil {
		return math.NaN(), err
	}
	beta := make([]float64, p)
	for j := range beta {
		for k := 0; k < p; k++ {
			beta[j] += inv[j][k] * xty[k]
		}
	}
	var sst, sse float64
	for i := range y {
		row[0] = 1
		copy(row[1:], x[i])
		fit := 0.0
		for j := 0; j < p; j++ {
			fit += row[j] * beta[j]
		}
		sse += (y[i] - fit) * (y[i] - fit)
		sst += (y[i] - my) * (y[i] - my)
	}
	if sst == 0 {
		return 0, nil
	}
	return math.Max(0, 1-sse/sst), nil
}
