package inference

import (
	"context"
	"fmt"
	"time"

	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/volume"
)

// Result is one scored case.
type Result struct {
	Prepared   *preprocess.Prepared
	Facts      CaseFacts
	Output     Output
	Scores     ModelScores
	Prediction Prediction
	Checks     []fitcheck.Check
	Verdict    string
	// Causes groups the failed checks by what they saw (GroupCauses).
	Causes []Cause
	// FitScore ranks scans by their distance from the training scans
	// (FitScore); out-of-distribution exactly when > 1.
	FitScore float64
	TimingMs Timing
}

// Timing is where the time of one Score went, in milliseconds.
type Timing struct {
	Preprocess float64 `json:"preprocess"`
	Model      float64 `json:"model"`
	FitCheck   float64 `json:"fit_check"`
	Total      float64 `json:"total"`
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

// Score prepares v as the card states, runs the model, calibrates the
// probability and runs every fit check. An out-of-distribution verdict is a
// result, not an error.
func (s *Session) Score(v *volume.Volume) (*Result, error) {
	return s.ScoreContext(context.Background(), v, nil)
}

// Stage names the step of scoring that is starting, for progress reports.
type Stage string

// The stages of ScoreManyContext, in order.
const (
	StagePrepare  Stage = "preparing the scan"
	StageModel    Stage = "running the model on the CPU"
	StageFitCheck Stage = "running the fit checks"
)

// Progress receives the stage that starts and the fraction of the whole
// scoring done so far (a rough share by stage, not a measured time).
type Progress func(stage Stage, done float64)

// ScoreContext is Score with cancellation and progress (nil for none).
func (s *Session) ScoreContext(ctx context.Context, v *volume.Volume, progress Progress) (*Result, error) {
	rs, err := s.ScoreManyContext(ctx, []*volume.Volume{v}, progress)
	if err != nil {
		return nil, err
	}
	return rs[0], nil
}

// ScoreMany scores several scans, running the model on them in batches.
func (s *Session) ScoreMany(vs []*volume.Volume) ([]*Result, error) {
	return s.ScoreManyContext(context.Background(), vs, nil)
}

// ScoreManyContext is ScoreMany that stops with ctx's error when ctx is
// done (between scans and stages, and inside the model run) and reports
// progress (nil for none).
func (s *Session) ScoreManyContext(ctx context.Context, vs []*volume.Volume, progress Progress) ([]*Result, error) {
	if progress == nil {
		progress = func(Stage, float64) {}
	}
	c := s.mf.Card
	res := make([]*Result, len(vs))
	ts := make([]*preprocess.Tensor, len(vs))
	n := float64(len(vs))
	for i, v := range vs {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		progress(StagePrepare, 0.3*float64(i)/n)
		t0 := time.Now()
		pr, err := PrepareForCardContext(ctx, v, c)
		if err != nil {
			return nil, notPrepared(c, v, err)
		}
		res[i] = &Result{Prepared: pr}
		ts[i] = pr.Tensor
		res[i].TimingMs.Preprocess = ms(time.Since(t0))
	}
	progress(StageModel, 0.3)
	t0 := time.Now()
	outs, err := s.RunContext(ctx, ts)
	if err != nil {
		return nil, err
	}
	modelMs := ms(time.Since(t0)) / float64(len(vs))
	for i, v := range vs {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		progress(StageFitCheck, 0.8+0.2*float64(i)/n)
		r := res[i]
		r.TimingMs.Model = modelMs
		t1 := time.Now()
		r.Output = outs[i]
		if r.Prediction, err = Postprocess(c, r.Output.Logits); err != nil {
			return nil, err
		}
		if r.Scores, err = ComputeModelScores(c, r.Output); err != nil {
			return nil, err
		}
		r.Facts = MeasureCase(v, r.Prepared, c.OOD.Intensity.Levels)
		r.Checks = append(RunChecks(c, r.Facts, r.Scores), alignmentChecks(c, r.Prepared)...)
		r.Verdict = fitcheck.Verdict(r.Checks)
		r.Causes = GroupCauses(r.Checks)
		r.FitScore = FitScore(r.Checks, r.Causes)
		r.TimingMs.FitCheck = ms(time.Since(t1))
		r.TimingMs.Total = r.TimingMs.Preprocess + r.TimingMs.Model + r.TimingMs.FitCheck
	}
	progress(StageFitCheck, 1)
	return res, nil
}

// NotPreparedError says that a scan could not be prepared as the card
// states (no head found, a single slice, ...). It is an input error; Result
// holds what could be checked without the model (header checks, the
// Hounsfield-unit signature, and the failed "preparation" check), with an
// out-of-distribution verdict and no prediction, for callers that report
// such a scan as a result rather than an error.
type NotPreparedError struct {
	Result *Result
	err    error // the inputerr naming the file
}

// Error names the file and the reason.
func (e *NotPreparedError) Error() string { return e.err.Error() }

// Unwrap returns the input error.
func (e *NotPreparedError) Unwrap() error { return e.err }

func notPrepared(c *Card, v *volume.Volume, reason error) error {
	r := &Result{Facts: MeasureHeader(v)}
	r.Checks = RunUnpreparedChecks(c, r.Facts, reason)
	r.Verdict = fitcheck.Verdict(r.Checks)
	r.Causes = GroupCauses(r.Checks)
	r.FitScore = FitScore(r.Checks, r.Causes)
	return &NotPreparedError{Result: r, err: inputerr.Wrap(v.Source, fmt.Errorf("cannot prepare the scan for %s: %w", c.Name, reason))}
}

// FailedChecks returns the checks of r that failed, required ones first.
func (r *Result) FailedChecks() []fitcheck.Check {
	var req, adv []fitcheck.Check
	for _, c := range r.Checks {
		if !c.Pass {
			if c.Required {
				req = append(req, c)
			} else {
				adv = append(adv, c)
			}
		}
	}
	return append(req, adv...)
}
