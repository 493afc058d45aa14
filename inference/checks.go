package inference

import (
	"fmt"
	"math"
	"strings"

	"brightfold/inference/fitcheck"
	"brightfold/internal/stats"
)

// Check names, in the order they are reported.
const (
	CheckModality         = "modality"
	CheckSpacing          = "voxel_spacing"
	CheckSliceThickness   = "slice_thickness"
	CheckFOV              = "field_of_view"
	CheckSlices           = "slice_count"
	CheckAnisotropy       = "anisotropy"
	CheckOrientation      = "orientation"
	CheckSingleVolume     = "single_volume"
	CheckHeadVolume       = "head_volume"
	CheckHeadAPLR         = "head_shape_ap_lr"
	CheckHeadSIAP         = "head_shape_si_ap"
	CheckHeadSkewSI       = "head_upright"
	CheckNoise            = "noise_level"
	CheckHUSignature      = "hounsfield_signature"
	CheckIntensityProfile = "intensity_profile"
	CheckMSP              = "max_softmax_probability"
	CheckEnergy           = "energy_score"
	CheckMahalanobis      = "feature_distance"
	// CheckPreparation fails when the scan cannot be prepared as the card
	// states (for example a single slice): the model is not run.
	CheckPreparation = "preparation"
)

// ModelScores are the model-level out-of-distribution scores of one case.
type ModelScores struct {
	MSP         float64 `json:"msp"`         // Hendrycks & Gimpel 2017, at temperature 1
	Energy      float64 `json:"energy"`      // Liu et al. 2020 Eq. 1, at temperature 1
	Mahalanobis float64 `json:"mahalanobis"` // squared Mahalanobis distance: Lee et al. 2018 Eq. 2 without the minus sign
	Nearest     int     `json:"nearest_class"`
}

// ComputeModelScores computes MSP and energy from the logits (temperature 1,
// as both papers' baselines) and the squared Mahalanobis distance of the features to
// the card's nearest class mean.
func ComputeModelScores(c *Card, o Output) (ModelScores, error) {
	z := ClassLogits(c, o.Logits)
	s := ModelScores{MSP: fitcheck.MSP(z, 1), Energy: fitcheck.Energy(z, 1)}
	if len(o.Features) != c.OOD.Features.Dim {
		return s, fmt.Errorf("model gave %d features, the card's reference has %d", len(o.Features), c.OOD.Features.Dim)
	}
	var err error
	s.Mahalanobis, s.Nearest, err = fitcheck.Mahalanobis(o.Features, c.OOD.Features.ClassMeans, c.OOD.Features.Precision)
	return s, err
}

// RunUnpreparedChecks are the checks of a scan that preprocessing refused
// (reason): the header checks, the Hounsfield-unit signature, and a failed
// "preparation" check; the verdict is out-of-distribution.
func RunUnpreparedChecks(c *Card, f CaseFacts, reason error) []fitcheck.Check {
	out := headerChecks(c.OOD.Envelope, f)
	for _, ch := range imageChecks(c.OOD, f) {
		if ch.Name == CheckHUSignature {
			out = append(out, ch)
		}
	}
	for i := range out {
		out[i].Severity = severity(c, out[i], f)
		if !out[i].Pass && !(out[i].Severity > 1) {
			out[i].Severity = math.Nextafter(1, 2)
		}
		if out[i].Pass && out[i].Severity > 1 {
			out[i].Severity = 1
		}
	}
	return append(out, fitcheck.Check{Name: CheckPreparation, Value: math.NaN(), Threshold: "the scan can be prepared as the card states",
		Required: true, Severity: 2,
		Explanation: fmt.Sprintf("The scan could not be prepared the way the model expects (%v), so the model was not run.", reason)})
}

