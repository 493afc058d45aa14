package inference

import (
	"math"
	"strings"
	"testing"

	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
)

// The headline rules: the probability is withheld for an
// out-of-distribution verdict and for an unprepared scan; causes name the
// failed checks, required first, with value and limit in units; the
// prevalence note quotes the card's own words.
func TestHeadlineRules(t *testing.T) {
	pass := fitcheck.Check{Name: CheckModality, Value: 1, Threshold: "MR", Pass: true, Required: true}
	spacing := fitcheck.Check{Name: CheckSpacing, Value: 2, Threshold: "0.87 to 1.15 mm", Required: true}
	slices := fitcheck.Check{Name: CheckSlices, Value: 25, Threshold: "≥ 80", Required: true}
	energy := fitcheck.Check{Name: CheckEnergy, Value: -3, Threshold: "≤ -5"}
	in := &Result{Prepared: &preprocess.Prepared{}, Checks: []fitcheck.Check{pass}, Verdict: fitcheck.Verdict([]fitcheck.Check{pass})}
	out := &Result{Prepared: &preprocess.Prepared{}, Checks: []fitcheck.Check{pass, energy, spacing, slices}}
	out.Verdict = fitcheck.Verdict(out.Checks)
	if Withheld(in) || !Withheld(out) || !Withheld(&Result{Verdict: in.Verdict}) || !Withheld(nil) {
		t.Errorf("Withheld: in %v, out %v, unprepared %v", Withheld(in), Withheld(out), Withheld(&Result{Verdict: in.Verdict}))
	}
	causes := VerdictCauses(out)
	want := []string{"Voxel spacing: value 2 mm · limit 0.87 to 1.15 mm", "3D volume: value 25.0 slices · limit ≥ 80 slices", "Energy score"}
	if len(causes) != 3 || causes[0] != want[0] || causes[1] != want[1] || !strings.HasPrefix(causes[2], want[2]) {
		t.Errorf("causes %q, want %q…", causes, want)
	}
	if d := CheckDetail(fitcheck.Check{Name: CheckPreparation, Value: math.NaN(), Threshold: "the scan can be prepared as the card states"}); strings.Contains(d, "value") {
		t.Errorf("a rule-limited check shows a value: %q", d)
	}
	c := &Card{PositiveClass: "atrophy_pattern", TrainingData: "Phantoms (600 training cases; half carry the pattern at graded severity). No real scan."}
	note := PrevalenceNote(c)
	if !strings.Contains(note, "half carry the pattern") || strings.Contains(note, "_") {
		t.Errorf("prevalence note %q", note)
	}
}
