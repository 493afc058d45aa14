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

// A card that kept T = 1 because the fitted temperature did not help on
// held-out cases does not call its probability calibrated; one that applies
// a temperature or a logistic recalibration does.
func TestCalibrationLabel(t *testing.T) {
	kept := &Card{Calibration: Calibration{Temperature: 1, FittedTemperature: 0.6207}}
	if got := CalibrationLabel(kept); got != "calibration checked, not rescaled" {
		t.Errorf("T = 1 kept: label %q", got)
	}
	if got := CalibrationSentence(kept, 1, "> 0.99"); !strings.Contains(got, "T = 0.62") || !strings.HasPrefix(got, "Not rescaled") {
		t.Errorf("T = 1 kept: sentence %q", got)
	}
	scaled := &Card{Calibration: Calibration{Temperature: 0.84}}
	if got := CalibrationLabel(scaled); got != "calibrated" {
		t.Errorf("T = 0.84: label %q", got)
	}
	if got := CalibrationSentence(scaled, 0.84, "0.7"); !strings.Contains(got, "T = 0.84") || !strings.Contains(got, "0.7 before calibration") {
		t.Errorf("T = 0.84: sentence %q", got)
	}
	logistic := &Card{Calibration: Calibration{Temperature: 1, Logistic: &LogisticRecalibration{Slope: 1.1}}}
	if got := CalibrationLabel(logistic); got != "calibrated" {
		t.Errorf("logistic recalibration: label %q", got)
	}
}