// RunChecks compares one case's measurements and model scores with the
// card's reference and returns the checks, each with one plain sentence.
func RunChecks(c *Card, f CaseFacts, ms ModelScores) []fitcheck.Check {
	var out []fitcheck.Check
	out = append(out, headerChecks(c.OOD.Envelope, f)...)
	out = append(out, imageChecks(c.OOD, f)...)
	out = append(out, modelChecks(c, ms)...)
	for i := range out {
		out[i].Severity = severity(c, out[i], f)
		if !out[i].Pass && !(out[i].Severity > 1) {
			out[i].Severity = math.Nextafter(1, 2) // keep "fails ⟺ severity > 1" at edges
		}
		if out[i].Pass && out[i].Severity > 1 {
			out[i].Severity = 1
		}
	}
	return out
}

// maxSeverity caps severities and the fit score so that a value of 0 (an
// unmeasurable extent) stays finite; no measurable value comes near it.
const maxSeverity = 1e6

// severity is the factor by which the check's value is beyond its limit:
// above 1 exactly when it fails, at most 1 when it passes (how close it
// comes to the limit). Upper limits give value/limit; lower limits
// limit/value; ranges of positive quantities the larger of value/max and
// min/value; the signed head skewness 1 + its distance beyond the range in
// units of the range's width; the energy score 1 + its excess over the
// limit in units of the limit's magnitude; pass-or-fail checks (modality,
// single volume, an orientation the header cannot state) 2 when they fail.
// Severities of different checks share this unit, a factor beyond the
// limit, not a meaning (FitScore says what follows).
func severity(c *Card, ch fitcheck.Check, f CaseFacts) float64 {
	e := c.OOD.Envelope
	th := c.OOD.Thresholds
	var s float64
	switch ch.Name {
	case CheckSpacing:
		s = rangeSeverity(ch.Value, e.SpacingMm)
	case CheckSliceThickness:
		s = rangeSeverity(ch.Value, e.SliceThicknessMm)
	case CheckHeadVolume:
		s = rangeSeverity(ch.Value, e.HeadVolumeMl)
	case CheckHeadAPLR:
		s = rangeSeverity(ch.Value, e.HeadAPOverLR)
	case CheckHeadSIAP:
		s = rangeSeverity(ch.Value, e.HeadSIOverAP)
	case CheckNoise:
		s = rangeSeverity(ch.Value, e.NoiseRatio)
	case CheckHeadSkewSI:
		s = signedRangeSeverity(ch.Value, *e.HeadSkewSI)
	case CheckFOV:
		s = ratio(1, ch.Value)
	case CheckSlices:
		s = ratio(float64(e.MinSlices), ch.Value)
	case CheckAnisotropy:
		s = ratio(ch.Value, e.MaxAnisotropy)
	case CheckOrientation:
		s = ratio(ch.Value, e.MaxObliquityDeg)
	case CheckHUSignature:
		s = math.Min(ratio(f.HUAirFraction, c.OOD.Intensity.HUAirFraction), ratio(f.HUBoneFraction, c.OOD.Intensity.HUBoneFraction))
	case CheckIntensityProfile:
		s = ratio(ch.Value, th.Wasserstein.Value)
	case CheckMahalanobis:
		s = ratio(ch.Value, th.Mahalanobis.Value)
	case CheckMSP:
		s = ratio(1-ch.Value, 1-th.MSP.Value)
	case CheckEnergy:
		s = 1 + (ch.Value-th.Energy.Value)/math.Max(math.Abs(th.Energy.Value), 1e-9)
	}
	if !ch.Pass && (ch.Name == CheckModality || ch.Name == CheckSingleVolume || ch.Name == CheckOrientation && s <= 1) {
		s = 2
	}
	if math.IsNaN(s) {
		if ch.Pass {
			return 0
		}
		return 2
	}
	return math.Max(0, math.Min(maxSeverity, s))
}

