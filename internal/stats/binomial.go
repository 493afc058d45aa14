package stats

import (
	"fmt"
	"math"
)

// BinomialLowerBound is the one-sided Clopper–Pearson lower confidence
// bound on a success probability after k successes in n trials (Clopper &
// Pearson 1934, Biometrika 26(4):404–413): the p at which P(X ≥ k) = 1 −
// confidence for X ~ Binomial(n, p), that is the (1 − confidence) quantile
// of Beta(k, n − k + 1); 0 when k = 0. It is what scipy's
// stats.beta.ppf(1 - confidence, k, n - k + 1) gives.
func BinomialLowerBound(k, n int, confidence float64) (float64, error) {
	if n <= 0 || k < 0 || k > n || !(confidence > 0 && confidence < 1) {
		return 0, fmt.Errorf("binomial bound: need 0 <= k <= n, n > 0 and a confidence in (0, 1), got k=%d n=%d confidence=%v", k, n, confidence)
	}
	if k == 0 {
		return 0, nil
	}
	a, b := float64(k), float64(n-k+1)
	alpha := 1 - confidence
	if k == n { // Beta(n, 1): CDF x^n, closed form
		return math.Pow(alpha, 1/a), nil
	}
	lo, hi := 0.0, 1.0
	for i := 0; i < 200 && hi-lo > 1e-15; i++ {
		mid := (lo + hi) / 2
		if RegIncBeta(a, b, mid) < alpha {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2, nil
}

// RegIncBeta is the regularised incomplete beta function I_x(a, b) for
// a, b > 0 and x in [0, 1], by the continued fraction of Numerical Recipes
// (Press et al., 3rd ed., section 6.4, eq. 6.4.5) evaluated with the
// modified Lentz method, using the symmetry I_x(a, b) = 1 − I_{1−x}(b, a)
// where the fraction converges slowly. NaN when a, b or x is NaN or a, b
// is not positive (the continued fraction stops after at most 10000 terms
// whatever its input).
func RegIncBeta(a, b, x float64) float64 {
	switch {
	case math.IsNaN(a) || math.IsNaN(b) || math.IsNaN(x) || !(a > 0 && b > 0):
		return math.NaN()
	case x <= 0:
		return 0
	case x >= 1:
		return 1
	}
	la, _ := math.Lgamma(a)
	lb, _ := math.Lgamma(b)
	lab, _ := math.Lgamma(a + b)
	front := math.Exp(lab - la - lb + a*math.Log(x) + b*math.Log1p(-x))
	if x < (a+1)/(a+b+2) {
		return front * binomialBetaCF(a, b, x) / a
	}
	return 1 - front*binomialBetaCF(b, a, 1-x)/b
}

// binomialBetaCF evaluates the continued fraction of I_x(a, b) (Numerical Recipes
// betacf).
func binomialBetaCF(a, b, x float64) float64 {
	const tiny, eps = 1e-300, 1e-16
	qab, qap, qam := a+b, a+1, a-1
	c, d := 1.0, 1-qab*x/qap
	if math.Abs(d) < tiny {
		d = tiny
	}
	d = 1 / d
	h := d
	for m := 1; m <= 10000; m++ {
		fm := float64(m)
		m2 := 2 * fm
		aa := fm * (b - fm) * x / ((qam + m2) * (a + m2))
		d, c = binomialLentz(d, c, aa)
		h *= d * c
		aa = -(a + fm) * (qab + fm) * x / ((a + m2) * (qap + m2))
		d, c = binomialLentz(d, c, aa)
		del := d * c
		h *= del
		if math.Abs(del-1) < eps {
			break
		}
	}
	return h
}

// binomialLentz is one step of the modified Lentz recurrence.
func binomialLentz(d, c, aa float64) (float64, float64) {
	const tiny = 1e-300
	d = 1 + aa*d
	if math.Abs(d) < tiny {
		d = tiny
	}
	c = 1 + aa/c
	if math.Abs(c) < tiny {
		c = tiny
	}
	return 1 / d, c
}
