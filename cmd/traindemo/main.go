// Command traindemo is the developer tool that trains Brightfold's demo
// model from its seeds and writes the demo model folder (model.onnx and card.json)
// with a training report. It is not part of the product binary; `make
// demo-model` runs it through scripts/demo-model.sh.
//
//	go run ./tools/traindemo -out assets/demo-model -report assets/demo-training.json
//	go run ./tools/traindemo -out /tmp/b -compare assets/demo-model/card.json
//
// Research use only. Not a diagnosis.
package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"time"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/train"
)

// Report is the training report written next to the model folder.
type Report struct {
	Notice     string             `json:"notice"`
	Recipe     train.Recipe       `json:"recipe"`
	Parameters int                `json:"trainable_parameters"`
	ModelBytes int                `json:"model_bytes"`
	SHA256     string             `json:"model_sha256"`
	GoVersion  string             `json:"go_version"`
	GOARCH     string             `json:"goarch"`
	CPUs       int                `json:"cpus"`
	Timing     train.Timing       `json:"timing"`
	History    []train.Epoch      `json:"history"`
	Metrics    []inference.Metric `json:"metrics"`
	Shifted    map[string]float64 `json:"fit_check_flag_rate_by_shift"`
	Compared   *Comparison        `json:"comparison,omitempty"`
}

// Comparison is the outcome of -compare.
type Comparison struct {
	Against      string   `json:"against"`
	Tolerance    float64  `json:"tolerance"`
	SameModel    bool     `json:"same_model_sha256"`
	MaxDiff      float64  `json:"max_metric_difference"`
	Differences  []string `json:"differences,omitempty"`
	WithinBounds bool     `json:"within_tolerance"`
}

func main() {
	out := flag.String("out", "assets/demo-model", "model folder folder to write")
	report := flag.String("report", "", "training report JSON to write (default: none)")
	compare := flag.String("compare", "", "card.json whose metrics the new run must reproduce")
	tol := flag.Float64("tol", 0.02, "largest allowed absolute difference of any metric with -compare")
	cache := flag.String("cache", "", "development only: cache generated phantoms in this folder")
	recal := flag.String("recalibrate", "", "bring this fitted model folder's card to the split rules on fresh phantoms (-recal-from, -recal-n) without refitting its reference (writes -out)")
	recalFrom := flag.Int("recal-from", 1100, "first cohort index of the -recalibrate phantoms")
	recalN := flag.Int("recal-n", 200, "phantoms for -recalibrate: the first half fits T, the second half is held out")
	refit := flag.String("refit", "", "fit the card of this already trained model.onnx by the recipe without training (the model bytes stay the same)")
	quick := flag.Bool("quick", false, "smoke test: a tiny cohort and one epoch (not the demo model)")
	workers := flag.Int("workers", 0, "goroutines (default: all CPUs)")
	var ov overrides
	flag.IntVar(&ov.epochs, "epochs", 0, "development: override the recipe's epochs")
	flag.IntVar(&ov.ntrain, "ntrain", 0, "development: override the number of training cases")
	flag.IntVar(&ov.nval, "nval", 0, "development: override the number of validation cases")
	flag.IntVar(&ov.shift, "shift", -1, "development: override the translation augmentation (voxels)")
	flag.Float64Var(&ov.lr, "lr", 0, "development: override the peak learning rate")
	flag.Uint64Var(&ov.testSeed, "test-seed", 0, "development: evaluate on this seed instead of the held-out one")
	remakeDir := flag.String("remake", "", "instead of training: `model make` the -out model folder on the recipe's calibration and held-out phantoms, written to this folder, and compare with its card")
	remakeCal := flag.Int("remake-cal", 0, "with -remake: calibration cases (default: the recipe's validation and calibration cases)")
	remakeVal := flag.Int("remake-val", 0, "with -remake: validation cases (default: the recipe's held-out cases)")
	flag.Parse()
	if *recal != "" {
		if err := recalibrate(*recal, *out, *cache, *recalFrom, *recalN, *workers); err != nil {
			fmt.Fprintln(os.Stderr, "traindemo:", err)
			os.Exit(1)
		}
		return
	}
	if *remakeDir != "" {
		logf := func(format string, args ...any) { fmt.Fprintf(os.Stderr, format+"\n", args...) }
		w := *workers
		if w <= 0 {
			w = runtime.NumCPU()
		}
		if err := remake(*out, *remakeDir, *remakeCal, *remakeVal, w, *tol, logf); err != nil {
			fmt.Fprintln(os.Stderr, "traindemo:", err)
			os.Exit(1)
		}
		return
	}
	if err := run(*out, *report, *compare, *tol, *cache, *refit, *quick, *workers, ov); err != nil {
		fmt.Fprintln(os.Stderr, "traindemo:", err)
		os.Exit(1)
	}
}

