package inference

import (
	"math"
	"sort"

	"brightfold/inference/fitcheck"
)

// Cause is one reason a scan is unlike the training scans, with the failed
// checks that saw it: a thick-slice scan fails voxel_spacing,
// slice_thickness, anisotropy and slice_count together, and the reader sees
// one cause with four checks rather than four problems. The desktop Fit
// check and `score --json` (`ood.causes`) both show GroupCauses' result.
type Cause struct {
	Name        string   `json:"name"`        // e.g. "slice_geometry"
	Title       string   `json:"title"`       // e.g. "Resolution and slice geometry"
	Explanation string   `json:"explanation"` // one sentence for the reader
	Checks      []string `json:"checks"`      // the failed checks attributed to it, most severe first
	// Required is false when only advisory checks saw the cause: it does not
	// make the verdict out-of-distribution.
	Required bool `json:"required"`
	// Severity is the largest severity of its checks (required ones when
	// Required): the factor by which the worst of them is beyond its limit.
	Severity float64 `json:"severity"`
}

// Cause names.
const (
	CauseContrast    = "modality_or_contrast"
	CauseGeometry    = "slice_geometry"
	CauseOrientation = "orientation"
	CauseCoverage    = "field_of_view"
	CauseHeadSize    = "head_size"
	CauseNoise       = "noise"
	CauseVolumes     = "several_volumes"
	CausePreparation = "preparation"
	CauseModel       = "unfamiliar_to_the_model"
)

// causeRule says which failed checks a cause can explain. A check starts a
// cause when none that is already present explains it; "home" is the cause
// a check starts.
type causeRule struct {
	name, title, explanation string
	explains                 []string
}

// causeRules in the order a failed check looks for a cause that explains it.
// The model's own checks (feature distance, confidence) are explained by
// every cause: they see the scan through the model and react to anything
// unfamiliar. Common practice in reading such checks, not a published rule.
func causeRules() []causeRule {
	model := []string{CheckMahalanobis, CheckMSP, CheckEnergy, CheckPreparation}
	with := func(xs ...string) []string { return append(xs, model...) }
	return []causeRule{
		{CauseContrast, "Modality or contrast", "The scan's modality or contrast differs from the training scans, so its intensities mean something else to the model.",
			with(CheckModality, CheckHUSignature, CheckIntensityProfile, CheckNoise, CheckHeadVolume)},
		{CauseGeometry, "Resolution and slice geometry", "The voxels or slices differ in size or number from the training scans, which blurs or cuts what the model sees.",
			with(CheckSpacing, CheckSliceThickness, CheckAnisotropy, CheckSlices, CheckFOV, CheckIntensityProfile, CheckNoise,
				CheckHeadVolume, CheckHeadAPLR, CheckHeadSIAP, CheckHeadSkewSI)},
		{CauseOrientation, "Orientation or head position", "The header's orientation or the head's position differs from the training scans; the head may be shown the wrong way round.",
			with(CheckOrientation, CheckHeadSkewSI, CheckHeadAPLR, CheckHeadSIAP)},
		{CauseCoverage, "Field of view", "The field of view does not cover the head as in the training scans; part of the head may be missing.",
			with(CheckFOV, CheckHeadVolume, CheckHeadSIAP, CheckHeadAPLR, CheckHeadSkewSI, CheckIntensityProfile)},
		{CauseHeadSize, "Head size", "The head is much smaller or larger than in the training scans (or the head mask is wrong).",
			with(CheckHeadVolume, CheckHeadSIAP, CheckHeadAPLR, CheckIntensityProfile)},
		{CauseNoise, "Image noise", "The image is noisier or smoother relative to its tissue contrast than the training scans.",
			with(CheckNoise, CheckIntensityProfile)},
		{CauseVolumes, "Several volumes", "The file holds several volumes; the model was trained on single 3D volumes and only one was scored.",
			with(CheckSingleVolume)},
		{CausePreparation, "Not prepared for the model", "The scan could not be prepared as the model expects, so the model was not run.",
			[]string{CheckPreparation}},
		{CauseModel, "Unfamiliar to the model", "The model's internal features or confidence are unlike those of the training scans, though no header or image check names a reason.",
			model},
	}
}

// causeHome is the cause a failed check starts when no present cause
// explains it.
func causeHome(check string) string {
	switch check {
	case CheckModality, CheckHUSignature, CheckIntensityProfile:
		return CauseContrast
	case CheckSpacing, CheckSliceThickness, CheckAnisotropy, CheckSlices:
		return CauseGeometry
	case CheckOrientation, CheckHeadSkewSI, CheckHeadAPLR:
		return CauseOrientation
	case CheckFOV, CheckHeadSIAP:
		return CauseCoverage
	case CheckHeadVolume:
		return CauseHeadSize
	case CheckNoise:
		return CauseNoise
	case CheckSingleVolume:
		return CauseVolumes
	case CheckPreparation:
		return CausePreparation
	}
	return CauseModel
}

