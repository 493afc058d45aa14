package stats

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// Brier is the Brier score (Brier 1950): the mean squared difference between
// the predicted probability of the event and the outcome (1 or 0).
func Brier(p []float64, y []bool) float64 {
	if len(p) == 0 || len(p) != len(y) {
		return math.NaN()
	}
	s := 0.0
	for i, q := range p {
		d := q
		if y[i] {
			d = q - 1
		}
		s += d * d
	}
	return s / float64(len(p))
}

// BootstrapPercentile is the percentile bootstrap interval (Efron &
// Tibshirani 1993, ch. 13) of a statistic of n cases: B resamples of n case
// indices drawn with replacement from a PCG stream seeded by seed; stat gets
// the resampled indices. Resamples whose statistic is NaN are dropped (a
// resample without one class, say). It returns the interval at level and the
// number of resamples kept.
func BootstrapPercentile(n, B int, seed uint64, level float64, stat func(idx []int) float64) (lo, hi float64, kept int, err error) {
	if n < 2 || B < 10 || !(level > 0 && level < 1) {
		return 0, 0, 0, fmt.Errorf("bootstrap: need n ≥ 2, B ≥ 10 and 0 < level < 1 (n %d, B %d, level %g)", n, B, level)
	}
	r := rand.New(rand.NewPCG(seed, 0x6d6f64656c666974))
	idx := make([]int, n)
	vals := make([]float64, 0, B)
	for b := 0; b < B; b++ {
		for i := range idx {
			idx[i] = r.IntN(n)
		}
		if v := stat(idx); !math.IsNaN(v) {
			vals = append(vals, v)
		}
	}
	if len(vals) < B/2 {
		return 0, 0, len(vals), errors.New("bootstrap: most resamples gave no value")
	}
	sort.Float64s(vals)
	a := (1 - level) / 2
	return Quantile(vals, a), Quantile(vals, 1-a), len(vals), nil
}

// LogisticFit is a maximum-likelihood logistic regression.
type LogisticFit struct {
	Coef   []float64 // intercept first when the design has a column of ones
	SE     []float64 // from the inverse observed information
	LogLik float64
	Iter   int
}

// Logistic fits P(y = 1) = σ(offset + X·β) by Newton–Raphson (iteratively
// reweighted least squares), as statsmodels Logit (with offset) and R's glm
// with family binomial. X has one row per case; offset may be nil.
func Logistic(X [][]float64, y []bool, offset []float64) (LogisticFit, error) {
	n := len(X)
	if n == 0 || n != len(y) || (offset != nil && len(offset) != n) {
		return LogisticFit{}, errors.New("logistic: design, outcomes and offset differ in length")
	}
	k := len(X[0])
	beta := make([]float64, k)
	ll := math.Inf(-1)
	for it := 1; it <= 100; it++ {
		grad := make([]float64, k)
		info := make([][]float64, k)
		for j := range info {
			info[j] = make([]float64, k)
		}
		cur := 0.0
		for i, x := range X {
			eta := modelfitDot(x, beta)
			if offset != nil {
				eta += offset[i]
			}
			p := 1 / (1 + math.Exp(-eta))
			yi := 0.0
			if y[i] {
				yi = 1
			}
			cur += yi*eta - modelfitLog1pExp(eta)
			w := p * (1 - p)
			for a := 0; a < k; a++ {
				grad[a] += (yi - p) * x[a]
				for b := 0; b < k; b++ {
					info[a][b] += w * x[a] * x[b]
				}
			}
		}
		inv, err := InverseSPD(info)
		if err != nil {
			return LogisticFit{}, fmt.Errorf("logistic: information matrix: %w (separated or constant data?)", err)
		}
		step := make([]float64, k)
		for a := 0; a < k; a++ {
			step[a] = modelfitDot(inv[a], grad)
			beta[a] += step[a]
		}
		if math.Abs(cur-ll) < 1e-12*(1+math.Abs(cur)) && modelfitMaxAbs(step) < 1e-10 {
			se := make([]float64, k)
			for a := range se {
				se[a] = math.Sqrt(inv[a][a])
			}
			// the log-likelihood at the final β
			return LogisticFit{Coef: beta, SE: se, LogLik: LogisticLogLik(X, y, offset, beta), Iter: it}, nil
		}
		ll = cur
	}
	return LogisticFit{}, errors.New("logistic: Newton–Raphson did not converge in 100 iterations (separated data?)")
}

// LogisticLogLik is the Bernoulli log-likelihood of σ(offset + X·β).
func LogisticLogLik(X [][]float64, y []bool, offset, beta []float64) float64 {
	s := 0.0
	for i, x := range X {
		eta := modelfitDot(x, beta)
		if offset != nil {
			eta += offset[i]
		}
		if y[i] {
			s += eta
		}
		s -= modelfitLog1pExp(eta)
	}
	return s
}

