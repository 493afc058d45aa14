package train

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"time"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
	"brightfold/internal/cputime"
	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/stats"
)

// Recipe is everything that determines the demo model: architecture,
// training settings and which phantoms are used for what. Seeds are
// distinct, so the held-out and shifted cases share nothing with training.
type Recipe struct {
	Arch  Arch
	Train Config
	// CohortSeed: cases [0, NTrain) train, [NTrain, NTrain+NVal) validate
	// (monitored during training) and choose the fit-check thresholds, and
	// the next NCal calibrate: the first half fits the temperature, the
	// second half is held out from every fit (it bounds the fit check's pass
	// rate, decides whether the temperature is kept and gives the
	// calibration metrics). No gradient step sees the validation or
	// calibration cases. The split is by case.
	CohortSeed         uint64
	NTrain, NVal, NCal int
	// TestSeed: NTest fresh in-distribution cases, never used in training or
	// fitting, for the held-out figures.
	TestSeed uint64
	NTest    int
	// ShiftSeed: NPerShift cases of every shifted variant, never used for
	// fitting, to report how often the fit check flags each.
	ShiftSeed uint64
	NPerShift int
	// InitSeed draws the initial weights.
	InitSeed uint64
	Workers  int
	// CacheDir, when set, caches generated cases between development runs
	// (see GenerateCached); the committed model folder is made without it.
	CacheDir string
}

// DemoRecipe is the recipe of the committed demo model folder.
func DemoRecipe() Recipe {
	return Recipe{
		Arch: DefaultArch(), Train: DefaultConfig(20261201),
		CohortSeed: 1, NTrain: 600, NVal: 200, NCal: 300,
		TestSeed: 20261202, NTest: 200,
		ShiftSeed: 20261203, NPerShift: 8,
		InitSeed: 20261204, Workers: 2,
	}
}

// DemoPreprocessing is the preprocessing the demo card states: closest
// canonical RAS, 4 mm grid of the arch's shape centred on the head,
// block-mean anti-aliasing, head mask at 10 % between the 1st and 99th
// percentiles, z-score over the head clipped to ±5.
func DemoPreprocessing(a Arch) preprocess.Spec {
	s := preprocess.DefaultSpec()
	s.Shape = a.Grid
	return s
}

// Timing records where a run's time went, in seconds.
type Timing struct {
	GenerateTrainVal float64 `json:"generate_train_val_s"` // phantoms and preprocessing of the training and validation cases
	Train            float64 `json:"train_s"`              // the optimisation itself
	TrainingTotal    float64 `json:"training_total_s"`     // the two above: what "training time" means in reports
	Evaluate         float64 `json:"evaluate_s"`           // held-out and shifted cases, fitting, metrics
	Total            float64 `json:"total_s"`
	// CPU seconds (user + system) of the process for the same spans: on a
	// shared machine, wall time overstates the cost; CPU seconds divided by
	// the cores give the wall time the run would take alone.
	CPUTrainingTotal float64 `json:"cpu_training_total_s"`
	CPUTotal         float64 `json:"cpu_total_s"`
}

// Result is one demo run's outcome.
type Result struct {
	Net     *Net
	Card    *inference.Card // model_sha256 filled for Model
	Model   []byte          // the encoded ONNX model
	History []Epoch
	Timing  Timing
	// Shifted holds, per shift type, the fraction of shifted cases the fit
	// check flags as out-of-distribution.
	Shifted map[phantom.Shift]float64
}