// causeFacts are the checks read from the header alone: they start their
// causes first, in this order; the other failed checks follow, most severe
// first, and the model's own checks and the preparation check last.
func causeFacts() []string {
	return []string{CheckModality, CheckHUSignature, CheckSpacing, CheckSliceThickness, CheckAnisotropy,
		CheckSlices, CheckSingleVolume, CheckOrientation, CheckFOV}
}

// GroupCauses groups the failed checks into causes: each failed check is
// attributed to the first cause already present (in the order of
// causeRules) that explains it, or else starts the cause it belongs to.
// Header facts are placed first, then the image checks from the most to the
// least severe, then the model's checks and the preparation check. The
// causes come back most severe first, required before advisory. No failed
// check gives no causes. The function is pure, so the desktop app and the
// command line show the same grouping.
func GroupCauses(checks []fitcheck.Check) []Cause {
	failed := map[string]fitcheck.Check{}
	for _, c := range checks {
		if !c.Pass {
			failed[c.Name] = c
		}
	}
	if len(failed) == 0 {
		return nil
	}
	rules := causeRules()
	present := map[string]*Cause{}
	attach := func(ch fitcheck.Check) {
		for _, r := range rules {
			if c := present[r.name]; c != nil && contains(r.explains, ch.Name) {
				c.Checks = append(c.Checks, ch.Name)
				return
			}
		}
		home := causeHome(ch.Name)
		for _, r := range rules {
			if r.name == home {
				present[home] = &Cause{Name: r.name, Title: r.title, Explanation: r.explanation, Checks: []string{ch.Name}}
			}
		}
	}
	for _, name := range causeFacts() {
		if ch, ok := failed[name]; ok {
			attach(ch)
			delete(failed, name)
		}
	}
	var rest, last []fitcheck.Check
	for _, ch := range failed {
		if h := causeHome(ch.Name); h == CauseModel || h == CausePreparation {
			last = append(last, ch)
		} else {
			rest = append(rest, ch)
		}
	}
	bySeverity := func(xs []fitcheck.Check) {
		sort.Slice(xs, func(i, j int) bool {
			if xs[i].Severity != xs[j].Severity {
				return xs[i].Severity > xs[j].Severity
			}
			return xs[i].Name < xs[j].Name
		})
	}
	bySeverity(rest)
	bySeverity(last)
	for _, ch := range append(rest, last...) {
		attach(ch)
	}
	byName := map[string]fitcheck.Check{}
	for _, c := range checks {
		byName[c.Name] = c
	}
	var out []Cause
	for _, r := range rules {
		c := present[r.name]
		if c == nil {
			continue
		}
		causeFinish(c, byName)
		out = append(out, *c)
	}
	sort.SliceStable(out, func(i, j int) bool {
		if out[i].Required != out[j].Required {
			return out[i].Required
		}
		return out[i].Severity > out[j].Severity
	})
	return out
}

// causeFinish sets Required and Severity and orders the checks most severe
// first.
func causeFinish(c *Cause, byName map[string]fitcheck.Check) {
	for _, n := range c.Checks {
		if byName[n].Required {
			c.Required = true
		}
	}
	c.Severity = 0
	for _, n := range c.Checks {
		ch := byName[n]
		if ch.Required == c.Required && !math.IsNaN(ch.Severity) {
			c.Severity = math.Max(c.Severity, ch.Severity)
		}
	}
	sort.SliceStable(c.Checks, func(i, j int) bool { return byName[c.Checks[i]].Severity > byName[c.Checks[j]].Severity })
}

// FitScore ranks scans by how far they are from the training scans, on
// one scale for every case: the severities of the checks are factors by
// which a value is beyond its limit (see severity), and
//
//   - when a required check fails, the fit score is the product, over the
//     required causes (GroupCauses), of each cause's largest severity: one
//     cause 3 times beyond its limit scores 3, two independent causes each
//     3 times beyond score 9, and several checks that saw the same cause
//     count once;
//   - when every required check passes, it is the largest severity of the
//     required checks, at most 1: how close the scan comes to the nearest
//     limit.
//
// The verdict is out-of-distribution exactly when the fit score exceeds 1.
// The severities of different checks share a unit (a factor beyond the
// limit) but not a meaning: a factor of 2 in slice thickness and a factor
// of 2 in feature distance are not equally serious, and the score does not
// claim they are.
func FitScore(checks []fitcheck.Check, causes []Cause) float64 {
	score, failed := 1.0, false
	for _, c := range causes {
		if c.Required {
			score *= math.Max(1, c.Severity)
			failed = true
		}
	}
	if failed {
		return math.Min(score, maxSeverity)
	}
	s := 0.0
	for _, c := range checks {
		if c.Required && !math.IsNaN(c.Severity) {
			s = math.Max(s, c.Severity)
		}
	}
	return math.Min(s, 1)
}
