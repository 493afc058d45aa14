package study

import (
	"context"
	"errors"
	"fmt"
	"sync/atomic"
	"time"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/parallel"
	"brightfold/internal/phantom"
	"brightfold/internal/report"
	"brightfold/internal/volume"
)

// DefaultSeed is the cohort seed of the committed evaluation. The demo
// model's recipe (train.DemoRecipe) uses seed 1 for training and validation,
// 20261201 and 20261204 for shuffling and initial weights, 20261202 for its
// own held-out cases and 20261203 for its shifted cases; this seed is none
// of them.
const DefaultSeed uint64 = 20261220

// Config says which cohort to evaluate.
type Config struct {
	// Seed is the phantom cohort seed; it must not be one the model folder was
	// trained or fitted on.
	Seed uint64
	// N fresh in-distribution cases (indices 0..N-1) and PerShift cases of
	// each shift type (the following indices, shift by shift in the order
	// of Shifts). With PerShift = N/10 and all shifts this is the cohort of
	// `brightfold demo cohort --seed Seed --n N --shifts`.
	N, PerShift int
	// Shifts evaluated; nil means phantom.Shifts().
	Shifts []phantom.Shift
	// VoxelMM renders the phantoms on a coarser grid (tests only); 0 means
	// 1 mm, as the demo model was trained.
	VoxelMM float64
	// Workers is the number of cases rendered and scored at once; 0 means
	// one per CPU.
	Workers int
	// Context, when set, stops the evaluation early with its error.
	Context context.Context
	// Progress, when set, is called after each case (from any goroutine).
	Progress func(done, total int)
}

// Case is one evaluated phantom.
type Case struct {
	ID       string        `json:"case_id"`
	Index    int           `json:"index"`
	Shift    phantom.Shift `json:"shift"`
	Label    int           `json:"label"` // 1 when the phantom carries the pattern
	Severity float64       `json:"severity"`
	Site     string        `json:"site"`
	Age      float64       `json:"age"`
	// NotPrepared is the reason when the scan could not be prepared as the
	// card states: the model was not run (no logits or probabilities), and
	// the verdict, fit score and severities are those of the checks that
	// need no model (inference.NotPreparedError), as `brightfold score`
	// reports them.
	NotPrepared  string             `json:"not_prepared,omitempty"`
	Logits       []float64          `json:"logits"`
	Probability  float64            `json:"probability"` // calibrated, positive class
	Uncalibrated float64            `json:"uncalibrated_probability"`
	Verdict      string             `json:"verdict"`
	FitScore     float64            `json:"fit_score"`
	Failed       []string           `json:"failed_checks"` // required checks that failed
	Causes       []string           `json:"causes"`        // required causes of the failed checks (inference.GroupCauses)
	Severities   map[string]float64 `json:"severities"`    // every check's severity by name
}

// Flagged reports whether the case's verdict is out-of-distribution.
func (c Case) Flagged() bool { return c.Verdict == fitcheck.OutOfDistribution }

// Prepared reports whether the model was run on the case.
func (c Case) Prepared() bool { return c.NotPrepared == "" }

// Subjects lists the cohort of cfg: N in-distribution subjects, then
// PerShift of each shift.
func Subjects(cfg Config) []phantom.Subject {
	var out []phantom.Subject
	for i := 0; i < cfg.N; i++ {
		out = append(out, phantom.NewSubject(cfg.Seed, i, phantom.ShiftNone))
	}
	idx := cfg.N
	for _, sh := range cfg.shifts() {
		for k := 0; k < cfg.PerShift; k++ {
			out = append(out, phantom.NewSubject(cfg.Seed, idx, sh))
			idx++
		}
	}
	return out
}

func (cfg Config) shifts() []phantom.Shift {
	if cfg.Shifts == nil {
		return phantom.Shifts()
	}
	return cfg.Shifts
}

// ScoreCohort renders every subject of cfg's cohort and scores it with
// sess, cfg.Workers cases at a time; the cases come back in cohort order.
func ScoreCohort(sess *inference.Session, cfg Config) ([]Case, error) {
	if cfg.N < 2 {
		return nil, fmt.Errorf("evaluation needs at least 2 in-distribution cases, got %d", cfg.N)
	}
	if cfg.PerShift < 0 {
		return nil, fmt.Errorf("cases per shift must not be negative, got %d", cfg.PerShift)
	}
	ctx := cfg.Context
	if ctx == nil {
		ctx = context.Background()
	}
	subs := Subjects(cfg)
	out := make([]Case, len(subs))
	errs := make([]error, len(subs))
	var done atomic.Int64
	parallel.Each(len(subs), cfg.Workers, func(_, i int) {
		if ctx.Err() != nil {
			return
		}
		out[i], errs[i] = scoreSubject(sess, subs[i], cfg.VoxelMM)
		d := int(done.Add(1))
		if cfg.Progress != nil {
			cfg.Progress(d, len(subs))
		}
	})
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("evaluation stopped: %w", err)
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	return out, nil
}

// scoreSubject renders one phantom (on one goroutine: the cohort is
// parallel by case) and scores it.
func scoreSubject(sess *inference.Session, sub phantom.Subject, voxelMM float64) (Case, error) {
	c := Case{ID: sub.ID, Index: sub.Index, Shift: sub.Shift, Label: sub.Label, Severity: sub.Severity, Site: sub.Site, Age: sub.Age}
	ph, err := phantom.Render(sub, phantom.Options{Shift: sub.Shift, VoxelMM: voxelMM, Workers: 1})
	if err != nil {
		return c, fmt.Errorf("phantom %s (%s): %w", sub.ID, sub.Shift, err)
	}
	r, notPrepared, err := Score(sess, ph.Volume)
	if err != nil {
		return c, fmt.Errorf("score phantom %s (%s): %w", sub.ID, sub.Shift, err)
	}
	c.NotPrepared = notPrepared
	fillResult(&c, r)
	return c, nil
}

// Score scores v as `brightfold score` does: a scan that cannot be prepared
// as the card states is a result (out-of-distribution, from the checks that
// need no model; inference.NotPreparedError), returned with the reason.
func Score(sess *inference.Session, v *volume.Volume) (r *inference.Result, notPrepared string, err error) {
	r, err = sess.Score(v)
	var np *inference.NotPreparedError
	if errors.As(err, &np) && np.Result != nil {
		return np.Result, np.Error(), nil
	}
	return r, "", err
}

// fillResult copies what the evaluation needs from a result.
func fillResult(c *Case, r *inference.Result) {
	if c.Prepared() {
		c.Logits = append([]float64(nil), r.Output.Logits...)
		c.Probability = r.Prediction.Probability
		c.Uncalibrated = r.Prediction.Uncalibrated
	}
	c.Verdict = r.Verdict
	c.FitScore = r.FitScore
	for _, k := range r.Causes {
		if k.Required && !k.Consequence {
			c.Causes = append(c.Causes, k.Name)
		}
	}
	c.Severities = map[string]float64{}
	for _, ch := range r.Checks {
		c.Severities[ch.Name] = ch.Severity
		if ch.Required && !ch.Pass {
			c.Failed = append(c.Failed, ch.Name)
		}
	}
}

// Timing is where an evaluation's time went.
type Timing struct {
	WallS float64       `json:"wall_s"`
	CPUS  report.Number `json:"cpu_s"` // user + system CPU seconds of the process
}

func since(t0 time.Time) float64 { return time.Since(t0).Seconds() }
