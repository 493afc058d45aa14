package train

import (
	"fmt"
	"strings"
	"time"

	"brightfold/inference"
	"brightfold/internal/cputime"
	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
	"brightfold/internal/phantom"
)

// PredictNet returns a Net that can only predict: the exported model bytes
// decoded and run by the Go executor exactly as Run's trained network
// predicts (one case per goroutine, one worker each), so its outputs are
// the ones a retraining by the recipe would fit the card on.
func PredictNet(a Arch, model []byte) (*Net, error) {
	m, err := onnx.Decode(model)
	if err != nil {
		return nil, fmt.Errorf("refit: decode model: %w", err)
	}
	n := &Net{Arch: a, Model: m, param: map[string]*onnx.Tensor{}}
	for name, t := range m.Graph.Params() {
		n.param[name] = t
	}
	if n.infer, err = exec.NewExecutorWorkers(m, 1); err != nil {
		return nil, fmt.Errorf("refit: %w", err)
	}
	return n, nil
}

// Refit fits the card of an already trained demo model (model, the bytes of
// its model.onnx) by the recipe without training it again: it generates the
// recipe's training, validation and calibration phantoms, runs the model on
// them, fits the out-of-distribution reference, thresholds and temperature
// (see Run) and evaluates on the held-out and shifted phantoms. The model
// bytes, and so the sha256, stay the same; History is empty.
func Refit(r Recipe, model []byte, log func(format string, args ...any)) (*Result, error) {
	if log == nil {
		log = func(string, ...any) {}
	}
	start, cpu0 := time.Now(), cputime.Seconds()
	prep := DemoPreprocessing(r.Arch)
	levels := inference.DefaultLevels()
	n, err := PredictNet(r.Arch, model)
	if err != nil {
		return nil, err
	}
	res := &Result{Net: n, Model: model}
	all, err := GenerateCached(r.CacheDir, Specs(r.CohortSeed, 0, r.NTrain+r.NVal+r.NCal, phantom.ShiftNone), prep, levels, r.Workers, progress(log, "training, validation and calibration phantoms"))
	if err != nil {
		return nil, err
	}
	res.Timing.GenerateTrainVal = time.Since(start).Seconds()
	t0 := time.Now()
	a, b := r.NTrain, r.NTrain+r.NVal
	if err := res.fitCard(r, prep, levels, all[:a], all[a:b], all[b:], log); err != nil {
		return nil, err
	}
	res.Timing.Evaluate = time.Since(t0).Seconds()
	res.Timing.Total = time.Since(start).Seconds()
	res.Timing.CPUTotal = cputime.Seconds() - cpu0
	return res, nil
}

// Recalibrate brings the card of an already fitted demo model folder to the
// rules of FitReferenceSplits without regenerating the training phantoms:
// on n fresh phantoms of the recipe's cohort seed, from index from on (never
// used by training, validation or calibration), the first half fits the
// temperature, the second half is held out. The held-out half bounds the
// pass rate of the card's existing thresholds (every required check) and
// decides whether the fitted T is kept; the card's in-sample threshold
// wording is corrected to say it is in-sample; the calibration metrics of
// the old fitting cases are replaced by those of the held-out half. The
// envelope, intensity and feature references and the thresholds stay.
func Recalibrate(r Recipe, card *inference.Card, model []byte, from, n int, log func(format string, args ...any)) error {
	if log == nil {
		log = func(string, ...any) {}
	}
	if from < r.NTrain+r.NVal+r.NCal || n < 4 {
		return fmt.Errorf("recalibrate: cases from %d overlap the recipe's (up to %d), or n = %d < 4", from, r.NTrain+r.NVal+r.NCal, n)
	}
	net, err := PredictNet(r.Arch, model)
	if err != nil {
		return err
	}
	res := &Result{Net: net, Model: model}
	prep := DemoPreprocessing(r.Arch)
	cs, err := GenerateCached(r.CacheDir, Specs(r.CohortSeed, from, n, phantom.ShiftNone), prep, card.OOD.Intensity.Levels, r.Workers, progress(log, "recalibration phantoms"))
	if err != nil {
		return err
	}
	half := n / 2
	fitT, err := res.fitCases(cs[:half], r.Workers)
	if err != nil {
		return err
	}
	held, err := res.fitCases(cs[half:], r.Workers)
	if err != nil {
		return err
	}
	name := func(what string, a, k int) string {
		return fmt.Sprintf("%d %s phantoms (cohort seed %d, %s to %s, never used before)", k, what, r.CohortSeed, phantom.CaseID(a), phantom.CaseID(a+k-1))
	}
	tDesc, hDesc := name("fresh calibration", from, half), name("held-out", from+half, n-half)
	th := &card.OOD.Thresholds
	for _, t := range []*inference.Threshold{&th.MSP, &th.Energy, &th.Mahalanobis, &th.Wasserstein} {
		t.FittedOn = strings.Replace(t.FittedOn, "on the pass rate of unseen in-distribution scans", "on these same cases, the ones the quantile was chosen on (in-sample)", 1)
		t.FittedOn = strings.Replace(t.FittedOn, "pass every required score together", "pass the four score thresholds together (the envelope not counted)", 1)
	}
	pass, err := inference.BoundThresholds(card, held, hDesc, inference.FitOptions{})
	if err != nil {
		return err
	}
	cal, metrics, err := inference.FitTemperatureSplits(card, inference.FitSplits{Temperature: fitT, HeldOut: held,
		TemperatureDescription: tDesc, HeldOutDescription: hDesc}, inference.FitOptions{})
	if err != nil {
		return err
	}
	oldFit := card.Calibration.FittedOn
	var kept []inference.Metric
	before := map[string]float64{}
	for _, m := range card.Validation {
		if m.Name == "ece_before_scaling" {
			before[m.Split] = m.Value
		}
	}
	for _, m := range card.Validation {
		switch {
		case m.Split == oldFit: // in-sample: the old temperature was fitted on these cases
			continue
		case m.Name == "ece_after_scaling" && cal.Temperature == 1:
			m.Value = before[m.Split]
			m.How = "expected calibration error, 15 equal-width bins (Guo et al. 2017), the card's temperature (1)"
		case m.Name == "ece_after_scaling":
			continue // measured at the old temperature
		}
		kept = append(kept, m)
	}
	card.Calibration = cal
	card.Validation = append(append(metrics, pass...), kept...)
	log("recalibrated: %s\n  %s", metricLine(card.Validation), cal.Decision)
	return nil
}
