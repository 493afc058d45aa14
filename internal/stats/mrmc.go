package stats

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// CovMethod names how the covariances of the AUROC estimates are estimated.
type CovMethod string

// Covariance methods of the Obuchowski-Rockette analysis.
const (
	CovDeLong    CovMethod = "delong"    // DeLong et al. 1988 placement values
	CovJackknife CovMethod = "jackknife" // leave one case out
)

// ReadersFactor says whether the readers are a random sample of readers
// (conclusions reach readers like them) or fixed (these readers only).
type ReadersFactor string

// Readers factors of the Obuchowski-Rockette analysis.
const (
	RandomReaders ReadersFactor = "random"
	FixedReaders  ReadersFactor = "fixed"
)

// JackknifeCovariance returns the jackknife covariance matrix of the AUROCs
// of several sets of ratings of the same cases: each case is left out in
// turn and cov = (c−1)/c Σ_k (θ_(k) − θ̄)(θ_(k) − θ̄)ᵀ over the c cases
// (Efron 1982; the "jackknife" covariances of Obuchowski and Rockette 1995).
// The empirical AUROC without one case follows from its placement value,
// so no AUROC is recomputed.
func JackknifeCovariance(ps []Placements) ([][]float64, error) {
	if err := delongSameCases(ps); err != nil {
		return nil, err
	}
	m, n := len(ps[0].Pos), len(ps[0].Neg)
	if m < 2 || n < 2 {
		return nil, errors.New("the jackknife needs at least two positive and two negative cases")
	}
	c := m + n
	k := len(ps)
	loo := make([][]float64, k) // loo[a][case]
	mean := make([]float64, k)
	for a, p := range ps {
		loo[a] = make([]float64, 0, c)
		for _, v := range p.Pos {
			loo[a] = append(loo[a], (float64(m)*p.AUC-v)/float64(m-1))
		}
		for _, v := range p.Neg {
			loo[a] = append(loo[a], (float64(n)*p.AUC-v)/float64(n-1))
		}
		for _, v := range loo[a] {
			mean[a] += v
		}
		mean[a] /= float64(c)
	}
	cov := make([][]float64, k)
	for a := range cov {
		cov[a] = make([]float64, k)
		for b := range cov[a] {
			s := 0.0
			for i := 0; i < c; i++ {
				s += (loo[a][i] - mean[a]) * (loo[b][i] - mean[b])
			}
			cov[a][b] = s * float64(c-1) / float64(c)
		}
	}
	return cov, nil
}

// ORCondition is one condition's mean AUROC over readers with its interval.
type ORCondition struct {
	AUC  float64
	SE   float64
	DF   float64 // +Inf for fixed readers (normal interval)
	CI95 [2]float64
}

// ORDifference is the difference of two conditions' mean AUROCs (A − B).
type ORDifference struct {
	A, B      int
	Estimate  float64
	SE        float64
	DF        float64 // +Inf for fixed readers
	Statistic float64 // t, or z for fixed readers
	P         float64
	CI95      [2]float64
}

// ORResult is an Obuchowski-Rockette analysis of a conditions × readers AUROC table.
type ORResult struct {
	Readers  ReadersFactor
	T, R     int         // conditions, readers
	AUC      [][]float64 // [condition][reader]
	ErrorVar float64     // mean variance of one AUROC
	Cov1     float64     // same reader, different conditions
	Cov2     float64     // different readers, same condition
	Cov3     float64     // different readers, different conditions
	MST      float64     // mean square of conditions
	MSTR     float64     // mean square of condition × reader
	// Statistic is F (random readers, DF1 and DF2) or χ² (fixed readers, DF1; DF2 = +Inf).
	Statistic, DF1, DF2, P float64
	Conditions             []ORCondition
	Differences            []ORDifference // every pair a < b
}

