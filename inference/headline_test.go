package inference

import (
	"math"
	"strings"
	"testing"

	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
)

// The headline rules: the probability is withheld for an
// out-of-distribution verdict and for an unprepared scan; causes group the
// failed checks by cause, required first, with value and limit in units; the
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
	// Spacing and slice count are one cause (slice geometry); the model's
	// energy score, which reacts to anything unfamiliar, is shown apart as
	// what may follow from it: two lines, not three, one of them a cause.
	causes := VerdictCauses(out)
	want := []string{"Resolution and slice geometry: Voxel spacing (value 2 mm · limit 0.87 to 1.15 mm); 3D volume (value 25.0 slices · limit ≥ 80 slices)",
		"May follow from the causes above: Energy score"}
	if len(causes) != 2 || causes[0] != want[0] || !strings.HasPrefix(causes[1], want[1]) {
		t.Errorf("causes %q, want %q…", causes, want)
	}
	adv := &Result{Checks: []fitcheck.Check{pass, energy}}
	if got := VerdictCauses(adv); len(got) != 1 || !strings.HasPrefix(got[0], "Unfamiliar to the model (advisory): Energy score") {
		t.Errorf("advisory cause %q", got)
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