// Run trains the demo model by the recipe and fits its card. log, when
// set, receives progress lines.
func Run(r Recipe, log func(format string, args ...any)) (*Result, error) {
	if log == nil {
		log = func(string, ...any) {}
	}
	start, cpu0 := time.Now(), cputime.Seconds()
	prep := DemoPreprocessing(r.Arch)
	levels := inference.DefaultLevels()
	n, err := NewNet(r.Arch, r.InitSeed)
	if err != nil {
		return nil, err
	}
	log("model: %d trainable parameters; preprocessing %v mm, grid %v", n.ParameterCount(), prep.SpacingMm, prep.Shape)
	all, err := GenerateCached(r.CacheDir, Specs(r.CohortSeed, 0, r.NTrain+r.NVal, phantom.ShiftNone), prep, levels, r.Workers, progress(log, "training and validation phantoms"))
	if err != nil {
		return nil, err
	}
	trainCases, valCases := all[:r.NTrain], all[r.NTrain:]
	res := &Result{Net: n}
	res.Timing.GenerateTrainVal = time.Since(start).Seconds()
	log("generated %d phantoms in %.0f s", len(all), res.Timing.GenerateTrainVal)
	t0 := time.Now()
	cfg := r.Train
	cfg.Workers = r.Workers
	cfg.Log = log
	if res.History, err = Fit(n, Examples(trainCases), Examples(valCases), cfg); err != nil {
		return nil, err
	}
	res.Timing.Train = time.Since(t0).Seconds()
	res.Timing.TrainingTotal = time.Since(start).Seconds()
	res.Timing.CPUTrainingTotal = cputime.Seconds() - cpu0
	log("trained in %.0f s (%.0f s with data generation; %.0f CPU s)", res.Timing.Train, res.Timing.TrainingTotal, res.Timing.CPUTrainingTotal)
	t0 = time.Now()
	calCases, err := GenerateCached(r.CacheDir, Specs(r.CohortSeed, r.NTrain+r.NVal, r.NCal, phantom.ShiftNone), prep, levels, r.Workers, progress(log, "calibration phantoms"))
	if err != nil {
		return nil, err
	}
	if err := res.fitCard(r, prep, levels, trainCases, valCases, calCases, log); err != nil {
		return nil, err
	}
	res.Timing.Evaluate = time.Since(t0).Seconds()
	res.Timing.Total = time.Since(start).Seconds()
	res.Timing.CPUTotal = cputime.Seconds() - cpu0
	return res, nil
}

func progress(log func(string, ...any), what string) func(done, total int) {
	return func(done, total int) {
		if done%50 == 0 || done == total {
			log("%s: %d/%d", what, done, total)
		}
	}
}

// fitCases runs the exported model on cases and pairs the outputs with the
// measurements for inference.FitReference.
func (res *Result) fitCases(cs []Case, workers int) ([]inference.FitCase, error) {
	xs := make([][]float32, len(cs))
	for i := range cs {
		xs[i] = cs[i].X
	}
	outs, err := res.Net.Predict(xs, workers)
	if err != nil {
		return nil, err
	}
	fc := make([]inference.FitCase, len(cs))
	for i := range cs {
		fc[i] = inference.FitCase{Facts: cs[i].Facts, Output: inference.Output(outs[i]), Label: cs[i].Subject.Label}
	}
	return fc, nil
}

func (res *Result) fitCard(r Recipe, prep preprocess.Spec, levels []float64, trainCases, valCases, calCases []Case, log func(string, ...any)) error {
	card := DemoCard(r, prep)
	var fits [4][]inference.FitCase
	half := len(calCases) / 2
	for i, cs := range [][]Case{trainCases, valCases, calCases[:half], calCases[half:]} {
		var err error
		if fits[i], err = res.fitCases(cs, r.Workers); err != nil {
			return err
		}
	}
	name := func(what string, from, n int) string {
		return fmt.Sprintf("%d %s phantoms (cohort seed %d, %s to %s)", n, what, r.CohortSeed, phantom.CaseID(from), phantom.CaseID(from+n-1))
	}
	calFrom := r.NTrain + r.NVal
	splits := inference.FitSplits{Train: fits[0], Choose: fits[1], Temperature: fits[2], HeldOut: fits[3],
		TrainDescription:       name("training", 0, len(trainCases)),
		ChooseDescription:      name("validation", r.NTrain, len(valCases)),
		TemperatureDescription: name("calibration", calFrom, half),
		HeldOutDescription:     name("held-out calibration", calFrom+half, len(calCases)-half)}
	ood, cal, metrics, err := inference.FitReferenceSplits(card, splits, inference.FitOptions{Levels: levels})
	if err != nil {
		return err
	}
	card.OOD, card.Calibration = ood, cal
	card.Validation = metrics
	if res.Model == nil {
		if res.Model, err = res.Net.Encode(); err != nil {
			return err
		}
	}
	card.ModelSHA256 = sha256Hex(res.Model)
	if err := card.Validate(); err != nil {
		return fmt.Errorf("demo card: %w", err)
	}
	res.Card = card
	log("fitted: %s\n  calibration: %s", metricLine(card.Validation), cal.Decision)
	return res.evaluate(r, prep, levels, log)
}

