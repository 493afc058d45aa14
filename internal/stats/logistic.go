package stats

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/stat/distuv"
)

// LogisticOptions tune a logistic-regression fit.
type LogisticOptions struct {
	// Offset is added to the linear predictor of each case (nil: none).
	Offset []float64
	// Ridge, when positive, maximises log L − Ridge/2 · Σ β_j² over the
	// coefficients other than the intercept (sklearn's LogisticRegression
	// with C = 1/Ridge).
	Ridge float64
	// NoIntercept leaves out the intercept column.
	NoIntercept bool
}

// LogisticFit is a fitted logistic regression.
type LogisticFit struct {
	Coef      []float64 // intercept first (unless NoIntercept), then one per column of x
	LogLik    float64   // unpenalised log-likelihood at Coef
	Iter      int
	Converged bool
}

// Logistic fits P(y=1) = 1/(1+exp(−(β₀ + xβ + offset))) by iteratively
// reweighted least squares (Newton–Raphson on the log-likelihood; McCullagh
// and Nelder 1989, Generalized Linear Models, §4.4). x holds one row per
// case (it may have no columns). It stops when no coefficient moves by more
// than 1e-10 (relative), or after 100 steps (Converged false, as with
// separated data).
func Logistic(x [][]float64, y []bool, opt LogisticOptions) (LogisticFit, error) {
	n := len(y)
	if n == 0 || len(x) != n || (opt.Offset != nil && len(opt.Offset) != n) {
		return LogisticFit{}, errors.New("logistic: rows, labels and offsets differ in number")
	}
	design := logisticDesign(x, !opt.NoIntercept)
	p := len(design[0])
	if p == 0 {
		return LogisticFit{}, errors.New("logistic: no coefficients to fit")
	}
	beta := make([]float64, p)
	fit := LogisticFit{}
	for fit.Iter = 1; fit.Iter <= 100; fit.Iter++ {
		step, err := logisticNewtonStep(design, y, opt, beta, !opt.NoIntercept)
		if err != nil {
			return LogisticFit{}, err
		}
		moved := 0.0
		for j := range beta {
			beta[j] += step[j]
			moved = math.Max(moved, math.Abs(step[j])/math.Max(1, math.Abs(beta[j])))
		}
		if moved < 1e-10 {
			fit.Converged = true
			break
		}
	}
	fit.Coef = beta
	fit.LogLik = logisticLogLik(design, y, opt.Offset, beta)
	return fit, nil
}

func logisticDesign(x [][]float64, intercept bool) [][]float64 {
	d := make([][]float64, len(x))
	for i, r := range x {
		if intercept {
			d[i] = append([]float64{1}, r...)
		} else {
			d[i] = append([]float64(nil), r...)
		}
	}
	return d
}

func logisticEta(row, beta []float64, off []float64, i int) float64 {
	eta := 0.0
	for j, v := range row {
		eta += v * beta[j]
	}
	if off != nil {
		eta += off[i]
	}
	return eta
}

// logisticNewtonStep solves (XᵀWX + R) δ = Xᵀ(y − μ) − Rβ.
func logisticNewtonStep(d [][]float64, y []bool, opt LogisticOptions, beta []float64, intercept bool) ([]float64, error) {
	p := len(beta)
	h := make([][]float64, p)
	for j := range h {
		h[j] = make([]float64, p)
	}
	g := make([]float64, p)
	for i, row := range d {
		mu := Sigmoid(logisticEta(row, beta, opt.Offset, i))
		w := math.Max(mu*(1-mu), 1e-12)
		r := -mu
		if y[i] {
			r = 1 - mu
		}
		for j, a := range row {
			g[j] += a * r
			for k := 0; k <= j; k++ {
				h[j][k] += w * a * row[k]
			}
		}
	}
	for j := 0; j < p; j++ {
		if opt.Ridge > 0 && (j > 0 || !intercept) {
			h[j][j] += opt.Ridge
			g[j] -= opt.Ridge * beta[j]
		}
		for k := 0; k < j; k++ {
			h[k][j] = h[j][k]
		}
	}
	inv, err := InverseSPD(h)
	if err != nil {
		return nil, fmt.Errorf("logistic: the information matrix is singular (a constant or duplicated column?): %w", err)
	}
	step := make([]float64, p)
	for j := range step {
		for k := range g {
			step[j] += inv[j][k] * g[k]
		}
	}
	return step, nil
}

