package stats

import (
	"math/rand/v2"
	"testing"
)

// confoundData draws n cases from three sites where the label's rate
// differs by site (so site and label are associated, as in a confounded
// cohort) and a prediction = label signal + noise, plus planted · site
// effect when planted > 0.
func confoundData(seed uint64, n int, planted float64) (pred []float64, site [][]float64, label []int) {
	rng := rand.New(rand.NewPCG(seed, 3))
	for i := 0; i < n; i++ {
		s := rng.IntN(3)
		y := 0
		if rng.Float64() < []float64{0.3, 0.5, 0.7}[s] {
			y = 1
		}
		p := 1.2*float64(y) + rng.NormFloat64() + planted*float64(s)
		pred = append(pred, p)
		site = append(site, []float64{b2f(s == 1), b2f(s == 2)})
		label = append(label, y)
	}
	return pred, site, label
}

// TestPartialConfounderFindsPlantedOnly: over 20 seeds, the partial
// confounder test (Spisak 2022) at level 0.05 rejects when the prediction
// depends on site beyond the label (effect 0.5 SD per site step, n = 300)
// in at least 18, and when it does not (site related to the label only) in
// at most 3 (expected 1 at this level; 3 or more happens with probability
// about 0.075 for a valid test, so the bound is loose enough not to flake
// and tight enough to catch a test that ignores the label).
func TestPartialConfounderFindsPlantedOnly(t *testing.T) {
	found, false_ := 0, 0
	for seed := uint64(1); seed <= 20; seed++ {
		pred, site, label := confoundData(seed, 300, 0.5)
		r, err := PartialConfounder(pred, site, label, 400, seed)
		if err != nil {
			t.Fatal(err)
		}
		if r.P < 0.05 {
			found++
		}
		pred, site, label = confoundData(seed+100, 300, 0)
		r, err = PartialConfounder(pred, site, label, 400, seed)
		if err != nil {
			t.Fatal(err)
		}
		if r.P < 0.05 {
			false_++
		}
	}
	if found < 18 || false_ > 3 {
		t.Errorf("planted confound found in %d of 20 (want >= 18); absent confound flagged in %d of 20 (want <= 3)", found, false_)
	}
	t.Logf("planted found %d/20, absent flagged %d/20", found, false_)
}

// TestClosedTestChoices: the closed test keeps well-calibrated
// probabilities, updates the intercept when only the baseline risk
// differs, and chooses logistic recalibration when the slope is off
// (n = 2000; Vergouwe et al. 2017 describe these three situations).
func TestClosedTestChoices(t *testing.T) {
	for _, c := range []struct {
		a, b float64
		want string
	}{{0, 1, RecalibrateNone}, {0.8, 1, RecalibrateIntercept}, {0, 0.5, RecalibrateLogistic}} {
		p, y := calibrationCase(7, 2000, c.a, c.b)
		cal, err := CalibrationFit(p, y)
		if err != nil {
			t.Fatal(err)
		}
		if got := ClosedTestChoice(cal, 0.05); got.Choice != c.want {
			t.Errorf("a=%g b=%g: chose %s (%+v), want %s", c.a, c.b, got.Choice, got, c.want)
		}
	}
}

// TestBootstrapCoversBrier: the percentile interval is reproducible for a
// seed and brackets the estimate.
func TestBootstrapCoversBrier(t *testing.T) {
	p, y := calibrationCase(5, 400, 0, 1)
	stat := func(idx []int) float64 {
		pp, yy := make([]float64, len(idx)), make([]bool, len(idx))
		for k, i := range idx {
			pp[k], yy[k] = p[i], y[i]
		}
		return Brier(pp, yy)
	}
	a, err := Bootstrap(len(p), 500, 9, 0.95, stat)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := Bootstrap(len(p), 500, 9, 0.95, stat)
	if a != b || !(a.Lo < a.Estimate && a.Estimate < a.Hi) || a.Reps != 500 {
		t.Errorf("bootstrap %+v, again %+v", a, b)
	}
}