// overrides are development settings that change the recipe; the committed
// model folder is made without any.
type overrides struct {
	epochs, ntrain, nval, shift int
	lr                          float64
	testSeed                    uint64
}

func (o overrides) apply(r *train.Recipe) {
	if o.epochs > 0 {
		r.Train.Epochs = o.epochs
	}
	if o.ntrain > 0 {
		r.NTrain = o.ntrain
	}
	if o.nval > 0 {
		r.NVal = o.nval
	}
	if o.shift >= 0 {
		r.Train.Shift = o.shift
	}
	if o.lr > 0 {
		r.Train.LR = o.lr
	}
	if o.testSeed != 0 {
		r.TestSeed = o.testSeed
	}
}

func run(out, reportPath, compare string, tol float64, cache, refit string, quick bool, workers int, ov overrides) error {
	r := train.DemoRecipe()
	r.CacheDir = cache
	if workers > 0 {
		r.Workers = workers
	} else {
		r.Workers = runtime.NumCPU()
	}
	if quick {
		r.NTrain, r.NVal, r.NCal, r.NTest, r.NPerShift = 32, 16, 16, 16, 2
		r.Train.Epochs = 1
	}
	ov.apply(&r)
	logf := func(format string, args ...any) {
		fmt.Fprintf(os.Stderr, "%s "+format+"\n", append([]any{time.Now().Format("15:04:05")}, args...)...)
	}
	var res *train.Result
	var err error
	if refit != "" {
		model, rerr := os.ReadFile(refit)
		if rerr != nil {
			return fmt.Errorf("refit: %w", rerr)
		}
		res, err = train.Refit(r, model, logf)
	} else {
		res, err = train.Run(r, logf)
	}
	if err != nil {
		return err
	}
	if err := inference.WriteModelFolderDir(out, res.Card, res.Model); err != nil {
		return fmt.Errorf("write model folder %s: %w", out, err)
	}
	if _, err := inference.LoadModelFolder(out); err != nil {
		return fmt.Errorf("the model folder just written does not load: %w", err)
	}
	rep := Report{Notice: notice.Full, Recipe: r, Parameters: res.Net.ParameterCount(), ModelBytes: len(res.Model),
		SHA256: res.Card.ModelSHA256, GoVersion: runtime.Version(), GOARCH: runtime.GOARCH, CPUs: runtime.NumCPU(),
		Timing: res.Timing, History: res.History, Metrics: res.Card.Validation, Shifted: map[string]float64{}}
	rep.Recipe.CacheDir = ""
	for sh, v := range res.Shifted {
		rep.Shifted[string(sh)] = v
	}
	logf("wrote %s: model %d bytes, sha256 %s", out, len(res.Model), res.Card.ModelSHA256)
	logf("timing: generate %.0f s, train %.0f s, training total %.0f s (%.0f CPU s), evaluation %.0f s, total %.0f s (%.0f CPU s)",
		res.Timing.GenerateTrainVal, res.Timing.Train, res.Timing.TrainingTotal, res.Timing.CPUTrainingTotal, res.Timing.Evaluate, res.Timing.Total, res.Timing.CPUTotal)
	var cmpErr error
	if compare != "" {
		c, err := compareWith(compare, res.Card, tol)
		if err != nil {
			return err
		}
		rep.Compared = c
		for _, d := range c.Differences {
			logf("%s", d)
		}
		logf("compared with %s: same model %v, largest metric difference %.2g (tolerance %.2g)", compare, c.SameModel, c.MaxDiff, tol)
		if !c.WithinBounds {
			cmpErr = fmt.Errorf("metrics differ from %s by more than %.2g", compare, tol)
		}
	}
	if reportPath != "" {
		b, err := json.MarshalIndent(rep, "", "  ")
		if err != nil {
			return err
		}
		if err := os.MkdirAll(filepath.Dir(reportPath), 0o755); err != nil {
			return err
		}
		if err := atomicfile.WriteBytes(reportPath, append(b, '\n')); err != nil {
			return err
		}
	}
	return cmpErr
}