// rangeSeverity is the factor of x beyond a range of positive values:
// x/max above it, min/x below it, and inside max(x/max, min/x) ≤ 1. A range
// that reaches 0 or below falls back to signedRangeSeverity.
func rangeSeverity(x float64, r Range) float64 {
	if !(r.Min > 0) {
		return signedRangeSeverity(x, r)
	}
	return math.Max(ratio(x, r.Max), ratio(r.Min, x))
}

// signedRangeSeverity is 1 + the distance of x beyond the nearer end of r
// in units of its width, and inside 1 − 2·(distance to the nearer end)/width.
func signedRangeSeverity(x float64, r Range) float64 {
	w := r.Max - r.Min
	if w <= 0 {
		w = math.Max(math.Abs(r.Max), 1e-9)
	}
	switch {
	case x < r.Min:
		return 1 + (r.Min-x)/w
	case x > r.Max:
		return 1 + (x-r.Max)/w
	}
	return 1 - 2*math.Min(x-r.Min, r.Max-x)/w
}

// ratio is a/b, capped at maxSeverity, with a/0 = maxSeverity for a > 0.
func ratio(a, b float64) float64 {
	if b <= 0 {
		if a > 0 {
			return maxSeverity
		}
		return 0
	}
	return math.Min(maxSeverity, a/b)
}

func rangeText(r Range, unit string) string {
	return fmt.Sprintf("%s to %s%s", FormatValue(r.Min), FormatValue(r.Max), unit)
}

// FormatValue prints a check value compactly for a reader ("not
// measurable" for NaN).
func FormatValue(x float64) string {
	switch {
	case math.IsNaN(x):
		return "not measurable"
	case x != 0 && (math.Abs(x) >= 1e5 || math.Abs(x) < 1e-3):
		return fmt.Sprintf("%.3g", x)
	case math.Abs(x) >= 100:
		return fmt.Sprintf("%.0f", x)
	case math.Abs(x) >= 10:
		return fmt.Sprintf("%.1f", x)
	}
	return fmt.Sprintf("%.3g", x)
}

func rangeCheck(name string, x float64, r Range, unit, pass, fail string) fitcheck.Check {
	ok := r.Contains(x)
	c := fitcheck.Check{Name: name, Value: x, Threshold: rangeText(r, unit), Pass: ok, Required: true}
	if ok {
		c.Explanation = fmt.Sprintf(pass, FormatValue(x)+unit, rangeText(r, unit))
	} else {
		c.Explanation = fmt.Sprintf(fail, FormatValue(x)+unit, rangeText(r, unit))
	}
	return c
}