// evaluate adds the held-out figures: the fresh in-distribution phantoms
// (discrimination, calibration, fit-check false alarms) and each shifted
// variant (fit-check flag rate).
func (res *Result) evaluate(r Recipe, prep preprocess.Spec, levels []float64, log func(string, ...any)) error {
	card := res.Card
	test, err := GenerateCached(r.CacheDir, Specs(r.TestSeed, 0, r.NTest, phantom.ShiftNone), prep, levels, r.Workers, progress(log, "held-out phantoms"))
	if err != nil {
		return err
	}
	testFit, err := res.fitCases(test, r.Workers)
	if err != nil {
		return err
	}
	desc := fmt.Sprintf("held-out: %d fresh phantoms (seed %d, never used in training or fitting)", len(test), r.TestSeed)
	held, err := inference.CalibrationMetrics(card, testFit, card.Calibration.Temperature, desc)
	if err != nil {
		return err
	}
	card.Validation = append(card.Validation, held...)
	sev := severityMetrics(card, test, testFit, desc)
	card.Validation = append(card.Validation, sev...)
	card.Cautions = append([]string{fmt.Sprintf("Detection depends on how strong the pattern is: on fresh phantoms the AUROC is %.2f for severity up to 0.4 and %.2f above it.",
		sev[0].Value, sev[1].Value)}, card.Cautions...)
	flagged, err := flagRate(card, testFit, nil)
	if err != nil {
		return err
	}
	card.Validation = append(card.Validation, inference.Metric{Name: "fit_check_false_alarm_rate", Value: flagged, N: len(test), Split: desc,
		How: "fraction of in-distribution cases whose fit-check verdict is out-of-distribution"})
	res.Shifted = map[phantom.Shift]float64{}
	for _, sh := range phantom.Shifts() {
		cs, err := GenerateCached(r.CacheDir, Specs(r.ShiftSeed, 0, r.NPerShift, sh), prep, levels, r.Workers, nil)
		if err != nil {
			return err
		}
		var ok []Case
		refused := 0
		for _, c := range cs {
			if c.Err != "" {
				refused++
				continue
			}
			ok = append(ok, c)
		}
		fc, err := res.fitCases(ok, r.Workers)
		if err != nil {
			return err
		}
		rate, err := flagRate(card, fc, &refused)
		if err != nil {
			return err
		}
		res.Shifted[sh] = rate
		card.Validation = append(card.Validation, inference.Metric{Name: "fit_check_flag_rate_" + string(sh), Value: rate, N: len(cs),
			Split: fmt.Sprintf("shifted variant %q: %d phantoms (seed %d, not used for fitting)", sh, len(cs), r.ShiftSeed),
			How:   "fraction of shifted cases whose fit-check verdict is out-of-distribution (a scan preprocessing refuses counts as flagged)"})
	}
	log("held-out and shifted: %s", metricLine(card.Validation))
	return nil
}

// flagRate is the fraction of cases with an out-of-distribution verdict;
// refused cases (when given) count as flagged.
func flagRate(card *inference.Card, cs []inference.FitCase, refused *int) (float64, error) {
	flagged, total := 0, len(cs)
	if refused != nil {
		flagged, total = *refused, total+*refused
	}
	if total == 0 {
		return 0, errors.New("flag rate: no cases")
	}
	for _, fc := range cs {
		ms, err := inference.ComputeModelScores(card, fc.Output)
		if err != nil {
			return 0, err
		}
		if fitcheck.Verdict(inference.RunChecks(card, fc.Facts, ms)) == fitcheck.OutOfDistribution {
			flagged++
		}
	}
	return float64(flagged) / float64(total), nil
}