// compareWith checks every validation metric of the new card against the
// card at path (matched by name and split).
func compareWith(path string, card *inference.Card, tol float64) (*Comparison, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	old, err := inference.ParseCard(b)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	c := &Comparison{Against: path, Tolerance: tol, SameModel: old.ModelSHA256 == card.ModelSHA256, WithinBounds: true}
	key := func(m inference.Metric) string { return m.Name + " | " + m.Split }
	prev := map[string]float64{}
	for _, m := range old.Validation {
		prev[key(m)] = m.Value
	}
	for _, m := range card.Validation {
		k := key(m)
		v, ok := prev[k]
		if !ok {
			c.Differences = append(c.Differences, "new metric not in the reference: "+k)
			c.WithinBounds = false
			continue
		}
		d := math.Abs(v - m.Value)
		c.MaxDiff = math.Max(c.MaxDiff, d)
		if d > tol {
			c.WithinBounds = false
			c.Differences = append(c.Differences, fmt.Sprintf("%s: %.4f, reference %.4f", k, m.Value, v))
		}
	}
	if d := math.Abs(old.Calibration.Temperature - card.Calibration.Temperature); d > tol*10 {
		c.WithinBounds = false
		c.Differences = append(c.Differences, fmt.Sprintf("temperature %.4f, reference %.4f", card.Calibration.Temperature, old.Calibration.Temperature))
	}
	return c, nil
}

// recalibrate runs train.Recalibrate on the model folder in and writes the
// result to out (model bytes unchanged).
func recalibrate(in, out, cache string, from, n, workers int) error {
	mf, err := inference.LoadModelFolder(in)
	if err != nil {
		return err
	}
	model, err := os.ReadFile(filepath.Join(in, "model.onnx"))
	if err != nil {
		return err
	}
	r := train.DemoRecipe()
	r.CacheDir = cache
	r.Workers = runtime.NumCPU()
	if workers > 0 {
		r.Workers = workers
	}
	card := *mf.Card
	logf := func(format string, args ...any) {
		fmt.Fprintf(os.Stderr, "%s "+format+"\n", append([]any{time.Now().Format("15:04:05")}, args...)...)
	}
	if err := train.Recalibrate(r, &card, model, from, n, logf); err != nil {
		return err
	}
	card.Version = nextPatch(card.Version)
	if err := card.Validate(); err != nil {
		return err
	}
	return inference.WriteModelFolderDir(out, &card, model)
}

// nextPatch is a version with its last dot-separated number one higher
// ("1.2.0" → "1.2.1"), or the version with ".1" appended.
func nextPatch(v string) string {
	i := strings.LastIndexByte(v, '.')
	if n, err := strconv.Atoi(v[i+1:]); err == nil && i >= 0 {
		return v[:i+1] + strconv.Itoa(n+1)
	}
	return v + ".1"
}