func modelfitLog1pExp(x float64) float64 {
	if x > 0 {
		return x + math.Log1p(math.Exp(-x))
	}
	return math.Log1p(math.Exp(x))
}

func modelfitDot(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

func modelfitMaxAbs(a []float64) float64 {
	m := 0.0
	for _, x := range a {
		m = math.Max(m, math.Abs(x))
	}
	return m
}

// Estimate is a coefficient with its Wald 95 % interval.
type Estimate struct {
	Value, SE float64
	CI95      [2]float64
}

func modelfitWald(v, se float64) Estimate {
	z := distuv.UnitNormal.Quantile(0.975)
	return Estimate{Value: v, SE: se, CI95: [2]float64{v - z*se, v + z*se}}
}

// CalibrationInterceptSlope returns the calibration intercept (calibration
// in the large: the intercept of a logistic model of y with the predicted
// logit lp as offset, slope fixed at 1) and the calibration slope (the slope
// of a logistic model of y on lp), each with its Wald interval (Van Calster
// et al. 2016, J Clin Epidemiol 74:167; Cox 1958). Perfect calibration is
// intercept 0 and slope 1.
func CalibrationInterceptSlope(lp []float64, y []bool) (intercept, slope Estimate, err error) {
	ones := make([][]float64, len(lp))
	both := make([][]float64, len(lp))
	for i, z := range lp {
		ones[i] = []float64{1}
		both[i] = []float64{1, z}
	}
	a, err := Logistic(ones, y, lp)
	if err != nil {
		return Estimate{}, Estimate{}, fmt.Errorf("calibration intercept: %w", err)
	}
	b, err := Logistic(both, y, nil)
	if err != nil {
		return Estimate{}, Estimate{}, fmt.Errorf("calibration slope: %w", err)
	}
	return modelfitWald(a.Coef[0], a.SE[0]), modelfitWald(b.Coef[1], b.SE[1]), nil
}

// Recalibration methods chosen by ClosedTest.
const (
	RecalNone           = "none"
	RecalIntercept      = "intercept"
	RecalInterceptSlope = "intercept+slope"
)

// LRTest is one likelihood-ratio test.
type LRTest struct {
	Name      string  `json:"name"`
	Statistic float64 `json:"statistic"` // 2·(log L1 − log L0)
	DF        int     `json:"df"`
	P         float64 `json:"p"`
}

// ClosedTestResult is the outcome of ClosedTest: the chosen method, its
// intercept and slope (new logit = Intercept + Slope·lp), the
// log-likelihoods of the three models and the tests run.
type ClosedTestResult struct {
	Method           string    `json:"method"`
	Intercept, Slope float64   `json:"-"`
	LogLik           []float64 `json:"-"` // none, intercept, intercept+slope
	Tests            []LRTest  `json:"tests"`
}

// ClosedTest chooses between keeping the predicted logits lp, recalibrating
// the intercept only, and recalibrating intercept and slope, by the closed
// testing procedure of Vergouwe et al. 2017 (Stat Med 36:4529) with
// likelihood-ratio tests at level alpha: first intercept+slope against no
// change (2 df); when that is not significant, no change; otherwise
// intercept+slope against intercept only (1 df): significant gives
// intercept+slope, not significant the intercept only. (Procedure as
// recalled from the paper's description, not re-read here.)
func ClosedTest(lp []float64, y []bool, alpha float64) (ClosedTestResult, error) {
	n := len(lp)
	ones := make([][]float64, n)
	both := make([][]float64, n)
	for i, z := range lp {
		ones[i] = []float64{1}
		both[i] = []float64{1, z}
	}
	ll0 := LogisticLogLik(ones, y, lp, []float64{0})
	m1, err := Logistic(ones, y, lp)
	if err != nil {
		return ClosedTestResult{}, err
	}
	m2, err := Logistic(both, y, nil)
	if err != nil {
		return ClosedTestResult{}, err
	}
	res := ClosedTestResult{Method: RecalNone, Intercept: 0, Slope: 1, LogLik: []float64{ll0, m1.LogLik, m2.LogLik}}
	t1 := modelfitLR("intercept+slope vs none", m2.LogLik, ll0, 2)
	res.Tests = append(res.Tests, t1)
	if t1.P >= alpha {
		return res, nil
	}
	t2 := modelfitLR("intercept+slope vs intercept", m2.LogLik, m1.LogLik, 1)
	res.Tests = append(res.Tests, t2)
	if t2.P < alpha {
		res.Method, res.Intercept, res.Slope = RecalInterceptSlope, m2.Coef[0], m2.Coef[1]
	} else {
		res.Method, res.Intercept = RecalIntercept, m1.Coef[0]
	}
	return res, nil
}

func modelfitLR(name string, ll1, ll0 float64, df int) LRTest {
	s := math.Max(0, 2*(ll1-ll0))
	return LRTest{Name: name, Statistic: s, DF: df, P: 1 - distuv.ChiSquared{K: float64(df)}.CDF(s)}
}