func headerChecks(e Envelope, f CaseFacts) []fitcheck.Check {
	var out []fitcheck.Check
	mod := strings.ToUpper(strings.TrimSpace(f.Modality))
	mc := fitcheck.Check{Name: CheckModality, Value: 1, Threshold: strings.Join(e.Modalities, ", "), Pass: true, Required: true}
	switch {
	case mod == "":
		mc.Explanation = "The file does not state the modality (usual for NIfTI); the intensity checks below look for CT-like values."
	case contains(e.Modalities, mod):
		mc.Explanation = fmt.Sprintf("The header says %s, the modality the model was trained on.", mod)
	default:
		mc.Value, mc.Pass = 0, false
		mc.Explanation = fmt.Sprintf("The header says the scan is %s, but the model was trained on %s only.", mod, strings.Join(e.Modalities, ", "))
	}
	out = append(out, mc)
	worst := f.SpacingMm[0]
	for _, s := range f.SpacingMm {
		if !e.SpacingMm.Contains(s) && (e.SpacingMm.Contains(worst) || math.Abs(math.Log(s)) > math.Abs(math.Log(worst))) {
			worst = s
		}
	}
	out = append(out, rangeCheck(CheckSpacing, worst, e.SpacingMm, " mm",
		"Voxel spacing %s is within the training range (%s).",
		"A voxel spacing of %s is outside what the model was trained on (%s)."))
	thin := "Slices of %s are thicker than the training scans (%s); fine anatomy is blurred together."
	if f.SliceThicknessMm < e.SliceThicknessMm.Min {
		thin = "Slices of %s are thinner than the training scans (%s); noise and detail differ from what the model knows."
	}
	out = append(out, rangeCheck(CheckSliceThickness, f.SliceThicknessMm, e.SliceThicknessMm, " mm",
		"Slice thickness %s is within the training range (%s).", thin))
	ratio, axis := math.Inf(1), 0
	for a := 0; a < 3; a++ {
		if e.MinFOVMm[a] > 0 {
			if r := f.FOVMm[a] / e.MinFOVMm[a]; r < ratio {
				ratio, axis = r, a
			}
		}
	}
	if math.IsInf(ratio, 1) {
		ratio = 1
	}
	axisName := [3]string{"left-right", "front-back", "head-foot"}[axis]
	fc := fitcheck.Check{Name: CheckFOV, Value: ratio, Threshold: "≥ 1 (scan extent / smallest training extent)", Pass: ratio >= 1, Required: true}
	if fc.Pass {
		fc.Explanation = fmt.Sprintf("The field of view (%.0f × %.0f × %.0f mm) covers at least the smallest training field of view.", f.FOVMm[0], f.FOVMm[1], f.FOVMm[2])
	} else {
		fc.Explanation = fmt.Sprintf("The field of view is too small %s (%.0f mm against at least %.0f mm in training); part of the head may be cut off.", axisName, f.FOVMm[axis], e.MinFOVMm[axis])
	}
	out = append(out, fc)
	minDim := min(f.Dims[0], min(f.Dims[1], f.Dims[2]))
	sc := fitcheck.Check{Name: CheckSlices, Value: float64(minDim), Threshold: fmt.Sprintf("≥ %d", e.MinSlices), Pass: minDim >= e.MinSlices, Required: true}
	if sc.Pass {
		sc.Explanation = fmt.Sprintf("The scan is a 3D volume (at least %d voxels along every axis).", minDim)
	} else {
		sc.Explanation = fmt.Sprintf("The scan has only %s along one axis; the model needs a 3D volume with at least %d.", Plural(minDim, "slice", "slices"), e.MinSlices)
	}
	out = append(out, sc)
	ac := fitcheck.Check{Name: CheckAnisotropy, Value: f.Anisotropy, Threshold: "≤ " + FormatValue(e.MaxAnisotropy), Pass: f.Anisotropy <= e.MaxAnisotropy, Required: true}
	if ac.Pass {
		ac.Explanation = fmt.Sprintf("Voxels are about as even in shape as in training (longest/shortest side %s).", FormatValue(f.Anisotropy))
	} else {
		ac.Explanation = fmt.Sprintf("Voxels are %s times longer along one axis than another, unlike the training scans (at most %s).", FormatValue(f.Anisotropy), FormatValue(e.MaxAnisotropy))
	}
	out = append(out, ac)
	oc := fitcheck.Check{Name: CheckOrientation, Value: f.ObliquityDeg, Threshold: "≤ " + FormatValue(e.MaxObliquityDeg) + "°", Required: true,
		Pass: f.ObliquityDeg <= e.MaxObliquityDeg && !strings.Contains(f.Orientation, "?")}
	if oc.Pass {
		oc.Explanation = fmt.Sprintf("The orientation in the header (%s, tilted %.0f° from the scanner axes) is plausible.", f.Orientation, f.ObliquityDeg)
	} else {
		oc.Explanation = fmt.Sprintf("The header's orientation (%s) is tilted %.0f° from the scanner axes, more than the %.0f° seen in training.", f.Orientation, f.ObliquityDeg, e.MaxObliquityDeg)
	}
	out = append(out, oc)
	vc := fitcheck.Check{Name: CheckSingleVolume, Value: float64(f.NumVolumes), Threshold: "1", Pass: f.NumVolumes <= 1, Required: true}
	if vc.Pass {
		vc.Explanation = "The file holds a single 3D volume."
	} else {
		vc.Explanation = fmt.Sprintf("The file holds %d volumes (a time series or several contrasts), which the model was not trained on; only one of them was scored.", f.NumVolumes)
	}
	return append(out, vc)
}

