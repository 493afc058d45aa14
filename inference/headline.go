package inference

import (
	"fmt"
	"math"
	"strings"

	"brightfold/inference/fitcheck"
)

// Withheld reports whether a result's probability must be kept out of the
// headline of every output: the fit check says out-of-distribution (or the
// scan could not be prepared, so there is no probability). The probability
// is then shown only on request, labelled as unreliable, and the relevance
// map is off until asked for.
func Withheld(r *Result) bool {
	return r == nil || r.Prepared == nil || r.Verdict == fitcheck.OutOfDistribution
}

// VerdictCauses lists the reasons for an out-of-distribution verdict, one
// line per cause (GroupCauses; most severe first, required before
// advisory): the cause's title, "(advisory)" when no required check saw it,
// then the checks that saw it with their values against the training
// limits. A thick-slice scan gives one line, not one per failed check.
func VerdictCauses(r *Result) []string {
	if r == nil {
		return nil
	}
	causes := r.Causes
	if causes == nil {
		causes = GroupCauses(r.Checks)
	}
	byName := map[string]fitcheck.Check{}
	for _, c := range r.Checks {
		byName[c.Name] = c
	}
	out := make([]string, 0, len(causes))
	for _, c := range causes {
		out = append(out, CauseTitle(c)+": "+strings.Join(CauseChecks(c, byName), "; "))
	}
	return out
}

// CauseTitle is a cause's title, marked "(advisory)" when it does not
// decide the verdict (the consequences entry keeps its own title).
func CauseTitle(c Cause) string {
	if !c.Required && !c.Consequence {
		return c.Title + " (advisory)"
	}
	return c.Title
}

// CauseChecks are the checks that saw a cause, most severe first, each as
// its title with its value against the limit (CheckDetail).
func CauseChecks(c Cause, byName map[string]fitcheck.Check) []string {
	out := make([]string, 0, len(c.Checks))
	for _, n := range c.Checks {
		line := CheckTitle(n)
		if d := CheckDetail(byName[n]); d != "" {
			line += " (" + d + ")"
		}
		out = append(out, line)
	}
	return out
}

// FitScoreNote says in plain words what a result's fit score means: how
// far the scan is beyond the training limits (FitScore), with the rule that
// above 1 is out of distribution.
func FitScoreNote(r *Result) string {
	if r == nil || math.IsNaN(r.FitScore) {
		return ""
	}
	v := FormatValue(r.FitScore)
	if r.FitScore > 1 {
		return "Fit score " + v + ": the factor by which the scan is beyond the training limits (over 1 is out of distribution)."
	}
	return "Fit score " + v + ": how near the scan comes to a training limit (over 1 is out of distribution)."
}

// CheckDetail is a check's value with its units beside the training limit,
// for a reader: "1 mm · limit 0.87 to 1.15 mm", "6.2 · limit ≤ 3.1
// (Wasserstein distance of normalised intensities)". A check whose limit is
// a list or a rule (modality, preparation) shows the limit alone.
func CheckDetail(c fitcheck.Check) string {
	unit := CheckUnit(c.Name)
	limit := c.Threshold
	if limit != "" && unit != "" && !strings.HasSuffix(limit, strings.TrimSpace(unit)) && strings.ContainsAny(limit, "0123456789") && !strings.HasPrefix(unit, " (") {
		limit += unit
	}
	numeric := strings.ContainsAny(c.Threshold, "0123456789") && c.Name != CheckHUSignature
	var parts []string
	if numeric {
		v := "value " + FormatValue(c.Value) + unit
		parts = append(parts, v)
	}
	if limit != "" {
		parts = append(parts, "limit "+limit)
	}
	return strings.Join(parts, " · ")
}

// CheckUnit is the unit of a check's value, with its leading space: " mm",
// " mL", "°", or a short description in brackets for a ratio or a score.
func CheckUnit(name string) string {
	switch name {
	case CheckSpacing, CheckSliceThickness:
		return " mm"
	case CheckHeadVolume:
		return " mL"
	case CheckOrientation:
		return "°"
	case CheckSlices:
		return " slices"
	case CheckFOV:
		return " (scan extent / smallest training extent)"
	case CheckAnisotropy:
		return " (largest / smallest voxel side)"
	case CheckHeadAPLR, CheckHeadSIAP:
		return " (ratio of head extents)"
	case CheckHeadSkewSI:
		return " (skewness)"
	case CheckNoise:
		return " (noise / tissue contrast)"
	case CheckIntensityProfile:
		return " (distance of normalised intensity quantiles)"
	case CheckMSP:
		return " (top class probability)"
	case CheckEnergy:
		return " (energy, logit units)"
	case CheckMahalanobis:
		return " (Mahalanobis distance in feature space)"
	}
	return ""
}

// ClassName shows a class key as words: "atrophy_pattern" → "atrophy pattern".
func ClassName(key string) string { return strings.ReplaceAll(key, "_", " ") }

// PrevalenceNote says, in words a clinician reads, that a calibrated
// probability holds for the mix of cases the model was calibrated on: the
// card's own words about how many training cases carry the positive class,
// when it has them.
func PrevalenceNote(c *Card) string {
	mix := "the mix of cases it was trained and calibrated on"
	for _, clause := range strings.FieldsFunc(c.TrainingData, func(r rune) bool { return r == ';' || r == '(' || r == ')' || r == '.' }) {
		cl := strings.TrimSpace(clause)
		if strings.Contains(cl, "carry") || strings.Contains(strings.ToLower(cl), "prevalence") {
			mix += " (" + cl + ")"
			break
		}
	}
	return "This probability assumes " + mix + ". Where " + ClassName(c.PositiveClass) +
		" is rarer among the people scanned, the same scan means a lower chance."
}

// CalibrationLabel is the word beside a probability: "calibrated" when the
// card rescales the model's output (a temperature other than 1, or a
// logistic recalibration), and "calibration checked, not rescaled" when the
// card keeps T = 1 (Calibration.Decision says why: a fitted temperature
// that did not lower the NLL of held-out cases).
func CalibrationLabel(c *Card) string {
	if c.Calibration.Logistic != nil || c.Calibration.Temperature != 1 {
		return "calibrated"
	}
	return "calibration checked, not rescaled"
}

// CalibrationSentence says how the shown probability was calibrated, for
// the evidence beside it: the temperature applied, or that none was and
// why, and the probability before any rescaling.
func CalibrationSentence(c *Card, temperature float64, before string) string {
	if CalibrationLabel(c) == "calibrated" {
		return fmt.Sprintf("Calibrated by temperature scaling (T = %.2f; %s before calibration).", temperature, before)
	}
	why := "no temperature is applied"
	if t := c.Calibration.FittedTemperature; t > 0 && t != 1 {
		why = fmt.Sprintf("the temperature fitted on calibration cases (T = %.2f) did not lower the error on held-out cases, so none is applied (T = 1)", t)
	}
	return "Not rescaled: " + why + "."
}
