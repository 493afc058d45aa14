package report

import (
	"encoding/json"
	"testing"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/volume"
)

// score --json keeps ood.checks and adds ood.causes: the groups of
// inference.GroupCauses with the names of the checks that saw them, and
// ood.score is inference.FitScore (here one cause, so its largest severity).
func TestScoreJSONCauses(t *testing.T) {
	v, err := volume.New([3]int{2, 2, 2}, volume.Identity())
	if err != nil {
		t.Fatal(err)
	}
	checks := []fitcheck.Check{
		{Name: inference.CheckSpacing, Required: true, Severity: 4},
		{Name: inference.CheckSliceThickness, Required: true, Severity: 4.5},
		{Name: inference.CheckAnisotropy, Required: true, Severity: 3},
		{Name: inference.CheckNoise, Pass: true, Required: true, Severity: 0.5},
	}
	causes := inference.GroupCauses(checks)
	r := &inference.Result{Checks: checks, Causes: causes, FitScore: inference.FitScore(checks, causes), Verdict: fitcheck.Verdict(checks)}
	mf := &inference.ModelFolder{Card: &inference.Card{Name: "m", Version: "1"}}
	b, err := json.Marshal(NewScore("scan.nii", v, mf, r))
	if err != nil {
		t.Fatal(err)
	}
	var got struct {
		OOD struct {
			Score  float64
			Checks []map[string]any
			Causes []struct {
				Name   string
				Checks []string
			}
		}
	}
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatal(err)
	}
	if len(got.OOD.Checks) != 4 || len(got.OOD.Causes) != 1 || got.OOD.Causes[0].Name != inference.CauseGeometry ||
		len(got.OOD.Causes[0].Checks) != 3 || got.OOD.Score != 4.5 {
		t.Errorf("ood: %s", b)
	}
}
