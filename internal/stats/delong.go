package stats

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// Placements holds the empirical AUROC of one set of ratings and its
// placement values (DeLong, DeLong and Clarke-Pearson 1988, Biometrics 44:837,
// section 2): Pos[i] is the fraction of negatives that positive i outranks
// (ties count one half), Neg[j] the fraction of positives that outrank
// negative j. The AUROC is the mean of either list.
type Placements struct {
	AUC float64
	Pos []float64 // V10, one per positive case, in case order
	Neg []float64 // V01, one per negative case, in case order
}

// ErrOneClass is returned when the truth holds no positive or no negative case.
var ErrOneClass = errors.New("AUROC needs at least one positive and one negative case")

// PlacementValues computes the empirical AUROC of scores against truth
// (higher score = more likely positive) with its placement values, in
// O(N log N) through mid-ranks (Sun and Xu 2014, IEEE Signal Process. Lett.
// 21:1389): the placement of positive i is (rank among all − rank among
// positives)/n. Written here because the placement values, not only the
// AUROC, are needed for the DeLong and jackknife covariances.
func PlacementValues(scores []float64, truth []bool) (Placements, error) {
	if len(scores) != len(truth) {
		return Placements{}, fmt.Errorf("%d scores for %d truth values", len(scores), len(truth))
	}
	var pos, neg []float64
	for i, s := range scores {
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return Placements{}, fmt.Errorf("score %d is not a finite number", i+1)
		}
		if truth[i] {
			pos = append(pos, s)
		} else {
			neg = append(neg, s)
		}
	}
	m, n := len(pos), len(neg)
	if m == 0 || n == 0 {
		return Placements{}, ErrOneClass
	}
	all := append(append([]float64(nil), pos...), neg...)
	rAll := delongMidRanks(all)
	rPos := delongMidRanks(pos)
	rNeg := delongMidRanks(neg)
	p := Placements{Pos: make([]float64, m), Neg: make([]float64, n)}
	sum := 0.0
	for i := range pos {
		p.Pos[i] = (rAll[i] - rPos[i]) / float64(n)
		sum += p.Pos[i]
	}
	for j := range neg {
		// positives above negative j = m − (positives at or below, ties half)
		p.Neg[j] = 1 - (rAll[m+j]-rNeg[j])/float64(m)
	}
	p.AUC = sum / float64(m)
	return p, nil
}

// delongMidRanks returns the 1-based ranks of x, ties sharing their mean rank.
func delongMidRanks(x []float64) []float64 {
	idx := make([]int, len(x))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return x[idx[a]] < x[idx[b]] })
	r := make([]float64, len(x))
	for i := 0; i < len(idx); {
		j := i
		for j+1 < len(idx) && x[idx[j+1]] == x[idx[i]] {
			j++
		}
		mid := float64(i+j)/2 + 1
		for k := i; k <= j; k++ {
			r[idx[k]] = mid
		}
		i = j + 1
	}
	return r
}

// EmpiricalAUC is the empirical AUROC (Mann-Whitney, ties counted one half).
func EmpiricalAUC(scores []float64, truth []bool) (float64, error) {
	p, err := PlacementValues(scores, truth)
	return p.AUC, err
}

// DeLongCovariance returns the DeLong covariance matrix of the AUROCs of
// several sets of ratings of the same cases (DeLong et al. 1988, eq. 2):
// S = S10/m + S01/n, where S10 and S01 are the sample covariances (divisor
// m−1, n−1) of the placement values over positives and negatives.
func DeLongCovariance(ps []Placements) ([][]float64, error) {
	if err := delongSameCases(ps); err != nil {
		return nil, err
	}
	k := len(ps)
	cov := make([][]float64, k)
	m, n := len(ps[0].Pos), len(ps[0].Neg)
	for a := range cov {
		cov[a] = make([]float64, k)
		for b := range cov[a] {
			s10 := delongSampleCov(ps[a].Pos, ps[b].Pos, ps[a].AUC, ps[b].AUC)
			s01 := delongSampleCov(ps[a].Neg, ps[b].Neg, ps[a].AUC, ps[b].AUC)
			cov[a][b] = s10/float64(m) + s01/float64(n)
		}
	}
	return cov, nil
}

