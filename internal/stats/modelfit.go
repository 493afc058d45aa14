package stats

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Estimate is a coefficient with its Wald 95 % interval.
type Estimate struct {
	Value, SE float64
	CI95      [2]float64
}

// CalibrationWald returns the calibration intercept (calibration in the
// large) and slope of CalibrationFit with Wald 95 % intervals from the
// inverse observed information of each logistic model (as statsmodels
// Logit's conf_int and R's confint.default).
func CalibrationWald(p []float64, truth []bool) (intercept, slope Estimate, c Calibration, err error) {
	c, err = CalibrationFit(p, truth)
	if err != nil {
		return Estimate{}, Estimate{}, c, err
	}
	lp := make([]float64, len(p))
	for i, v := range p {
		lp[i] = Logit(v)
	}
	// intercept-only model with lp as offset: information Σ w
	// slope model (a', b) on lp: information [[Σw, Σw·lp], [Σw·lp, Σw·lp²]]
	var w0, s0, s1, s2 float64
	for _, z := range lp {
		q := Sigmoid(c.Intercept + z)
		w0 += q * (1 - q)
		r := Sigmoid(c.SlopeIntercept + c.Slope*z)
		w := r * (1 - r)
		s0, s1, s2 = s0+w, s1+w*z, s2+w*z*z
	}
	det := s0*s2 - s1*s1
	if !(w0 > 0) || !(det > 0) {
		return Estimate{}, Estimate{}, c, fmt.Errorf("calibration: singular information (constant or separated predictions)")
	}
	a, b := modelfitWald(c.Intercept, 1/math.Sqrt(w0)), modelfitWald(c.Slope, math.Sqrt(s0/det))
	if !(a.SE < 1e3 && b.SE < 1e3) {
		// the maximum-likelihood estimate runs off to infinity when the
		// predictions separate the classes perfectly
		return a, b, c, fmt.Errorf("calibration: not estimable (the predictions separate the classes: standard errors %.3g and %.3g)", a.SE, b.SE)
	}
	return a, b, c, nil
}

func modelfitWald(v, se float64) Estimate {
	z := distuv.UnitNormal.Quantile(0.975)
	return Estimate{Value: v, SE: se, CI95: [2]float64{v - z*se, v + z*se}}
}
