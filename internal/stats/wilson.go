package stats

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Wilson returns the Wilson score interval for a proportion of k successes in
// n trials at the given confidence level (Wilson 1927, JASA 22:209; the
// method "wilson" of statsmodels proportion_confint). It does not collapse to
// a point at 0 or n successes, which is why it is used for sensitivity and
// specificity on small samples.
func Wilson(k, n int, level float64) (lo, hi float64, err error) {
	if n <= 0 || k < 0 || k > n {
		return 0, 0, fmt.Errorf("wilson interval: %d successes in %d trials", k, n)
	}
	if !(level > 0 && level < 1) {
		return 0, 0, fmt.Errorf("wilson interval: confidence level %g is not in (0, 1)", level)
	}
	z := distuv.UnitNormal.Quantile(1 - (1-level)/2)
	nf := float64(n)
	p := float64(k) / nf
	z2 := z * z
	denom := 1 + z2/nf
	center := (p + z2/(2*nf)) / denom
	half := z / denom * math.Sqrt(p*(1-p)/nf+z2/(4*nf*nf))
	return math.Max(0, center-half), math.Min(1, center+half), nil
}