func delongSameCases(ps []Placements) error {
	if len(ps) == 0 {
		return errors.New("no ratings")
	}
	for _, p := range ps[1:] {
		if len(p.Pos) != len(ps[0].Pos) || len(p.Neg) != len(ps[0].Neg) {
			return errors.New("ratings are not of the same cases")
		}
	}
	return nil
}

// delongSampleCov is the sample covariance (divisor len−1) of x and y with
// the given means; 0 when there is a single value.
func delongSampleCov(x, y []float64, mx, my float64) float64 {
	if len(x) < 2 {
		return 0
	}
	s := 0.0
	for i := range x {
		s += (x[i] - mx) * (y[i] - my)
	}
	return s / float64(len(x)-1)
}

// AUCInterval is an AUROC with its standard error and confidence interval.
type AUCInterval struct {
	AUC  float64
	SE   float64
	CI95 [2]float64
}

// DeLongCI returns the AUROC with the normal-theory 95 % interval from the
// DeLong variance, clipped to [0, 1] (as R's pROC ci.auc(method = "delong")).
func DeLongCI(scores []float64, truth []bool) (AUCInterval, error) {
	p, err := PlacementValues(scores, truth)
	if err != nil {
		return AUCInterval{}, err
	}
	cov, err := DeLongCovariance([]Placements{p})
	if err != nil {
		return AUCInterval{}, err
	}
	se := math.Sqrt(cov[0][0])
	z := distuv.UnitNormal.Quantile(0.975)
	return AUCInterval{AUC: p.AUC, SE: se, CI95: [2]float64{
		math.Max(0, p.AUC-z*se), math.Min(1, p.AUC+z*se)}}, nil
}

// PairedTest is the DeLong test of two correlated AUROCs (the same cases
// rated twice): Diff = AUC1 − AUC2, Z = Diff/SE, two-sided P.
type PairedTest struct {
	AUC1, AUC2 float64
	Diff, SE   float64
	CI95       [2]float64 // of Diff, normal theory
	Z, P       float64
}

// DeLongPaired compares the AUROCs of two sets of ratings a and b of the same
// cases (DeLong et al. 1988, section 3; the test of R's pROC
// roc.test(method = "delong", paired = TRUE)).
func DeLongPaired(a, b []float64, truth []bool) (PairedTest, error) {
	if len(a) != len(b) {
		return PairedTest{}, fmt.Errorf("%d and %d ratings: a paired test needs the same cases", len(a), len(b))
	}
	pa, err := PlacementValues(a, truth)
	if err != nil {
		return PairedTest{}, err
	}
	pb, err := PlacementValues(b, truth)
	if err != nil {
		return PairedTest{}, err
	}
	cov, err := DeLongCovariance([]Placements{pa, pb})
	if err != nil {
		return PairedTest{}, err
	}
	t := PairedTest{AUC1: pa.AUC, AUC2: pb.AUC, Diff: pa.AUC - pb.AUC}
	t.SE = math.Sqrt(math.Max(0, cov[0][0]+cov[1][1]-2*cov[0][1]))
	z := distuv.UnitNormal.Quantile(0.975)
	t.CI95 = [2]float64{t.Diff - z*t.SE, t.Diff + z*t.SE}
	switch {
	case t.SE > 0:
		t.Z = t.Diff / t.SE
		t.P = 2 * distuv.UnitNormal.Survival(math.Abs(t.Z))
	case t.Diff == 0:
		t.P = 1
	default:
		t.Z = math.Copysign(math.Inf(1), t.Diff)
	}
	return t, nil
}
