package modelmake

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"math"
	"path/filepath"

	"brightfold/inference"
	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/stats"
)

// RecalibrationAlpha is the level of each likelihood-ratio test of the
// closed procedure.
const RecalibrationAlpha = 0.05

// Recalibrate scores a new site's labelled cases with a model folder and
// chooses, by the closed testing procedure of Vergouwe et al. 2017
// (stats.ClosedTest), between no change, a new intercept, and a new
// intercept and slope on the calibrated positive-class logit. It returns
// the new card (model.onnx is not touched: the card keeps its sha256) with
// the parent's name, version and card sha256, the site, the case counts and
// the figures before and after. The ONNX Runtime environment must be
// initialised.
func Recalibrate(ctx context.Context, mf *inference.ModelFolder, m *manifest.Manifest, site string, opt Options) (*inference.Card, []Case, error) {
	opt = opt.withDefaults()
	parent := mf.Card
	if len(parent.Classes) != 2 {
		return nil, nil, inputerr.New(mf.Source, "recalibration needs a two-class model; this one has %d classes", len(parent.Classes))
	}
	labels, err := labelIndex(m, parent.Classes)
	if err != nil {
		return nil, nil, err
	}
	if err := checkCounts(m.Source, labels, parent.Classes, nil); err != nil {
		return nil, nil, err
	}
	sess, err := inference.NewSession(mf, inference.SessionOptions{IntraOpThreads: opt.Threads})
	if err != nil {
		return nil, nil, err
	}
	defer sess.Close()
	splits := make([]string, len(m.Cases))
	cases, unreadable, err := runCases(ctx, sess, parent, m, labels, splits, opt)
	if err != nil {
		return nil, nil, err
	}
	if len(unreadable) > 0 && !opt.SkipUnreadable {
		return nil, nil, inputerr.New(m.Source, "%d scan(s) cannot be prepared (use --skip-unreadable to leave them out): %v", len(unreadable), unreadable)
	}
	s := score(parent, cases)
	cf, err := stats.CalibrationFit(s.p, s.truth)
	if err != nil {
		return nil, nil, inputerr.New(m.Source, "cannot fit the recalibration models: %v", err)
	}
	ct := stats.ClosedTestChoice(cf, RecalibrationAlpha)
	cb, err := inference.MarshalCard(parent)
	if err != nil {
		return nil, nil, err
	}
	sum := sha256.Sum256(cb)
	card := *parent
	card.Calibration.Logistic = composeLogistic(parent.Calibration.Logistic, cf, ct.Choice, len(cases), site)
	card.Version = parent.Version + "+" + sanitizeSite(site)
	desc := fmt.Sprintf("%d cases of site %s (%s)", len(cases), site, filepath.Base(m.Source))
	counts := map[string]int{}
	for _, c := range cases {
		counts[parent.Classes[c.Fit.Label]]++
	}
	rec := &inference.Recalibration{Site: site, N: len(cases), Counts: counts, Method: ct.Choice,
		Before: figuresOf(parent, cases, desc, site, opt.Seed), After: figuresOf(&card, cases, desc+", in-sample after recalibration", site, opt.Seed),
		HowMade: fmt.Sprintf("closed testing procedure (Vergouwe et al. 2017) with likelihood-ratio tests at level %.2f on the calibrated positive-class logit: no change, intercept only (slope fixed at 1), or intercept and slope", RecalibrationAlpha)}
	rec.Tests = append(rec.Tests, inference.RecalibrationLR{Name: "intercept and slope vs none", Statistic: 2 * (cf.LogLikRecalibrated - cf.LogLikOriginal), DF: 2, P: ct.PRecalibratedVsOriginal})
	if ct.Choice != stats.RecalibrateNone {
		rec.Tests = append(rec.Tests, inference.RecalibrationLR{Name: "intercept and slope vs intercept", Statistic: 2 * (cf.LogLikRecalibrated - cf.LogLikIntercept), DF: 1, P: ct.PRecalibratedVsIntercept})
	}
	pv := inference.Provenance{MadeBy: "brightfold model recalibrate", Cases: filepath.Base(m.Source), Seed: opt.Seed,
		Split: "every case of the site is used for the closed test; the figures after are in-sample", Skipped: len(unreadable),
		Counts: map[string]map[string]int{"recalibration": counts}}
	if parent.Provenance != nil {
		pv.Graph = parent.Provenance.Graph
	}
	pv.Parent = &inference.ParentModel{Name: parent.Name, Version: parent.Version, CardSHA256: hex.EncodeToString(sum[:]), ModelSHA256: parent.ModelSHA256}
	pv.Recalibration = rec
	card.Provenance = &pv
	card.Cautions = append([]string{fmt.Sprintf("Recalibrated for site %s on %d cases (%s); the figures after recalibration are measured on the same cases.", site, len(cases), ct.Choice)}, parent.Cautions...)
	if err := card.Validate(); err != nil {
		return nil, nil, fmt.Errorf("recalibrated card: %w", err)
	}
	return &card, cases, nil
}

// composeLogistic folds the chosen update a + b·ℓ onto a parent's logistic
// recalibration (if any): a + b·(a1 + b1·ℓ). "none" keeps the parent's.
func composeLogistic(prev *inference.LogisticRecalibration, cf stats.Calibration, choice string, n int, site string) *inference.LogisticRecalibration {
	var a, b float64
	switch choice {
	case stats.RecalibrateIntercept:
		a, b = cf.Intercept, 1
	case stats.RecalibrateLogistic:
		a, b = cf.SlopeIntercept, cf.Slope
	default:
		return prev
	}
	if prev != nil {
		a, b = a+b*prev.Intercept, b*prev.Slope
	}
	if math.IsNaN(a) || math.IsNaN(b) {
		return prev
	}
	return &inference.LogisticRecalibration{Intercept: a, Slope: b,
		FittedOn: fmt.Sprintf("%d cases of site %s, %s (maximum likelihood)", n, site, choice)}
}

func sanitizeSite(s string) string {
	out := []rune{}
	for _, r := range s {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '.' {
			out = append(out, r)
		}
	}
	if len(out) == 0 {
		return "site"
	}
	return string(out)
}