// MRMC runs the Obuchowski-Rockette analysis on ratings[condition][reader][case]
// of the same cases with the given truth: empirical AUROCs, covariances by
// method, then ObuchowskiRockette.
func MRMC(ratings [][][]float64, truth []bool, method CovMethod, readers ReadersFactor) (ORResult, error) {
	t := len(ratings)
	if t < 2 {
		return ORResult{}, fmt.Errorf("%d condition(s): the analysis compares at least two", t)
	}
	r := len(ratings[0])
	var ps []Placements
	auc := make([][]float64, t)
	for i := range ratings {
		if len(ratings[i]) != r {
			return ORResult{}, errors.New("every condition needs the same readers")
		}
		auc[i] = make([]float64, r)
		for j := range ratings[i] {
			p, err := PlacementValues(ratings[i][j], truth)
			if err != nil {
				return ORResult{}, fmt.Errorf("condition %d, reader %d: %w", i+1, j+1, err)
			}
			auc[i][j] = p.AUC
			ps = append(ps, p)
		}
	}
	var cov [][]float64
	var err error
	switch method {
	case CovDeLong:
		cov, err = DeLongCovariance(ps)
	case CovJackknife:
		cov, err = JackknifeCovariance(ps)
	default:
		err = fmt.Errorf("unknown covariance method %q (delong or jackknife)", method)
	}
	if err != nil {
		return ORResult{}, err
	}
	return ObuchowskiRockette(auc, cov, readers)
}

// ObuchowskiRockette analyses auc[condition][reader] with the covariance
// matrix cov of those estimates (index condition*R + reader): Obuchowski and
// Rockette 1995 (Commun. Stat. Simul. Comput. 24:285), with Hillis's
// denominator degrees of freedom (Hillis 2007, Stat. Med. 26:596) for random
// readers, and the χ² test for fixed readers (Hillis 2007, section 5). Negative
// Cov2 − Cov3 and Cov2 are truncated at 0 as in those papers.
func ObuchowskiRockette(auc [][]float64, cov [][]float64, readers ReadersFactor) (ORResult, error) {
	res := ORResult{Readers: readers, T: len(auc), AUC: auc}
	if err := mrmcCheckShape(&res, cov); err != nil {
		return ORResult{}, err
	}
	if readers == RandomReaders && res.R < 2 {
		return ORResult{}, errors.New("random readers need at least two readers (use fixed readers, or the paired DeLong test for one)")
	}
	if readers != RandomReaders && readers != FixedReaders {
		return ORResult{}, fmt.Errorf("unknown readers factor %q (random or fixed)", readers)
	}
	res.ErrorVar, res.Cov1, res.Cov2, res.Cov3 = mrmcCovComponents(cov, res.T, res.R, nil)
	condMean, grand := mrmcMeans(auc)
	res.MST, res.MSTR = mrmcMeanSquares(auc, condMean, grand)
	df1 := float64(res.T - 1)
	res.DF1 = df1
	var diffVar float64 // variance of one difference of condition means
	if readers == RandomReaders {
		den := res.MSTR + float64(res.R)*math.Max(res.Cov2-res.Cov3, 0)
		res.Statistic = res.MST / den
		res.DF2 = den * den / (res.MSTR * res.MSTR / (df1 * float64(res.R-1)))
		res.P = distuv.F{D1: df1, D2: res.DF2}.Survival(res.Statistic)
		diffVar = 2 * den / float64(res.R)
	} else {
		den := res.ErrorVar - res.Cov1 + float64(res.R-1)*math.Max(res.Cov2-res.Cov3, 0)
		res.Statistic = df1 * res.MST / den
		res.DF2 = math.Inf(1)
		res.P = distuv.ChiSquared{K: df1}.Survival(res.Statistic)
		diffVar = 2 * den / float64(res.R)
	}
	for i := range auc {
		res.Conditions = append(res.Conditions, mrmcCondition(auc, cov, i, readers))
	}
	for a := 0; a < res.T; a++ {
		for b := a + 1; b < res.T; b++ {
			res.Differences = append(res.Differences,
				mrmcDifference(a, b, condMean[a]-condMean[b], math.Sqrt(diffVar), res.DF2))
		}
	}
	return res, nil
}

func mrmcCheckShape(res *ORResult, cov [][]float64) error {
	if res.T < 2 {
		return fmt.Errorf("%d condition(s): the analysis compares at least two", res.T)
	}
	res.R = len(res.AUC[0])
	if res.R < 1 {
		return errors.New("no readers")
	}
	for _, row := range res.AUC {
		if len(row) != res.R {
			return errors.New("every condition needs the same readers")
		}
	}
	k := res.T * res.R
	if len(cov) != k {
		return fmt.Errorf("covariance matrix has %d rows for %d AUROCs", len(cov), k)
	}
	for _, row := range cov {
		if len(row) != k {
			return fmt.Errorf("covariance matrix is not %d × %d", k, k)
		}
	}
	return nil
}

