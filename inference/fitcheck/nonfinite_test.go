package fitcheck

import (
	"math"
	"testing"
)

// A NaN score has no order: fitting a threshold on it is an error, not a
// threshold chosen by where sort put the NaN; NaN features are an error of
// the Mahalanobis score, not a silent "no class means".
func TestNonFiniteScores(t *testing.T) {
	if _, _, err := ThresholdAt([]float64{1, math.NaN(), 2}, 0.95, "max"); err == nil {
		t.Error("ThresholdAt accepted a NaN")
	}
	prec := [][]float64{{1, 0}, {0, 1}}
	means := [][]float64{{0, 0}, {1, 1}}
	for _, f := range [][]float64{{math.NaN(), 0}, {math.Inf(1), 0}} {
		if _, _, err := Mahalanobis(f, means, prec); err == nil {
			t.Errorf("Mahalanobis accepted %v", f)
		}
	}
	if d, c, err := Mahalanobis([]float64{1, 1}, means, prec); err != nil || d != 0 || c != 1 {
		t.Errorf("Mahalanobis of a class mean: %v, %d, %v", d, c, err)
	}
}

// fitcheckValue maps a byte to a value rich in ties and non-finite numbers.
func fitcheckValue(b byte) float64 {
	switch b {
	case 255:
		return math.NaN()
	case 254:
		return math.Inf(1)
	case 253:
		return math.Inf(-1)
	case 252:
		return math.MaxFloat64
	}
	return float64(int(b%32) - 16)
}

// FuzzScores: the fit-check scores never panic or hang on NaN and ±Inf;
// MSP stays in [0, 1] (or NaN), a threshold is fitted exactly when no value
// is NaN, and Mahalanobis refuses non-finite features.
func FuzzScores(f *testing.F) {
	f.Add([]byte{1, 2, 3, 4, 5, 6})
	f.Add([]byte{255, 1, 254, 2, 253, 3})
	f.Add([]byte{252, 252, 0, 0, 16, 16})
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) < 2 {
			return
		}
		v := make([]float64, len(data))
		nan := false
		for i, b := range data {
			v[i] = fitcheckValue(b)
			nan = nan || math.IsNaN(v[i])
		}
		if m := MSP(v[:2], 1); !math.IsNaN(m) && !(m >= 0 && m <= 1) {
			t.Fatalf("MSP %v of %v", m, v[:2])
		}
		_ = Energy(v[:2], 1)
		if _, _, err := ThresholdAt(v, 0.95, "max"); (err == nil) == nan {
			t.Fatalf("ThresholdAt error %v with NaN=%v", err, nan)
		}
		p := len(v) / 2
		prec := make([][]float64, p)
		for i := range prec {
			prec[i] = make([]float64, p)
			prec[i][i] = 1
		}
		d, _, err := Mahalanobis(v[:p], [][]float64{v[p : 2*p]}, prec)
		finite := true
		for _, x := range v[:p] {
			finite = finite && !math.IsNaN(x) && !math.IsInf(x, 0)
		}
		if finite != (err == nil) {
			t.Fatalf("Mahalanobis error %v for features %v", err, v[:p])
		}
		_ = d
	})
}
