package inference

import (
	"math"
	"strings"
	"testing"

	"brightfold/inference/fitcheck"
)

func causeChecks(failed map[string]float64, advisory ...string) []fitcheck.Check {
	var out []fitcheck.Check
	for _, n := range []string{CheckModality, CheckSpacing, CheckSliceThickness, CheckFOV, CheckSlices, CheckAnisotropy,
		CheckOrientation, CheckSingleVolume, CheckHeadVolume, CheckHeadAPLR, CheckHeadSIAP, CheckHeadSkewSI, CheckNoise,
		CheckHUSignature, CheckIntensityProfile, CheckMSP, CheckEnergy, CheckMahalanobis} {
		req := !contains(advisory, n)
		if sev, ok := failed[n]; ok {
			out = append(out, fitcheck.Check{Name: n, Required: req, Severity: sev})
		} else {
			out = append(out, fitcheck.Check{Name: n, Pass: true, Required: req, Severity: 0.5})
		}
	}
	return out
}

// The failed checks of each shifted phantom type of docs/evaluation.md
// (seed 20261220, card 1.2.0) come back as one cause, the one the phantom
// generator introduced; a real single-slice CT gives two (modality and slice
// geometry), since it differs in both.
func TestGroupCausesShiftTypes(t *testing.T) {
	cases := []struct {
		shift  string
		failed map[string]float64
		want   []string
	}{
		{"thick", map[string]float64{CheckAnisotropy: 4, CheckSlices: 3, CheckSliceThickness: 4.4, CheckSpacing: 4.4, CheckIntensityProfile: 1.1}, []string{CauseGeometry}},
		{"ct", map[string]float64{CheckModality: 2, CheckHUSignature: 30, CheckIntensityProfile: 9, CheckNoise: 3, CheckMahalanobis: 40}, []string{CauseContrast}},
		{"t2", map[string]float64{CheckIntensityProfile: 6, CheckMahalanobis: 20, CheckNoise: 1.5}, []string{CauseContrast}},
		{"cropped", map[string]float64{CheckFOV: 1.4, CheckHeadSIAP: 1.3, CheckHeadSkewSI: 2.5, CheckHeadVolume: 1.1, CheckMahalanobis: 5}, []string{CauseCoverage}},
		{"flipped", map[string]float64{CheckHeadSkewSI: 6, CheckMahalanobis: 1.5}, []string{CauseOrientation}},
		{"noisy", map[string]float64{CheckNoise: 3, CheckMahalanobis: 2, CheckIntensityProfile: 1.2}, []string{CauseNoise}},
		{"child", map[string]float64{CheckHeadVolume: 1.6, CheckMahalanobis: 3, CheckIntensityProfile: 1.3}, []string{CauseHeadSize}},
		{"CT_small.dcm", map[string]float64{CheckModality: 2, CheckSpacing: 5, CheckSliceThickness: 4, CheckFOV: 30, CheckSlices: 80, CheckAnisotropy: 6}, []string{CauseGeometry, CauseContrast}},
	}
	for _, c := range cases {
		checks := causeChecks(c.failed, CheckMSP, CheckEnergy)
		causes := GroupCauses(checks)
		var got []string
		n := 0
		for _, k := range causes {
			got = append(got, k.Name)
			n += len(k.Checks)
		}
		if strings.Join(got, ",") != strings.Join(c.want, ",") {
			t.Errorf("%s: causes %v, want %v", c.shift, got, c.want)
		}
		if n != len(c.failed) {
			t.Errorf("%s: %d checks attributed, %d failed", c.shift, n, len(c.failed))
		}
		// one cause: the fit score is its largest severity, not a sum of the checks that saw it
		if len(causes) == 1 {
			want := 0.0
			for _, s := range c.failed {
				want = math.Max(want, s)
			}
			if got := FitScore(checks, causes); got != want {
				t.Errorf("%s: fit score %v, want %v", c.shift, got, want)
			}
		}
	}
}

// Two causes multiply; a passing scan scores its closest approach to a limit
// (at most 1); an advisory-only cause does not make the score exceed 1.
func TestFitScore(t *testing.T) {
	two := causeChecks(map[string]float64{CheckModality: 2, CheckSpacing: 3})
	if got := FitScore(two, GroupCauses(two)); got != 6 {
		t.Errorf("two causes: fit score %v, want 2·3", got)
	}
	pass := causeChecks(nil)
	pass[3].Severity = 0.9
	if got := FitScore(pass, GroupCauses(pass)); got != 0.9 || GroupCauses(pass) != nil {
		t.Errorf("passing scan: fit score %v, causes %v", got, GroupCauses(pass))
	}
	adv := causeChecks(map[string]float64{CheckMSP: 1.5}, CheckMSP, CheckEnergy)
	causes := GroupCauses(adv)
	if len(causes) != 1 || causes[0].Required || FitScore(adv, causes) > 1 {
		t.Errorf("advisory only: causes %+v, fit score %v", causes, FitScore(adv, causes))
	}
}

// Severities are factors beyond the limit: a spacing of twice the range's
// maximum is 2, and half its minimum also 2.
func TestSeverityIsAFactor(t *testing.T) {
	c := tinyCard([]byte("x"))
	c.OOD.Envelope.SpacingMm = Range{Min: 0.8, Max: 1.2}
	for _, x := range []float64{2.4, 0.4} {
		ch := fitcheck.Check{Name: CheckSpacing, Value: x}
		if got := severity(c, ch, CaseFacts{}); math.Abs(got-2) > 1e-12 {
			t.Errorf("spacing %v: severity %v, want 2", x, got)
		}
	}
}