// mrmcCovComponents averages cov into the error variance and Cov1..Cov3; when
// only is not nil, only conditions with only[i] true take part.
func mrmcCovComponents(cov [][]float64, t, r int, only []bool) (v, c1, c2, c3 float64) {
	var nv, n1, n2, n3 int
	for i := 0; i < t; i++ {
		for j := 0; j < r; j++ {
			for i2 := 0; i2 < t; i2++ {
				for j2 := 0; j2 < r; j2++ {
					if only != nil && (!only[i] || !only[i2]) {
						continue
					}
					x := cov[i*r+j][i2*r+j2]
					switch {
					case i == i2 && j == j2:
						v, nv = v+x, nv+1
					case j == j2:
						c1, n1 = c1+x, n1+1
					case i == i2:
						c2, n2 = c2+x, n2+1
					default:
						c3, n3 = c3+x, n3+1
					}
				}
			}
		}
	}
	return mrmcDiv(v, nv), mrmcDiv(c1, n1), mrmcDiv(c2, n2), mrmcDiv(c3, n3)
}

func mrmcDiv(s float64, n int) float64 {
	if n == 0 {
		return 0
	}
	return s / float64(n)
}

func mrmcMeans(auc [][]float64) (cond []float64, grand float64) {
	cond = make([]float64, len(auc))
	for i, row := range auc {
		for _, x := range row {
			cond[i] += x
		}
		cond[i] /= float64(len(row))
		grand += cond[i]
	}
	return cond, grand / float64(len(auc))
}

func mrmcMeanSquares(auc [][]float64, cond []float64, grand float64) (mst, mstr float64) {
	t, r := len(auc), len(auc[0])
	reader := make([]float64, r)
	for j := 0; j < r; j++ {
		for i := 0; i < t; i++ {
			reader[j] += auc[i][j]
		}
		reader[j] /= float64(t)
	}
	for i := 0; i < t; i++ {
		mst += (cond[i] - grand) * (cond[i] - grand)
		for j := 0; j < r; j++ {
			e := auc[i][j] - cond[i] - reader[j] + grand
			mstr += e * e
		}
	}
	mst *= float64(r) / float64(t-1)
	if r > 1 {
		mstr /= float64((t - 1) * (r - 1))
	}
	return mst, mstr
}

// mrmcCondition is condition i's mean AUROC with an interval from its own
// data only (Hillis 2007 section 4: MS(R) and Cov2 of that condition).
func mrmcCondition(auc, cov [][]float64, i int, readers ReadersFactor) ORCondition {
	t, r := len(auc), len(auc[i])
	only := make([]bool, t)
	only[i] = true
	v, _, c2, _ := mrmcCovComponents(cov, t, r, only)
	mean := 0.0
	for _, x := range auc[i] {
		mean += x
	}
	mean /= float64(r)
	c := ORCondition{AUC: mean}
	var q float64
	if readers == RandomReaders && r > 1 {
		msr := 0.0
		for _, x := range auc[i] {
			msr += (x - mean) * (x - mean)
		}
		msr /= float64(r - 1)
		den := msr + float64(r)*math.Max(c2, 0)
		c.SE = math.Sqrt(den / float64(r))
		c.DF = den * den / (msr * msr / float64(r-1))
		q = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: c.DF}.Quantile(0.975)
	} else {
		c.SE = math.Sqrt(math.Max(0, v+float64(r-1)*c2) / float64(r))
		c.DF = math.Inf(1)
		q = distuv.UnitNormal.Quantile(0.975)
	}
	c.CI95 = [2]float64{mean - q*c.SE, mean + q*c.SE}
	return c
}

func mrmcDifference(a, b int, est, se, df float64) ORDifference {
	d := ORDifference{A: a, B: b, Estimate: est, SE: se, DF: df}
	var q float64
	if math.IsInf(df, 1) {
		q = distuv.UnitNormal.Quantile(0.975)
	} else {
		q = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Quantile(0.975)
	}
	d.CI95 = [2]float64{est - q*se, est + q*se}
	if se <= 0 {
		d.P = 1
		if est != 0 {
			d.P = 0
		}
		return d
	}
	d.Statistic = est / se
	if math.IsInf(df, 1) {
		d.P = 2 * distuv.UnitNormal.Survival(math.Abs(d.Statistic))
	} else {
		d.P = 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Survival(math.Abs(d.Statistic))
	}
	return d
}
