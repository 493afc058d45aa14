package inference

import (
	"fmt"
	"math"

	"brightfold/inference/fitcheck"
	"brightfold/internal/stats"
)

// FitCase is one training or validation case for FitReference: its
// measurements (MeasureCase with FitOptions.Levels), the model's outputs at
// temperature 1, and its class index in the card's Classes.
type FitCase struct {
	Facts  CaseFacts
	Output Output
	Label  int
}

// FitOptions control FitReference.
type FitOptions struct {
	// Retention is the fraction of in-distribution scans that the verdict
	// must keep (default 0.95): the required score thresholds are set at one
	// common per-score quantile, the smallest at which the one-sided
	// Clopper–Pearson lower bound, at Confidence, on the fraction of the
	// threshold-fitting cases passing all of them together reaches
	// Retention. The bound, rather than the observed fraction, leaves a
	// margin for the sampling error of a quantile fitted on a few hundred
	// cases, so that fresh in-distribution scans keep Retention.
	Retention float64
	// Confidence of that bound (default 0.9).
	Confidence float64
	// Levels are the intensity-profile quantile levels (default EvenLevels(99)).
	Levels []float64
	// Margin widens every envelope range (default 0.15): [min/(1+m), max·(1+m)].
	Margin float64
	// ConfidenceRequired makes MSP and energy required checks. By default they
	// are reported but advisory: a low confidence is expected on borderline
	// in-distribution cases, so alone it does not make a scan unfamiliar.
	ConfidenceRequired bool
	// Modalities accepted when no training header states one (default ["MR"]).
	Modalities []string
	// Description names the cases, e.g. "160 training phantoms, seed 1"; it
	// goes into every fitted_on field.
	TrainDescription, ValidationDescription string
}

// DefaultLevels are the intensity-profile quantile levels: 99 levels (k−½)/99.
func DefaultLevels() []float64 { return stats.EvenLevels(99) }

// HU signature limits (chosen here, not from a standard): a head MR has no
// voxels near −1000, a head CT in Hounsfield units has a large fraction of
// air around the head and some bone.
const (
	DefaultHUAirFraction  = 0.02
	DefaultHUBoneFraction = 0.001
)

// FitSplits are the cases of each fitting step. No case may serve two
// steps; Train is required, every other split may be empty (see
// FitReferenceSplits for what an empty split changes). Each description
// names the cases, e.g. "200 validation phantoms (cohort seed 1, HMRU-0601
// to HMRU-0800)"; it goes into the fitted_on fields and the metrics.
type FitSplits struct {
	// Train: the envelope, the intensity reference, the feature class means
	// and shared covariance (the cases the model was trained on).
	Train []FitCase
	// Choose: the required thresholds are chosen on these (see
	// FitOptions.Retention).
	Choose []FitCase
	// Temperature: the temperature is fitted on these.
	Temperature []FitCase
	// HeldOut: used by no fit. With the thresholds and the temperature fixed,
	// they give the Clopper–Pearson bound on the pass rate of every required
	// check, decide whether the fitted temperature is kept (it must lower
	// their NLL) and give the calibration metrics.
	HeldOut []FitCase
	// Descriptions of the four splits.
	TrainDescription, ChooseDescription, TemperatureDescription, HeldOutDescription string
}

// FitReference fits the card's OOD reference and calibration from training
// cases and validation cases that no gradient step used. It splits val by
// case index into three interleaved thirds (index mod 3: 0 chooses the
// thresholds, 1 fits the temperature, 2 is held out) and calls
// FitReferenceSplits; opt.ValidationDescription names val. Without val the
// thresholds come from the training cases' leave-one-out scores, the bound
// is in-sample, and the temperature is fitted on the training cases and
// applied unchecked (Calibration.Decision says so; the caller should check
// it on cases of its own).
func FitReference(c *Card, train, val []FitCase, opt FitOptions) (OODReference, Calibration, []Metric, error) {
	opt = opt.withDefaults()
	s := FitSplits{Train: train, TrainDescription: opt.TrainDescription}
	for i, fc := range val {
		switch i % 3 {
		case 0:
			s.Choose = append(s.Choose, fc)
		case 1:
			s.Temperature = append(s.Temperature, fc)
		default:
			s.HeldOut = append(s.HeldOut, fc)
		}
	}
	third := func(k int, n int) string {
		return fmt.Sprintf("%d of the %s (every third from number %d)", n, opt.ValidationDescription, k+1)
	}
	if len(val) == 0 { // as before the splits existed: the temperature on the training cases
		s.Temperature, s.TemperatureDescription = train, opt.TrainDescription+" (in-sample)"
		return FitReferenceSplits(c, s, opt)
	}
	s.ChooseDescription = third(0, len(s.Choose))
	s.TemperatureDescription = third(1, len(s.Temperature))
	s.HeldOutDescription = third(2, len(s.HeldOut))
	return FitReferenceSplits(c, s, opt)
}