// severityMetrics are AUROCs of the positive cases of one severity band
// against all negative cases: they show how graded the task is.
func severityMetrics(card *inference.Card, cs []Case, fit []inference.FitCase, desc string) []inference.Metric {
	pos := card.PositiveIndex()
	T := card.Calibration.Temperature
	var out []inference.Metric
	for _, band := range [][2]float64{{0, 0.4}, {0.4, 1}} {
		var scores []float64
		var labels []bool
		for i, fc := range fit {
			sev := cs[i].Subject.Severity
			if fc.Label == pos && !(sev > band[0] && sev <= band[1]) {
				continue
			}
			scores = append(scores, inference.ClassProbabilities(card, fc.Output.Logits, T)[pos])
			labels = append(labels, fc.Label == pos)
		}
		out = append(out, inference.Metric{Name: fmt.Sprintf("auroc_severity_%.1f_to_%.1f", band[0], band[1]),
			Value: stats.AUROC(scores, labels), N: len(scores), Split: desc,
			How: fmt.Sprintf("AUROC of the positive-class probability, positives with pattern severity in (%.1f, %.1f] against all negatives", band[0], band[1])})
	}
	return out
}

func metricLine(ms []inference.Metric) string {
	s := ""
	for _, m := range ms {
		s += fmt.Sprintf("\n  %-34s %.4f  (n=%d, %s)", m.Name, m.Value, m.N, m.Split)
	}
	return s
}

// DemoCard is the demo model's card without the fitted parts (calibration,
// out-of-distribution reference, metrics, sha256).
func DemoCard(r Recipe, prep preprocess.Spec) *inference.Card {
	a := r.Arch
	return &inference.Card{
		Schema:        inference.SchemaVersion,
		Name:          "Harbourside demo atrophy classifier",
		Version:       "1.3.0",
		Task:          "Says whether a T1-weighted-like synthetic head phantom carries the invented diffuse atrophy pattern (wider ventricles, thinner cortex, smaller medial temporal structures).",
		Classes:       []string{"no_pattern", "atrophy_pattern"},
		PositiveClass: "atrophy_pattern",
		Input: inference.InputSpec{Name: a.Input, Layout: preprocess.LayoutNCDHW, DataType: "float32",
			Shape: []int64{-1, 1, int64(a.Grid[2]), int64(a.Grid[1]), int64(a.Grid[0])}},
		Preprocessing: prep,
		Outputs:       inference.OutputSpec{Logits: a.Logits, Features: a.Features, Activation: inference.ActivationSoftmax},
		IntendedUse: "Demonstration and testing of Brightfold on its synthetic demo cohort only. " +
			"It is not a medical device and not for any clinical or research decision about a person. " + notice.Full,
		TrainingData: fmt.Sprintf("Trained only on synthetic head phantoms of the invented Harbourside Memory Research Unit "+
			"(`brightfold demo cohort`, seed %d: %d training, %d validation and %d calibration cases, split by case; half carry the pattern at graded severity). "+
			"No real scan and no information about any person was used. Real scans are outside its training distribution and must be flagged as out-of-distribution by the fit check.",
			r.CohortSeed, r.NTrain, r.NVal, r.NCal),
		Cautions: []string{
			"Trained on synthetic phantoms only: its output on a real scan means nothing, and the fit check must flag real scans as out-of-distribution.",
			"The pattern and the cohort are invented; performance figures describe the phantom generator, not any disease.",
			"Age and site are partly confounded with the pattern in the cohort; the model may use them.",
			"Expects T1-weighted-like MR contrast, about 1 mm voxels and a whole head in the field of view.",
			notice.Full,
		},
	}
}

func sha256Hex(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}
