package report

import (
	"brightfold/inference"
	"brightfold/internal/volume"
)

// NewScore is the JSON form of a scored scan: input (input names the scan),
// model folder, prediction (none when the scan could not be prepared), fit
// check and the stage timings.
func NewScore(input string, v *volume.Volume, b *inference.ModelFolder, r *inference.Result) *Score {
	c := b.Card
	orient := "?"
	if m, err := volume.ClosestAxes(v.Affine); err == nil {
		orient = m.Code()
	}
	rep := &Score{
		Input: Input{Path: input, Format: v.Meta.Format, Dims: v.Dims, SpacingMm: v.Spacing(),
			Orientation: orient, Modality: v.Meta.Modality},
		Model: Model{Name: c.Name, Version: c.Version, SHA256: b.SHA256, Source: b.Source},
		OOD:   OOD{Verdict: r.Verdict, Score: Number(r.FitScore)},
		TimingMs: map[string]float64{"preprocess": r.TimingMs.Preprocess, "model": r.TimingMs.Model,
			"fit_check": r.TimingMs.FitCheck},
		Warnings: append([]string{}, v.Warnings...),
	}
	if r.Prepared != nil {
		rep.Prediction = &Prediction{Label: r.Prediction.Label, Probability: r.Prediction.Probability,
			PositiveClass: c.PositiveClass, Probabilities: r.Prediction.Probabilities,
			Temperature: r.Prediction.Temperature, Uncalibrated: r.Prediction.Uncalibrated}
	}
	for _, ch := range r.Checks {
		rep.OOD.Checks = append(rep.OOD.Checks, Check{Name: ch.Name, Value: Number(ch.Value),
			Threshold: ch.Threshold, Pass: ch.Pass, Required: ch.Required, Explanation: ch.Explanation,
			Severity: Number(ch.Severity)})
	}
	rep.OOD.Causes = []Cause{}
	for _, c := range r.Causes {
		rep.OOD.Causes = append(rep.OOD.Causes, Cause{Name: c.Name, Title: c.Title, Explanation: c.Explanation,
			Checks: append([]string{}, c.Checks...), Required: c.Required, Severity: Number(c.Severity), Consequence: c.Consequence})
	}
	return rep
}
