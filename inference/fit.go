package inference

import (
	"errors"
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

// FitReference fits the card's OOD reference and calibration: the envelope
// from the training cases' measurements (ranges widened by the margin); the
// intensity reference as the mean of the training quantile functions (the 1D
// Wasserstein barycentre); the feature class means and the shared covariance
// of Lee et al. 2018 (class-centred training features) with Ledoit-Wolf
// shrinkage, inverted; the temperature minimising validation NLL (Guo et al.
// 2017) on the validation cases (the training cases when there are none);
// thresholds at the retention (see FitOptions.Retention): the model's scores
// on the validation cases, the intensity distance on the training cases'
// leave-one-out scores pooled with the validation cases' (see
// thresholdScores). It returns the
// reference, the calibration and validation metrics (AUROC of the
// positive-class probability, ECE with 15 bins before and after scaling,
// retention achieved).
func FitReference(c *Card, train, val []FitCase, opt FitOptions) (OODReference, Calibration, []Metric, error) {
	opt = opt.withDefaults()
	if len(train) < 4 {
		return OODReference{}, Calibration{}, nil, fmt.Errorf("fit reference: need at least 4 training cases, got %d", len(train))
	}
	ref := OODReference{Envelope: fitEnvelope(train, opt)}
	ref.Envelope.FittedOn = opt.TrainDescription
	ref.Intensity = fitIntensity(train, opt)
	feats, err := fitFeatures(c, train, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	ref.Features = feats
	thrCases, thrDesc := val, opt.ValidationDescription
	if len(thrCases) == 0 {
		thrCases, thrDesc = train, opt.TrainDescription
	}
	tmp := *c
	tmp.OOD = ref
	sc, w1Pool, err := thresholdScores(&tmp, train, val, opt)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	desc := opt.ValidationDescription
	w1Desc := fmt.Sprintf("%s (leave-one-out) and %s", opt.TrainDescription, opt.ValidationDescription)
	if len(val) == 0 {
		desc = opt.TrainDescription + " (leave-one-out)"
		w1Desc = desc
	}
	if err := fitThresholds(&tmp, sc, w1Pool, opt, desc, w1Desc); err != nil {
		return ref, Calibration{}, nil, err
	}
	ref.Thresholds = tmp.OOD.Thresholds
	cal, metrics, err := fitCalibration(c, thrCases, thrDesc)
	if err != nil {
		return ref, Calibration{}, nil, err
	}
	return ref, cal, metrics, nil
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

func fitThresholds(c *Card, sc []scored, w1Pool []float64, opt FitOptions, desc, w1Desc string) error {
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
		pass := jointPasses(cols, th)
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
				t.FittedOn = fmt.Sprintf("quantile %.4f of the scores of %d cases (%s), the per-score quantile chosen so that %d of the %s (%.1f%%) pass every required score together, "+
					"a one-sided %.0f%% Clopper-Pearson lower bound of %.1f%% on the pass rate of unseen in-distribution scans (target %.0f%%)",
					q, n, on, pass, desc, 100*float64(pass)/float64(len(sc)), 100*opt.Confidence, 100*lb, 100*opt.Retention)
				th[name] = t
			}
			break
		}
	}
	c.OOD.Thresholds = Thresholds{MSP: th["msp"], Energy: th["energy"], Mahalanobis: th["mahalanobis"], Wasserstein: th["wasserstein"]}
	return nil
}

// jointPasses counts the cases that pass every required threshold.
func jointPasses(cols map[string][]float64, th map[string]Threshold) int {
	n := len(cols["msp"])
	pass := 0
	for i := 0; i < n; i++ {
		ok := true
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

func fitCalibration(c *Card, cases []FitCase, desc string) (Calibration, []Metric, error) {
	var logits [][]float64
	var labels []int
	for _, fc := range cases {
		logits = append(logits, ClassLogits(c, fc.Output.Logits))
		labels = append(labels, fc.Label)
	}
	T, err := stats.FitTemperature(logits, labels)
	if err != nil {
		return Calibration{}, nil, err
	}
	if len(cases) < 2 {
		return Calibration{}, nil, errors.New("fit calibration: need at least 2 cases")
	}
	pos := c.PositiveIndex()
	ece := func(T float64) float64 {
		conf := make([]float64, len(cases))
		ok := make([]bool, len(cases))
		for i, z := range logits {
			p := fitcheck.Softmax(z, T)
			best := 0
			for k := range p {
				if p[k] > p[best] {
					best = k
				}
			}
			conf[i], ok[i] = p[best], best == labels[i]
		}
		return stats.ECE(conf, ok, 15)
	}
	scores := make([]float64, len(cases))
	isPos := make([]bool, len(cases))
	for i, z := range logits {
		scores[i] = fitcheck.Softmax(z, T)[pos]
		isPos[i] = labels[i] == pos
	}
	n := len(cases)
	metrics := []Metric{
		{Name: "auroc", Value: stats.AUROC(scores, isPos), N: n, Split: desc, How: "AUROC of the positive-class probability (Mann-Whitney; equals sklearn roc_auc_score)"},
		{Name: "ece_before_scaling", Value: ece(1), N: n, Split: desc, How: "expected calibration error, 15 equal-width bins (Guo et al. 2017), temperature 1"},
		{Name: "ece_after_scaling", Value: ece(T), N: n, Split: desc, How: "expected calibration error, 15 equal-width bins (Guo et al. 2017), fitted temperature"},
		{Name: "nll_before_scaling", Value: stats.NLL(logits, labels, 1), N: n, Split: desc, How: "mean negative log-likelihood"},
		{Name: "nll_after_scaling", Value: stats.NLL(logits, labels, T), N: n, Split: desc, How: "mean negative log-likelihood"},
	}
	cal := Calibration{Temperature: T, FittedOn: desc,
		Method: "temperature scaling (Guo et al. 2017): T minimising the mean negative log-likelihood, golden-section search over 1/T in [0.05, 20]"}
	return cal, metrics, nil
}
