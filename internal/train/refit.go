package train

import (
	"fmt"
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