func imageChecks(o OODReference, f CaseFacts) []fitcheck.Check {
	e := o.Envelope
	out := []fitcheck.Check{
		rangeCheck(CheckHeadVolume, f.HeadVolumeMl, e.HeadVolumeMl, " mL",
			"The head's size (%s) is within the training range (%s).",
			"The head's size (%s) is outside the training range (%s); a much smaller or larger head, or a wrong head mask, changes what the model sees."),
		rangeCheck(CheckHeadAPLR, f.HeadAPOverLR, e.HeadAPOverLR, "",
			"The head's front-back to left-right proportion (%s) is as in training (%s).",
			"The head's front-back to left-right proportion (%s) is unlike training (%s); the header may give the wrong orientation."),
		rangeCheck(CheckHeadSIAP, f.HeadSIOverAP, e.HeadSIOverAP, "",
			"The head's head-foot to front-back proportion (%s) is as in training (%s).",
			"The head's head-foot to front-back proportion (%s) is unlike training (%s); the header may give the wrong orientation or the field of view differs."),
	}
	if r := e.HeadSkewSI; r != nil && !(r.Min == 0 && r.Max == 0) { // exactly [0, 0]: fitted from facts without skewness
		out = append(out, rangeCheck(CheckHeadSkewSI, f.HeadSkewSI, *e.HeadSkewSI, "",
			"The head's mass is distributed head-to-foot as in training (skewness %s; training %s).",
			"The head's mass is distributed head-to-foot unlike training (skewness %s; training %s): the head may be upside down, or the header gives the wrong orientation."))
	}
	out = append(out,
		rangeCheck(CheckNoise, f.NoiseRatio, e.NoiseRatio, "",
			"The image noise relative to tissue contrast (%s) is within the training range (%s).",
			"The image noise relative to tissue contrast (%s) is outside the training range (%s)."))
	in := o.Intensity
	ct := f.HUAirFraction >= in.HUAirFraction && f.HUBoneFraction >= in.HUBoneFraction
	hc := fitcheck.Check{Name: CheckHUSignature, Value: f.HUAirFraction, Required: true, Pass: !ct,
		Threshold: fmt.Sprintf("air fraction < %s or bone fraction < %s", FormatValue(in.HUAirFraction), FormatValue(in.HUBoneFraction))}
	if ct {
		hc.Explanation = fmt.Sprintf("The voxel values look like CT in Hounsfield units (%.0f%% of voxels near −1000 as air, %.1f%% of the rest in the bone range), whatever the header says.", 100*f.HUAirFraction, 100*f.HUBoneFraction)
	} else {
		hc.Explanation = "The voxel values do not look like CT in Hounsfield units."
	}
	out = append(out, hc)
	w := stats.QuantileW1(in.Levels, f.Quantiles, in.Quantiles)
	t := o.Thresholds.Wasserstein
	wc := fitcheck.Check{Name: CheckIntensityProfile, Value: w, Threshold: "≤ " + FormatValue(t.Value), Pass: !t.Fails(w), Required: t.Required}
	if wc.Pass {
		wc.Explanation = fmt.Sprintf("The distribution of brightness inside the head matches training (distance %s, limit %s).", FormatValue(w), FormatValue(t.Value))
	} else {
		wc.Explanation = fmt.Sprintf("The distribution of brightness inside the head differs from training (distance %s, limit %s): another contrast, sequence or scanner setting is likely.", FormatValue(w), FormatValue(t.Value))
	}
	return append(out, wc)
}