func logisticLogLik(d [][]float64, y []bool, off, beta []float64) float64 {
	ll := 0.0
	for i, row := range d {
		eta := logisticEta(row, beta, off, i)
		// log σ(η) = −log(1+e^−η); log(1−σ(η)) = −log(1+e^η)
		if y[i] {
			ll -= softplus(-eta)
		} else {
			ll -= softplus(eta)
		}
	}
	return ll
}

func softplus(x float64) float64 {
	if x > 30 {
		return x
	}
	return math.Log1p(math.Exp(x))
}

// Sigmoid is 1/(1+e^−x).
func Sigmoid(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	e := math.Exp(x)
	return e / (1 + e)
}

// Logit is log(p/(1−p)), with p clipped to [1e-12, 1 − 1e-12].
func Logit(p float64) float64 {
	p = math.Min(math.Max(p, 1e-12), 1-1e-12)
	return math.Log(p / (1 - p))
}

// LikelihoodRatioTest is the p-value of 2(ll1 − ll0) against a chi-square
// distribution with df degrees of freedom (Wilks 1938).
func LikelihoodRatioTest(ll0, ll1 float64, df int) float64 {
	stat := math.Max(0, 2*(ll1-ll0))
	return distuv.ChiSquared{K: float64(df)}.Survival(stat)
}

// Calibration is the calibration of predicted probabilities on a sample:
// calibration-in-the-large (intercept a with logit(p) as offset, slope
// fixed at 1) and the calibration slope b with its intercept (logit(y) =
// a' + b·logit(p)), as in Van Calster et al. 2019 (BMC Medicine 17:230),
// with the log-likelihoods of the three nested recalibration models.
type Calibration struct {
	Intercept          float64 // calibration-in-the-large; 0 when perfect
	Slope              float64 // 1 when perfect; < 1 means too extreme predictions
	SlopeIntercept     float64 // the intercept fitted together with the slope
	LogLikOriginal     float64 // predictions as they are
	LogLikIntercept    float64 // intercept updated
	LogLikRecalibrated float64 // intercept and slope updated
}

// CalibrationFit fits the calibration intercept and slope of probabilities p.
func CalibrationFit(p []float64, truth []bool) (Calibration, error) {
	lp := make([]float64, len(p))
	x := make([][]float64, len(p))
	empty := make([][]float64, len(p))
	for i, v := range p {
		lp[i] = Logit(v)
		x[i] = []float64{lp[i]}
		empty[i] = nil
	}
	var c Calibration
	ones := logisticDesign(empty, false)
	c.LogLikOriginal = logisticLogLik(ones, truth, lp, nil)
	in, err := Logistic(empty, truth, LogisticOptions{Offset: lp})
	if err != nil {
		return c, fmt.Errorf("calibration intercept: %w", err)
	}
	sl, err := Logistic(x, truth, LogisticOptions{})
	if err != nil {
		return c, fmt.Errorf("calibration slope: %w", err)
	}
	c.Intercept, c.LogLikIntercept = in.Coef[0], in.LogLik
	c.SlopeIntercept, c.Slope, c.LogLikRecalibrated = sl.Coef[0], sl.Coef[1], sl.LogLik
	return c, nil
}

// Recalibration methods the closed test chooses between.
const (
	RecalibrateNone      = "none"      // keep the probabilities
	RecalibrateIntercept = "intercept" // recalibration in the large
	RecalibrateLogistic  = "logistic"  // intercept and slope
)

// ClosedTest is the closed testing procedure of Vergouwe et al. 2017 (Stat
// Med 36:4529–4539) restricted to the updates possible from a probability
// alone: first the logistic recalibration against the original (2 df); if
// it does not differ at alpha, keep the original; else logistic
// recalibration against recalibration in the large (1 df): if it differs,
// choose logistic recalibration, otherwise the intercept update.
type ClosedTest struct {
	Choice                   string
	PRecalibratedVsOriginal  float64
	PRecalibratedVsIntercept float64
}

