package inference

import (
	"fmt"
	"time"

	"brightfold/inference/fitcheck"
	"brightfold/inputerr"
	"brightfold/volume"
)

// Result is one scored case.
type Result struct {
	Prepared   *Prepared
	Facts      CaseFacts
	Output     Output
	Scores     ModelScores
	Prediction Prediction
	Checks     []fitcheck.Check
	Verdict    string
	FitScore   float64 // largest required-check severity; out-of-distribution exactly when > 1
	TimingMs   Timing
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
	rs, err := s.ScoreMany([]*volume.Volume{v})
	if err != nil {
		return nil, err
	}
	return rs[0], nil
}

// ScoreMany scores several scans, running the model on them in batches.
func (s *Session) ScoreMany(vs []*volume.Volume) ([]*Result, error) {
	c := s.bundle.Card
	res := make([]*Result, len(vs))
	ts := make([]*Tensor, len(vs))
	for i, v := range vs {
		t0 := time.Now()
		pr, err := PrepareForCard(v, c)
		if err != nil {
			return nil, notPrepared(c, v, err)
		}
		res[i] = &Result{Prepared: pr}
		ts[i] = pr.Tensor
		res[i].TimingMs.Preprocess = ms(time.Since(t0))
	}
	t0 := time.Now()
	outs, err := s.Run(ts)
	if err != nil {
		return nil, err
	}
	modelMs := ms(time.Since(t0)) / float64(len(vs))
	for i, v := range vs {
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
		r.Checks = RunChecks(c, r.Facts, r.Scores)
		r.Verdict = fitcheck.Verdict(r.Checks)
		r.FitScore = fitcheck.Score(r.Checks)
		r.TimingMs.FitCheck = ms(time.Since(t1))
		r.TimingMs.Total = r.TimingMs.Preprocess + r.TimingMs.Model + r.TimingMs.FitCheck
	}
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
	r.FitScore = fitcheck.Score(r.Checks)
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