func modelChecks(c *Card, ms ModelScores) []fitcheck.Check {
	th := c.OOD.Thresholds
	msp := fitcheck.Check{Name: CheckMSP, Value: ms.MSP, Threshold: "≥ " + FormatValue(th.MSP.Value), Pass: !th.MSP.Fails(ms.MSP), Required: th.MSP.Required}
	if msp.Pass {
		msp.Explanation = fmt.Sprintf("The model's top class probability before calibration (%s) is as high as on most training scans.", FormatValue(ms.MSP))
	} else {
		msp.Explanation = fmt.Sprintf("The model is less sure of any class (%s before calibration) than on %.0f%% of training scans.", FormatValue(ms.MSP), 100*th.MSP.Retention)
	}
	en := fitcheck.Check{Name: CheckEnergy, Value: ms.Energy, Threshold: "≤ " + FormatValue(th.Energy.Value), Pass: !th.Energy.Fails(ms.Energy), Required: th.Energy.Required}
	if en.Pass {
		en.Explanation = fmt.Sprintf("The model's energy score (%s) is as low as on most training scans.", FormatValue(ms.Energy))
	} else {
		en.Explanation = fmt.Sprintf("The model's energy score (%s) is higher than on %.0f%% of training scans, a sign of an unfamiliar input.", FormatValue(ms.Energy), 100*th.Energy.Retention)
	}
	md := fitcheck.Check{Name: CheckMahalanobis, Value: ms.Mahalanobis, Threshold: "≤ " + FormatValue(th.Mahalanobis.Value), Pass: !th.Mahalanobis.Fails(ms.Mahalanobis), Required: th.Mahalanobis.Required}
	if md.Pass {
		md.Explanation = fmt.Sprintf("The model's internal features are close to those of training scans (squared Mahalanobis distance %s, limit %s).", FormatValue(ms.Mahalanobis), FormatValue(th.Mahalanobis.Value))
	} else {
		md.Explanation = fmt.Sprintf("The model's internal features are far from those of every training class (squared Mahalanobis distance %s, limit %s): the scan is unlike the training scans.", FormatValue(ms.Mahalanobis), FormatValue(th.Mahalanobis.Value))
	}
	return []fitcheck.Check{msp, en, md}
}

func contains(xs []string, s string) bool {
	for _, x := range xs {
		if strings.EqualFold(x, s) {
			return true
		}
	}
	return false
}

// CheckTitle is a short title of a check for screens and reports, such as
// "Voxel spacing" for CheckSpacing; unknown names are returned as they are.
func CheckTitle(name string) string {
	switch name {
	case CheckModality:
		return "Modality"
	case CheckSpacing:
		return "Voxel spacing"
	case CheckSliceThickness:
		return "Slice thickness"
	case CheckFOV:
		return "Field of view"
	case CheckSlices:
		return "3D volume"
	case CheckAnisotropy:
		return "Voxel shape"
	case CheckOrientation:
		return "Orientation"
	case CheckSingleVolume:
		return "Single volume"
	case CheckHeadVolume:
		return "Head size"
	case CheckHeadAPLR:
		return "Head shape (front-back / left-right)"
	case CheckHeadSIAP:
		return "Head shape (head-foot / front-back)"
	case CheckHeadSkewSI:
		return "Head upright"
	case CheckNoise:
		return "Noise level"
	case CheckHUSignature:
		return "CT signature (Hounsfield units)"
	case CheckIntensityProfile:
		return "Intensity profile"
	case CheckMSP:
		return "Model confidence (maximum softmax probability)"
	case CheckEnergy:
		return "Energy score"
	case CheckMahalanobis:
		return "Feature distance (squared Mahalanobis)"
	case CheckPreparation:
		return "Preparation for the model"
	case CheckAlignment:
		return "Alignment to the model's template"
	}
	return name
}

// Plural formats a count with the singular or plural words: "1 slice",
// "3 slices"; "1 check fails", "2 checks fail". The screens use it too.
func Plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}