// ClosedTestChoice runs the closed test on a fitted calibration.
func ClosedTestChoice(c Calibration, alpha float64) ClosedTest {
	t := ClosedTest{
		PRecalibratedVsOriginal:  LikelihoodRatioTest(c.LogLikOriginal, c.LogLikRecalibrated, 2),
		PRecalibratedVsIntercept: LikelihoodRatioTest(c.LogLikIntercept, c.LogLikRecalibrated, 1),
	}
	switch {
	case t.PRecalibratedVsOriginal >= alpha:
		t.Choice = RecalibrateNone
	case t.PRecalibratedVsIntercept < alpha:
		t.Choice = RecalibrateLogistic
	default:
		t.Choice = RecalibrateIntercept
	}
	return t
}

// StratifiedFolds assigns each case to one of k folds, dealing each class's
// cases (in an order shuffled by seed) round-robin, so every fold holds
// both classes in about the overall proportion.
func StratifiedFolds(truth []bool, k int, seed uint64) []int {
	folds := make([]int, len(truth))
	rng := rand.New(rand.NewPCG(seed, 0x2545f4914f6cdd1d))
	for _, cls := range []bool{false, true} {
		var idx []int
		for i, y := range truth {
			if y == cls {
				idx = append(idx, i)
			}
		}
		rng.Shuffle(len(idx), func(a, b int) { idx[a], idx[b] = idx[b], idx[a] })
		for j, i := range idx {
			folds[i] = j % k
		}
	}
	return folds
}

// CrossValidatedAUROC is the AUROC of out-of-fold predictions: for each
// fold, a ridge logistic regression (Ridge, on columns standardised with
// the training folds' mean and population standard deviation) is fitted on
// the other folds and predicts the held-out fold; the predictions of all
// folds are pooled and scored together. It returns the AUROC and the
// out-of-fold probabilities.
func CrossValidatedAUROC(x [][]float64, truth []bool, folds []int, ridge float64) (float64, []float64, error) {
	n := len(truth)
	if len(x) != n || len(folds) != n {
		return math.NaN(), nil, errors.New("cross-validation: rows, labels and folds differ in number")
	}
	k := 0
	for _, f := range folds {
		k = max(k, f+1)
	}
	oof := make([]float64, n)
	for f := 0; f < k; f++ {
		var tx [][]float64
		var ty []bool
		for i := range truth {
			if folds[i] != f {
				tx, ty = append(tx, x[i]), append(ty, truth[i])
			}
		}
		mean, sd := logisticColumnScale(tx)
		fit, err := Logistic(logisticScale(tx, mean, sd), ty, LogisticOptions{Ridge: ridge})
		if err != nil {
			return math.NaN(), nil, fmt.Errorf("fold %d: %w", f, err)
		}
		for i := range truth {
			if folds[i] == f {
				row := logisticScale([][]float64{x[i]}, mean, sd)[0]
				oof[i] = Sigmoid(logisticEta(append([]float64{1}, row...), fit.Coef, nil, 0))
			}
		}
	}
	return AUROC(oof, truth), oof, nil
}

func logisticColumnScale(x [][]float64) (mean, sd []float64) {
	if len(x) == 0 {
		return nil, nil
	}
	p := len(x[0])
	mean, sd = make([]float64, p), make([]float64, p)
	for _, r := range x {
		for j, v := range r {
			mean[j] += v / float64(len(x))
		}
	}
	for _, r := range x {
		for j, v := range r {
			sd[j] += (v - mean[j]) * (v - mean[j]) / float64(len(x))
		}
	}
	for j := range sd {
		sd[j] = math.Sqrt(sd[j])
		if sd[j] == 0 {
			sd[j] = 1 // a constant column, as sklearn's StandardScaler
		}
	}
	return mean, sd
}

func logisticScale(x [][]float64, mean, sd []float64) [][]float64 {
	out := make([][]float64, len(x))
	for i, r := range x {
		out[i] = make([]float64, len(r))
		for j, v := range r {
			out[i][j] = (v - mean[j]) / sd[j]
		}
	}
	return out
}