// FitReferenceSplits fits the card's OOD reference and calibration: the
// envelope from the training cases' measurements (ranges widened by the
// margin); the intensity reference as the mean of the training quantile
// functions (the 1D Wasserstein barycentre); the feature class means and the
// shared covariance of Lee et al. 2018 (class-centred training features)
// with Ledoit-Wolf shrinkage, inverted; thresholds at the retention (see
// FitOptions.Retention) chosen on s.Choose (the intensity distance on the
// training cases' leave-one-out scores pooled with the choosing cases', see
// thresholdScores); then, with the thresholds fixed, the Clopper–Pearson
// bound on the rate at which s.HeldOut passes every required check. The
// temperature minimises the NLL of s.Temperature (Guo et al. 2017) and is
// kept only if it lowers the NLL of s.HeldOut; otherwise T = 1, and the
// card's calibration.decision says which happened and why.
//
// Without choosing cases the thresholds are chosen on the training cases'
// leave-one-out scores; without held-out cases the bound is computed on the
// choosing cases and fitted_on says it is in-sample, and the fitted T is
// applied unchecked (the decision says so); without temperature cases
// T = 1. It returns the reference, the calibration and the metrics (on the held-out cases: AUROC, accuracy, ECE with a bootstrap
// 95 % interval and Brier score at T = 1 and at the card's T, NLL at both,
// and the pass rate of the fit check with its bound).
func FitReferenceSplits(c *Card, s FitSplits, opt FitOptions) (OODReference, Calibration, []Metric, error) {
	opt = opt.withDefaults()
	if s.TrainDescription == "" {
		s.TrainDescription = opt.TrainDescription
	}
	train := s.Train
	if len(train) < 4 {
		return OODReference{}, Calibration{}, nil, fmt.Errorf("fit reference: need at least 4 training cases, got %d", len(train))
	}
	opt.TrainDescription = s.TrainDescription
	ref := OODReference{Envelope: fitEnvelope(train, opt)}
	ref.Envelope.FittedOn = s.TrainDescription
	ref.Intensity = fitIntensity(train, opt)
	feats, err := fitFeatures(c, train, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	ref.Features = feats
	tmp := *c
	tmp.OOD = ref
	chooseCases := s.Choose
	sc, w1Pool, err := thresholdScores(&tmp, train, chooseCases, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	desc := s.ChooseDescription
	w1Desc := fmt.Sprintf("%s (leave-one-out) and %s", s.TrainDescription, s.ChooseDescription)
	if len(chooseCases) == 0 {
		chooseCases = train
		desc = s.TrainDescription + " (leave-one-out)"
		w1Desc = desc
	}
	env, err := envelopePasses(&tmp, chooseCases)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	if err := fitThresholds(&tmp, sc, w1Pool, env, opt, desc, w1Desc); err != nil {
		return ref, Calibration{}, nil, err
	}
	boundCases, boundDesc := s.HeldOut, s.HeldOutDescription
	if len(boundCases) == 0 {
		boundCases, boundDesc = chooseCases, ""
	}
	passMetrics, err := boundThresholds(&tmp, boundCases, boundDesc, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	ref.Thresholds = tmp.OOD.Thresholds
	cal, metrics, err := fitCalibration(c, s, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	return ref, cal, append(metrics, passMetrics...), nil
}

func (o FitOptions) withDefaults() FitOptions {
	if o.Retention == 0 {
		o.Retention = 0.95
	}
	if o.Confidence == 0 {
		o.Confidence = 0.9
	}
	if len(o.Levels) == 0 {
		o.Levels = DefaultLevels()
	}
	if o.Margin == 0 {
		o.Margin = 0.15
	}
	if len(o.Modalities) == 0 {
		o.Modalities = []string{"MR"}
	}
	if o.TrainDescription == "" {
		o.TrainDescription = "training cases"
	}
	if o.ValidationDescription == "" {
		o.ValidationDescription = "validation cases"
	}
	return o
}

type span struct{ lo, hi float64 }

func newSpan() span { return span{math.Inf(1), math.Inf(-1)} }

func (s *span) add(x float64) {
	if math.IsNaN(x) {
		return
	}
	s.lo, s.hi = math.Min(s.lo, x), math.Max(s.hi, x)
}

func (s span) widen(m float64) Range {
	if s.lo > s.hi {
		return Range{}
	}
	return Range{Min: s.lo / (1 + m), Max: s.hi * (1 + m)}
}

// widenSigned widens a range of a signed quantity by m times the larger of
// its width and its largest magnitude, on both sides.
func (s span) widenSigned(m float64) *Range {
	if s.lo > s.hi || (s.lo == 0 && s.hi == 0) {
		// no measurements, or facts measured before the quantity existed
		// (all zero): leave the range out so that the check is skipped
		return nil
	}
	w := m * math.Max(s.hi-s.lo, math.Max(math.Abs(s.lo), math.Abs(s.hi)))
	return &Range{Min: s.lo - w, Max: s.hi + w}
}

func fitEnvelope(train []FitCase, opt FitOptions) Envelope {
	sp, th, vol, aplr, siap, noise := newSpan(), newSpan(), newSpan(), newSpan(), newSpan(), newSpan()
	skewSI := newSpan()
	fov := [3]float64{math.Inf(1), math.Inf(1), math.Inf(1)}
	minSlices, maxAniso, maxObl := math.MaxInt, 1.0, 0.0
	mods := map[string]bool{}
	var modList []string
	for _, tc := range train {
		f := tc.Facts
		for a := 0; a < 3; a++ {
			sp.add(f.SpacingMm[a])
			fov[a] = math.Min(fov[a], f.FOVMm[a])
			minSlices = min(minSlices, f.Dims[a])
		}
		th.add(f.SliceThicknessMm)
		vol.add(f.HeadVolumeMl)
		aplr.add(f.HeadAPOverLR)
		siap.add(f.HeadSIOverAP)
		noise.add(f.NoiseRatio)
		skewSI.add(f.HeadSkewSI)
		maxAniso = math.Max(maxAniso, f.Anisotropy)
		maxObl = math.Max(maxObl, f.ObliquityDeg)
		if f.Modality != "" && !mods[f.Modality] {
			mods[f.Modality] = true
			modList = append(modList, f.Modality)
		}
	}
	if len(modList) == 0 {
		modList = opt.Modalities
	}
	m := opt.Margin
	e := Envelope{Modalities: modList, SpacingMm: sp.widen(m), SliceThicknessMm: th.widen(m),
		MinSlices: max(1, minSlices/2), MaxAnisotropy: math.Max(1.25, maxAniso*(1+m)), MaxObliquityDeg: maxObl + 10,
		HeadVolumeMl: vol.widen(m), HeadAPOverLR: aplr.widen(m), HeadSIOverAP: siap.widen(m), NoiseRatio: noise.widen(m),
		HeadSkewSI: skewSI.widenSigned(4 * m)}
	for a := 0; a < 3; a++ {
		e.MinFOVMm[a] = fov[a] / (1 + m)
	}
	return e
}

func fitIntensity(train []FitCase, opt FitOptions) IntensityReference {
	q := make([]float64, len(opt.Levels))
	n := 0
	for _, tc := range train {
		if len(tc.Facts.Quantiles) != len(q) || !allFinite(tc.Facts.Quantiles) {
			continue
		}
		for i, x := range tc.Facts.Quantiles {
			q[i] += x
		}
		n++
	}
	for i := range q {
		q[i] /= float64(max(n, 1))
	}
	return IntensityReference{Levels: opt.Levels, Quantiles: q,
		FittedOn:      fmt.Sprintf("mean of the normalised head-intensity quantile functions of %d of the %s (the 1D Wasserstein-1 barycentre)", n, opt.TrainDescription),
		HUAirFraction: DefaultHUAirFraction, HUBoneFraction: DefaultHUBoneFraction,
		HUSignatureRule: "fixed limits chosen for head scans (Hounsfield scale: air −1000, water 0); not fitted"}
}

func fitFeatures(c *Card, train []FitCase, opt FitOptions) (FeatureReference, error) {
	var feats [][]float64
	var labels []int
	for _, tc := range train {
		feats = append(feats, tc.Output.Features)
		labels = append(labels, tc.Label)
	}
	means, centred, err := fitcheck.ClassMeansAndCentred(feats, labels, len(c.Classes))
	if err != nil {
		return FeatureReference{}, fmt.Errorf("fit reference: %w", err)
	}
	cov, shrink, err := stats.LedoitWolf(centred)
	if err != nil {
		return FeatureReference{}, fmt.Errorf("fit reference: %w", err)
	}
	prec, err := stats.InverseSPD(cov)
	if err != nil {
		// all-zero feature columns (dead units) make the covariance singular
		// even after shrinkage only when every feature is constant
		return FeatureReference{}, fmt.Errorf("fit reference: shared covariance: %w", err)
	}
	return FeatureReference{Dim: len(means[0]), ClassMeans: means, Precision: prec, Shrinkage: shrink,
		Method:   "class means; shared covariance of class-centred features (Lee et al. 2018) with Ledoit-Wolf (2004) shrinkage towards a scaled identity; precision = its inverse (Cholesky)",
		FittedOn: opt.TrainDescription}, nil
}

type scored struct {
	msp, energy, maha, w1 float64
}

// thresholdScores are the scores the thresholds are fitted on. The model's
// scores (MSP, energy, Mahalanobis) come from the validation cases only: on
// the cases the model was trained on its features sit closer to the class
// means than on unseen scans, so they would give too tight a limit. The
// intensity distance does not depend on the model, so its scores pool the
// validation cases with the training cases scored leave-one-out (each
// against the mean quantile function of the other training cases). Without
// validation cases, the training cases' leave-one-out scores serve for all
// (the Mahalanobis distance then also against means and covariance fitted
// without the case, which is optimistic for a model trained on them).
func thresholdScores(c *Card, train, val []FitCase, opt FitOptions) (model []scored, w1Pool []float64, err error) {
	for i := range train {
		rest := make([]FitCase, 0, len(train)-1)
		rest = append(rest, train[:i]...)
		rest = append(rest, train[i+1:]...)
		loo := *c
		loo.OOD.Intensity = fitIntensity(rest, opt)
		if len(val) == 0 {
			if loo.OOD.Features, err = fitFeatures(c, rest, opt); err != nil {
				return nil, nil, fmt.Errorf("fit thresholds: leave-one-out without training case %d: %w", i, err)
			}
		}
		s, err := scoreCase(&loo, train[i])
		if err != nil {
			return nil, nil, err
		}
		w1Pool = append(w1Pool, s.w1)
		if len(val) == 0 {
			model = append(model, s)
		}
	}
	for _, fc := range val {
		s, err := scoreCase(c, fc)
		if err != nil {
			return nil, nil, err
		}
		model = append(model, s)
		w1Pool = append(w1Pool, s.w1)
	}
	return model, w1Pool, nil
}

func scoreCase(c *Card, fc FitCase) (scored, error) {
	ms, err := ComputeModelScores(c, fc.Output)
	if err != nil {
		return scored{}, fmt.Errorf("fit thresholds: %w", err)
	}
	w := stats.QuantileW1(c.OOD.Intensity.Levels, fc.Facts.Quantiles, c.OOD.Intensity.Quantiles)
	return scored{ms.MSP, ms.Energy, ms.Mahalanobis, w}, nil
}

// envelopePasses reports, for each case, whether it passes every required
// check that has no fitted threshold (the envelope, head and Hounsfield
// checks): the part of the verdict that the threshold search cannot change.
func envelopePasses(c *Card, cases []FitCase) ([]bool, error) {
	out := make([]bool, len(cases))
	for i, fc := range cases {
		out[i] = true
		chs := append(headerChecks(c.OOD.Envelope, fc.Facts), imageChecks(c.OOD, fc.Facts)...)
		for _, ch := range chs {
			if ch.Required && !ch.Pass && ch.Name != CheckIntensityProfile {
				out[i] = false
			}
		}
	}
	return out, nil
}

func fitThresholds(c *Card, sc []scored, w1Pool []float64, env []bool, opt FitOptions, desc, w1Desc string) error {
	if len(env) != len(sc) {
		return fmt.Errorf("fit thresholds: %d envelope results for %d cases", len(env), len(sc))
	}
	col := func(f func(s scored) float64) []float64 {
		out := make([]float64, len(sc))
		for i, s := range sc {
			out[i] = f(s)
		}
		return out
	}
	cols := map[string][]float64{
		"msp": col(func(s scored) float64 { return s.msp }), "energy": col(func(s scored) float64 { return s.energy }),
		"mahalanobis": col(func(s scored) float64 { return s.maha }), "wasserstein": col(func(s scored) float64 { return s.w1 }),
	}
	dirs := map[string]string{"msp": "min", "energy": "max", "mahalanobis": "max", "wasserstein": "max"}
	req := map[string]bool{"msp": opt.ConfidenceRequired, "energy": opt.ConfidenceRequired, "mahalanobis": true, "wasserstein": true}
	var th map[string]Threshold
	for q := opt.Retention; ; q = math.Min(1, q+0.0025) {
		th = map[string]Threshold{}
		for name, vals := range cols {
			fitOn := vals
			if name == "wasserstein" {
				fitOn = w1Pool
			}
			v, kept, err := fitcheck.ThresholdAt(fitOn, q, dirs[name])
			if err != nil {
				return fmt.Errorf("fit thresholds: %s: %w", name, err)
			}
			th[name] = Threshold{Value: v, Direction: dirs[name], Retention: kept, Required: req[name]}
		}
		pass := jointPasses(cols, env, th)
		lb, err := stats.BinomialLowerBound(pass, len(sc), opt.Confidence)
		if err != nil {
			return fmt.Errorf("fit thresholds: %w", err)
		}
		if lb >= opt.Retention || q >= 1 {
			for name, t := range th {
				on, n := desc, len(sc)
				if name == "wasserstein" {
					on, n = w1Desc, len(w1Pool)
				}
				t.FittedOn = fmt.Sprintf("chosen: quantile %.4f of the scores of %d cases (%s), the per-score quantile at which %d of the %d choosing cases (%.1f%%) pass every required check (the envelope included), "+
					"a one-sided %.0f%% Clopper-Pearson lower bound of %.1f%% on these same cases (target %.0f%%)",
					q, n, on, pass, len(sc), 100*float64(pass)/float64(len(sc)), 100*opt.Confidence, 100*lb, 100*opt.Retention)
				th[name] = t
			}
			break
		}
	}
	c.OOD.Thresholds = Thresholds{MSP: th["msp"], Energy: th["energy"], Mahalanobis: th["mahalanobis"], Wasserstein: th["wasserstein"]}
	return nil
}

// jointPasses counts the cases that pass every required check: env[i] (the
// checks without a fitted threshold) and every required threshold.
func jointPasses(cols map[string][]float64, env []bool, th map[string]Threshold) int {
	pass := 0
	for i, ok := range env {
		for name, t := range th {
			if t.Required && t.Fails(cols[name][i]) {
				ok = false
			}
		}
		if ok {
			pass++
		}
	}
	return pass
}

// boundThresholds runs every check of c (thresholds fixed) on the cases and
// adds to every threshold's fitted_on the one-sided Clopper–Pearson lower
// bound on the rate at which they pass every required check. desc names
// held-out cases; empty means the cases are the choosing cases, and the text
// says the bound is in-sample.
func boundThresholds(c *Card, cases []FitCase, desc string, opt FitOptions) ([]Metric, error) {
	pass := 0
	for _, fc := range cases {
		ms, err := ComputeModelScores(c, fc.Output)
		if err != nil {
			return nil, fmt.Errorf("bound thresholds: %w", err)
		}
		if fitcheck.Verdict(RunChecks(c, fc.Facts, ms)) == fitcheck.InDistribution {
			pass++
		}
	}
	n := len(cases)
	lb, err := stats.BinomialLowerBound(pass, n, opt.Confidence)
	if err != nil {
		return nil, fmt.Errorf("bound thresholds: %w", err)
	}
	var text, split string
	if desc != "" {
		split = desc
		verdict := "meets"
		if lb < opt.Retention {
			verdict = "falls short of"
		}
		text = fmt.Sprintf("; bounded: on %d held-out cases (%s) not used to choose it, %d (%.1f%%) pass every required check, a one-sided %.0f%% Clopper-Pearson lower bound of %.1f%% on the pass rate of unseen in-distribution scans like them, which %s the target of %.0f%%",
			n, desc, pass, 100*float64(pass)/float64(n), 100*opt.Confidence, 100*lb, verdict, 100*opt.Retention)
	} else {
		split = "in-sample: the cases the thresholds were chosen on"
		text = "; no held-out cases: the bound above is in-sample (on the cases the thresholds were chosen from) and optimistic for unseen scans"
	}
	th := &c.OOD.Thresholds
	for _, t := range []*Threshold{&th.MSP, &th.Energy, &th.Mahalanobis, &th.Wasserstein} {
		t.FittedOn += text
	}
	how := "fraction of cases whose fit-check verdict is in-distribution (every required check passes), thresholds fixed"
	return []Metric{
		{Name: "fit_check_pass_rate", Value: float64(pass) / float64(n), N: n, Split: split, How: how},
		{Name: "fit_check_pass_rate_lower_bound", Value: lb, N: n, Split: split,
			How: fmt.Sprintf("one-sided %.0f%% Clopper-Pearson lower bound on that pass rate (Clopper & Pearson 1934)", 100*opt.Confidence)},
	}, nil
}

// Calibration metrics: ECE bins (Guo et al. 2017 use 15), bootstrap
// resamples and seed of its interval.
const (
	calibrationBins      = 15
	calibrationResamples = 2000
	calibrationSeed      = 20261211
)

// fitCalibration fits T on s.Temperature, keeps it only when it lowers the
// NLL of s.HeldOut, and computes the calibration metrics on s.HeldOut (on
// s.Temperature when there are no held-out cases, saying so).
func fitCalibration(c *Card, s FitSplits, opt FitOptions) (Calibration, []Metric, error) {
	cal := Calibration{Temperature: 1, FittedOn: s.TemperatureDescription,
		Method: "temperature scaling (Guo et al. 2017): T minimising the mean negative log-likelihood of the fitting cases, golden-section search over 1/T in [0.05, 20]; kept only if it lowers the NLL of held-out cases, otherwise T = 1"}
	tl, tlab := classLogits(c, s.Temperature)
	hl, hlab := classLogits(c, s.HeldOut)
	switch {
	case len(tl) < 2:
		cal.FittedOn = ""
		cal.Decision = fmt.Sprintf("T = 1: %d cases to fit a temperature on (at least 2 needed).", len(tl))
	default:
		T, err := stats.FitTemperature(tl, tlab)
		if err != nil {
			return Calibration{}, nil, fmt.Errorf("fit calibration: %w", err)
		}
		cal.FittedTemperature = T
		if len(hl) == 0 {
			cal.Temperature = T
			cal.Decision = fmt.Sprintf("T = %.4g applied unchecked: fitted on %s, with no held-out cases to check that it lowers their NLL (the caller must check it).", T, s.TemperatureDescription)
			break
		}
		before, after := stats.NLL(hl, hlab, 1), stats.NLL(hl, hlab, T)
		if after < before {
			cal.Temperature = T
			cal.Decision = fmt.Sprintf("T = %.4g applied: fitted on %s, it lowers the mean NLL of %s from %.4f to %.4f.", T, s.TemperatureDescription, s.HeldOutDescription, before, after)
		} else {
			cal.Decision = fmt.Sprintf("T = 1 applied: the T = %.4g fitted on %s does not lower the mean NLL of %s (%.4f at T = 1, %.4f at T = %.4g), so the probabilities are shown unscaled.", T, s.TemperatureDescription, s.HeldOutDescription, before, after, T)
		}
	}
	cases, desc := s.HeldOut, s.HeldOutDescription
	if len(cases) == 0 {
		cases, desc = s.Temperature, s.TemperatureDescription+" (in-sample: the temperature was fitted on them)"
	}
	if len(cases) < 2 {
		return cal, nil, nil
	}
	m, err := CalibrationMetrics(c, cases, cal.Temperature, desc)
	return cal, m, err
}

func classLogits(c *Card, cases []FitCase) ([][]float64, []int) {
	var logits [][]float64
	var labels []int
	for _, fc := range cases {
		logits = append(logits, ClassLogits(c, fc.Output.Logits))
		labels = append(labels, fc.Label)
	}
	return logits, labels
}

// CalibrationMetrics are the discrimination and calibration figures of the
// cases at temperature 1 and at T: AUROC of the positive-class probability
// (at T; T does not change the order), accuracy, ECE (15 bins) with a
// percentile bootstrap 95 % interval, Brier score of the positive class and
// mean NLL. desc names the cases.
func CalibrationMetrics(c *Card, cases []FitCase, T float64, desc string) ([]Metric, error) {
	logits, labels := classLogits(c, cases)
	pos := c.PositiveIndex()
	n := len(cases)
	isPos := make([]bool, n)
	right := 0
	for i, z := range logits {
		isPos[i] = labels[i] == pos
		if stats.Argmax(z) == labels[i] {
			right++
		}
	}
	out := []Metric{}
	for _, at := range []struct {
		T      float64
		suffix string
		what   string
	}{{1, "before_scaling", "temperature 1"}, {T, "after_scaling", fmt.Sprintf("the card's temperature %.4g", T)}} {
		conf, ok, prob := make([]float64, n), make([]bool, n), make([]float64, n)
		for i, z := range logits {
			p := fitcheck.Softmax(z, at.T)
			k := stats.Argmax(p)
			conf[i], ok[i], prob[i] = p[k], k == labels[i], p[pos]
		}
		lo, hi, err := stats.ECEInterval(conf, ok, calibrationBins, calibrationResamples, calibrationSeed, 0.95)
		if err != nil {
			return nil, fmt.Errorf("calibration metrics: %w", err)
		}
		brier := stats.Brier(prob, isPos)
		if math.IsNaN(brier) {
			return nil, fmt.Errorf("calibration metrics: brier score: a probability is not in [0, 1]")
		}
		if at.suffix == "before_scaling" {
			out = append(out,
				Metric{Name: "auroc", Value: stats.AUROC(prob, isPos), N: n, Split: desc, How: "AUROC of the positive-class probability (Mann-Whitney; equals sklearn roc_auc_score)"},
				Metric{Name: "accuracy", Value: float64(right) / float64(n), N: n, Split: desc, How: "fraction of cases whose most probable class is the true one"})
		}
		out = append(out,
			Metric{Name: "ece_" + at.suffix, Value: stats.ECE(conf, ok, calibrationBins), N: n, Split: desc, CI95: []float64{lo, hi},
				Interval: fmt.Sprintf("percentile bootstrap over cases, %d resamples, seed %d", calibrationResamples, calibrationSeed),
				How:      fmt.Sprintf("expected calibration error of the top-class confidence, 15 equal-width bins (Guo et al. 2017), %s; interval: percentile bootstrap 95%% over cases, %d resamples (binned ECE is biased upwards for small n: Kumar et al. 2019, Roelofs et al. 2022)", at.what, calibrationResamples)},
			Metric{Name: "brier_" + at.suffix, Value: brier, N: n, Split: desc, How: fmt.Sprintf("Brier score of the positive-class probability (Brier 1950; sklearn brier_score_loss), %s", at.what)},
			Metric{Name: "nll_" + at.suffix, Value: stats.NLL(logits, labels, at.T), N: n, Split: desc, How: fmt.Sprintf("mean negative log-likelihood, %s", at.what)})
	}
	return out, nil
}

// BoundThresholds runs every check of c, thresholds fixed, on held-out cases
// (desc names them; they must not be the cases the thresholds were chosen
// on) and returns the pass rate of every required check and its one-sided
// Clopper–Pearson lower bound at opt.Confidence; it adds the bound to every
// threshold's fitted_on. For cards whose thresholds were fitted before the
// choosing and bounding splits existed.
func BoundThresholds(c *Card, cases []FitCase, desc string, opt FitOptions) ([]Metric, error) {
	if len(cases) == 0 || desc == "" {
		return nil, fmt.Errorf("bound thresholds: need named held-out cases")
	}
	return boundThresholds(c, cases, desc, opt.withDefaults())
}

// FitTemperatureSplits fits the temperature on s.Temperature and keeps it
// only if it lowers the NLL of s.HeldOut (see FitReferenceSplits), with the
// calibration metrics of the held-out cases; the other splits are ignored.
func FitTemperatureSplits(c *Card, s FitSplits, opt FitOptions) (Calibration, []Metric, error) {
	return fitCalibration(c, s, opt.withDefaults())
}
