package inference

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// The required thresholds share one per-score quantile, the smallest at
// which the one-sided 90 % Clopper–Pearson lower bound on the fraction of
// cases passing all of them together reaches 95 %. For 400 cases that takes
// at least 386 passing (scipy: stats.beta.ppf(0.1, 386, 15) = 0.95007, while
// 385 of 400 give 0.94719).
func TestFitThresholdsJointRetention(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	var sc []scored
	for i := 0; i < 400; i++ {
		sc = append(sc, scored{msp: rng.Float64(), energy: rng.NormFloat64(), maha: rng.ExpFloat64(), w1: rng.ExpFloat64()})
	}
	c := tinyCard([]byte("x"))
	var w1 []float64
	for _, x := range sc {
		w1 = append(w1, x.w1)
	}
	env := make([]bool, len(sc))
	for i := range env {
		env[i] = true
	}
	if err := fitThresholds(c, sc, w1, env, FitOptions{}.withDefaults(), "400 synthetic", "400 synthetic"); err != nil {
		t.Fatal(err)
	}
	th := c.OOD.Thresholds
	pass := 0
	for _, s := range sc {
		if !th.Mahalanobis.Fails(s.maha) && !th.Wasserstein.Fails(s.w1) {
			pass++
		}
	}
	if pass < 386 || pass > 388 {
		t.Errorf("%d of 400 pass, want 386 (the quantile step may add one or two)", pass)
	}
	// two independent scores: each must keep about √0.965 ≈ 0.982
	for _, r := range []float64{th.Mahalanobis.Retention, th.Wasserstein.Retention} {
		if math.Abs(r-math.Sqrt(0.965)) > 0.01 {
			t.Errorf("per-score retention %.4f, want about %.4f", r, math.Sqrt(0.965))
		}
	}
	if th.MSP.Required || th.Energy.Required || !th.Mahalanobis.Required || !strings.Contains(th.Mahalanobis.FittedOn, "400 synthetic") {
		t.Errorf("required flags or fitted_on: %+v", th)
	}
}

// Leave-one-out scores of training cases are larger than their in-sample
// scores (a case is farther from a reference fitted without it).
func TestLeaveOneOutScores(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	c := tinyCard([]byte("x"))
	var train []FitCase
	for i := 0; i < 30; i++ {
		f := make([]float64, 8)
		for j := range f {
			f[j] = rng.NormFloat64() + float64(i%2)
		}
		q := make([]float64, len(DefaultLevels()))
		for j := range q {
			q[j] = float64(j)/50 + 0.1*rng.NormFloat64()
		}
		train = append(train, FitCase{Facts: CaseFacts{Quantiles: q}, Output: Output{Logits: []float64{0, 1}, Features: f}, Label: i % 2})
	}
	opt := FitOptions{}.withDefaults()
	full := *c
	var err error
	if full.OOD.Features, err = fitFeatures(c, train, opt); err != nil {
		t.Fatal(err)
	}
	full.OOD.Intensity = fitIntensity(train, opt)
	loo, _, err := thresholdScores(&full, train, nil, opt)
	if err != nil {
		t.Fatal(err)
	}
	var in, out float64
	for i, fc := range train {
		s, _ := scoreCase(&full, fc)
		in += s.maha
		out += loo[i].maha
		if loo[i].w1 < s.w1-1e-12 {
			t.Errorf("case %d: leave-one-out W1 %v below in-sample %v", i, loo[i].w1, s.w1)
		}
	}
	if out <= in {
		t.Errorf("mean leave-one-out Mahalanobis %v not above in-sample %v", out/30, in/30)
	}
}

// A head_skew_si of exactly [0, 0] (fitted from facts measured before the
// skewness existed) is skipped rather than failing every scan.
func TestZeroSkewRangeSkipped(t *testing.T) {
	c := tinyCard([]byte("x"))
	has := func() bool {
		for _, ch := range RunChecks(c, CaseFacts{HeadSkewSI: -0.2}, ModelScores{}) {
			if ch.Name == CheckHeadSkewSI {
				return true
			}
		}
		return false
	}
	c.OOD.Envelope.HeadSkewSI = &Range{}
	if has() {
		t.Error("head_upright run with a [0, 0] range")
	}
	c.OOD.Envelope.HeadSkewSI = &Range{Min: -0.5, Max: 0}
	if !has() {
		t.Error("head_upright missing with a fitted range")
	}
	if s := (span{0, 0}).widenSigned(0.6); s != nil {
		t.Errorf("all-zero facts gave range %v", *s)
	}
}

// jointPasses counts a case that fails a check without a fitted threshold
// (the envelope) as failing, whatever its scores.
func TestJointPassesCountsEnvelope(t *testing.T) {
	cols := map[string][]float64{"mahalanobis": {1, 1, 9}}
	th := map[string]Threshold{"mahalanobis": {Value: 5, Direction: "max", Required: true}}
	if got := jointPasses(cols, []bool{true, false, true}, th); got != 1 {
		t.Errorf("%d pass, want 1 (case 2 fails the envelope, case 3 the threshold)", got)
	}
}

// The temperature is kept only when it lowers the held-out NLL: logits that
// are overconfident on both splits get T > 1 applied; logits overconfident
// on the fitting split but calibrated on the held-out split keep T = 1, and
// the decision says so.
func TestTemperatureKeptOnlyWhenHeldOutNLLDrops(t *testing.T) {
	c := tinyCard([]byte("x"))
	rng := rand.New(rand.NewPCG(41, 42))
	mk := func(n int, scale float64, noise float64) []FitCase {
		var out []FitCase
		for i := 0; i < n; i++ {
			y := i % 2
			z := scale * (float64(2*y-1) + rng.NormFloat64())
			if rng.Float64() < noise {
				y = 1 - y
			}
			out = append(out, FitCase{Output: Output{Logits: []float64{-z / 2, z / 2}}, Label: y})
		}
		return out
	}
	over := FitSplits{Temperature: mk(400, 6, 0.2), HeldOut: mk(400, 6, 0.2), TemperatureDescription: "fit", HeldOutDescription: "held"}
	cal, m, err := fitCalibration(c, over, FitOptions{}.withDefaults())
	if err != nil {
		t.Fatal(err)
	}
	if !(cal.Temperature > 1) || cal.Temperature != cal.FittedTemperature || !strings.Contains(cal.Decision, "applied") {
		t.Errorf("overconfident on both: %+v", cal)
	}
	var haveInterval bool
	for _, x := range m {
		if x.Name == "ece_after_scaling" && len(x.CI95) == 2 && x.CI95[0] <= x.Value && x.Value <= x.CI95[1]+0.05 {
			haveInterval = true
		}
	}
	if !haveInterval {
		t.Errorf("no ECE interval in %+v", m)
	}
	// fitted on noisy overconfident cases, held out on cases without label noise and small logits
	mixed := FitSplits{Temperature: mk(400, 6, 0.3), HeldOut: mk(400, 1, 0), TemperatureDescription: "fit", HeldOutDescription: "held"}
	cal, _, err = fitCalibration(c, mixed, FitOptions{}.withDefaults())
	if err != nil {
		t.Fatal(err)
	}
	if cal.Temperature != 1 || !(cal.FittedTemperature > 1) || !strings.Contains(cal.Decision, "does not lower") {
		t.Errorf("held-out NLL rises: %+v", cal)
	}
}
