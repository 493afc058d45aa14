package inference

import (
	"math"
	"sort"

	"brightfold/inference/fitcheck"
)

// Cause is one reason a scan is unlike the training scans, with the failed
// checks that saw it: a thick-slice scan fails voxel_spacing,
// slice_thickness, anisotropy and slice_count together, and the reader sees
// one cause with four checks rather than four problems. A check is put
// under a cause only when the cause explains it directly (voxel size
// explains spacing and slice checks, not a head's size in mL); checks that
// react to the scan as a whole (noise, intensity profile, the model's own
// checks) and may follow from any cause are, when a required cause is
// present, shown apart as one entry with Consequence set, which is not a
// cause and does not count in the fit score. The desktop Fit check and
// `score --json` (`ood.causes`) both show GroupCauses' result.
type Cause struct {
	Name        string   `json:"name"`        // e.g. "slice_geometry"
	Title       string   `json:"title"`       // e.g. "Resolution and slice geometry"
	Explanation string   `json:"explanation"` // one sentence for the reader
	Checks      []string `json:"checks"`      // the failed checks attributed to it, most severe first
	// Required is false when only advisory checks saw the cause: it does not
	// make the verdict out-of-distribution. The consequences entry is never
	// required.
	Required bool `json:"required"`
	// Severity is the largest severity of its checks (required ones when
	// Required): the factor by which the worst of them is beyond its limit.
	Severity float64 `json:"severity"`
	// Consequence marks the entry (always the last, Name
	// CauseConsequences) of failed checks that may follow from the causes
	// above it rather than being causes of their own.
	Consequence bool `json:"consequence"`
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
	// CauseConsequences names the entry of checks that may follow from the
	// causes (Cause.Consequence); it is not a cause.
	CauseConsequences = "may_follow_from_causes"
)

// causeRule says which failed checks a cause explains directly: what the
// cause changes by its nature (thicker slices change the spacing, the slice
// thickness, the anisotropy and the number of slices; a field of view that
// cuts the head changes the head's measured volume and extent). Common
// practice in reading such checks, not a published rule.
type causeRule struct {
	name, title, explanation string
	explains                 []string
}

// causeRules in the order a failed check looks for a present cause that
// explains it.
func causeRules() []causeRule {
	return []causeRule{
		{CauseContrast, "Modality or contrast", "The scan's modality or contrast differs from the training scans, so its intensities mean something else to the model.",
			[]string{CheckModality, CheckHUSignature, CheckIntensityProfile, CheckNoise, CheckHeadVolume}},
		{CauseGeometry, "Resolution and slice geometry", "The voxels or slices differ in size or number from the training scans, which blurs what the model sees.",
			[]string{CheckSpacing, CheckSliceThickness, CheckAnisotropy, CheckSlices}},
		{CauseOrientation, "Orientation or head position", "The header's orientation or the head's position differs from the training scans; the head may be shown the wrong way round.",
			[]string{CheckOrientation, CheckHeadSkewSI, CheckHeadAPLR, CheckHeadSIAP}},
		{CauseCoverage, "Field of view", "The field of view does not cover the head as in the training scans; part of the head may be missing, which also changes its measured size and shape.",
			[]string{CheckFOV, CheckSlices, CheckHeadVolume, CheckHeadSIAP, CheckHeadAPLR, CheckHeadSkewSI}},
		{CauseHeadSize, "Head size", "The head is much smaller or larger than in the training scans (or the head mask is wrong).",
			[]string{CheckHeadVolume, CheckHeadSIAP, CheckHeadAPLR}},
		{CauseNoise, "Image noise", "The image is noisier or smoother relative to its tissue contrast than the training scans.",
			[]string{CheckNoise, CheckIntensityProfile}},
		{CauseVolumes, "Several volumes", "The file holds several volumes; the model was trained on single 3D volumes and only one was scored.",
			[]string{CheckSingleVolume}},
		{CausePreparation, "Not prepared for the model", "The scan could not be prepared as the model expects, so the model was not run.",
			[]string{CheckPreparation}},
		{CauseModel, "Unfamiliar to the model", "The model's internal features or confidence are unlike those of the training scans, though no header or image check names a reason.",
			[]string{CheckMahalanobis, CheckMSP, CheckEnergy}},
	}
}

// consequenceRule is the entry of checks that may follow from the causes.
func consequenceRule() causeRule {
	return causeRule{CauseConsequences, "May follow from the causes above",
		"These checks look at the scan as a whole (its noise, its intensities, the model's features) and may fail because of the causes above; they are not counted as causes of their own.",
		nil}
}

// mayFollow reports whether a failed check reacts to the scan as a whole,
// so that it may be a consequence of another cause rather than a cause.
func mayFollow(check string) bool {
	switch check {
	case CheckNoise, CheckIntensityProfile, CheckMahalanobis, CheckMSP, CheckEnergy, CheckPreparation:
		return true
	}
	return false
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
// causes first, in this order.
func causeFacts() []string {
	return []string{CheckModality, CheckHUSignature, CheckSpacing, CheckSliceThickness, CheckAnisotropy,
		CheckSlices, CheckSingleVolume, CheckOrientation, CheckFOV}
}

// causeGrouping is GroupCauses' state: the causes present so far.
type causeGrouping struct {
	rules   []causeRule
	present map[string]*Cause
	follow  *Cause
}

// attach puts ch under the first present cause (in the order of
// causeRules) that explains it and reports whether one did.
func (g *causeGrouping) attach(ch fitcheck.Check) bool {
	for _, r := range g.rules {
		if c := g.present[r.name]; c != nil && contains(r.explains, ch.Name) {
			c.Checks = append(c.Checks, ch.Name)
			return true
		}
	}
	return false
}

// start makes ch start the cause it belongs to (causeHome).
func (g *causeGrouping) start(ch fitcheck.Check) {
	home := causeHome(ch.Name)
	for _, r := range g.rules {
		if r.name == home {
			g.present[home] = &Cause{Name: r.name, Title: r.title, Explanation: r.explanation, Checks: []string{ch.Name}}
		}
	}
}

// requiredPresent reports whether a present cause was seen by a required
// check.
func (g *causeGrouping) requiredPresent(byName map[string]fitcheck.Check) bool {
	for _, c := range g.present {
		for _, n := range c.Checks {
			if byName[n].Required {
				return true
			}
		}
	}
	return false
}

// GroupCauses groups the failed checks into causes. The header facts start
// or join their causes first (causeFacts), then the other checks that
// describe the scan itself (head size and shape, the single-volume
// check), most severe first: each joins the first present
// cause that explains it directly or starts its own. Then the checks that
// look at the scan as a whole (noise, intensity profile, the model's
// checks, whether the scan could be prepared; mayFollow), the image's
// before the model's, each most severe first: a present cause that explains one
// directly takes it (a different contrast explains the intensity profile);
// otherwise, when a required cause is present, it goes to the consequences
// entry (Consequence, last, never required), since it may follow from that
// cause; otherwise it starts its own cause (an unusual intensity profile
// alone is a contrast cause). The causes come back most severe first,
// required before advisory, the consequences entry last. No failed check
// gives no causes. The function is pure, so the desktop app and the command
// line show the same grouping.
func GroupCauses(checks []fitcheck.Check) []Cause {
	failed := map[string]fitcheck.Check{}
	byName := map[string]fitcheck.Check{}
	for _, c := range checks {
		byName[c.Name] = c
		if !c.Pass {
			failed[c.Name] = c
		}
	}
	if len(failed) == 0 {
		return nil
	}
	g := &causeGrouping{rules: causeRules(), present: map[string]*Cause{}}
	for _, name := range causeFacts() {
		if ch, ok := failed[name]; ok {
			if !g.attach(ch) {
				g.start(ch)
			}
			delete(failed, name)
		}
	}
	var rest, image, model []fitcheck.Check
	for _, ch := range failed {
		switch {
		case !mayFollow(ch.Name):
			rest = append(rest, ch)
		case ch.Name == CheckNoise || ch.Name == CheckIntensityProfile:
			image = append(image, ch)
		default:
			model = append(model, ch)
		}
	}
	causeBySeverity(rest)
	causeBySeverity(image)
	causeBySeverity(model)
	for _, ch := range rest {
		if !g.attach(ch) {
			g.start(ch)
		}
	}
	for _, ch := range append(image, model...) {
		switch {
		case g.attach(ch):
		case g.requiredPresent(byName):
			if g.follow == nil {
				r := consequenceRule()
				g.follow = &Cause{Name: r.name, Title: r.title, Explanation: r.explanation, Consequence: true}
			}
			g.follow.Checks = append(g.follow.Checks, ch.Name)
		default:
			g.start(ch)
		}
	}
	var out []Cause
	for _, r := range g.rules {
		if c := g.present[r.name]; c != nil {
			causeFinish(c, byName)
			out = append(out, *c)
		}
	}
	sort.SliceStable(out, func(i, j int) bool {
		if out[i].Required != out[j].Required {
			return out[i].Required
		}
		return out[i].Severity > out[j].Severity
	})
	if g.follow != nil {
		causeFinish(g.follow, byName)
		out = append(out, *g.follow)
	}
	return out
}

// causeBySeverity orders checks most severe first, then by name.
func causeBySeverity(xs []fitcheck.Check) {
	sort.Slice(xs, func(i, j int) bool {
		if xs[i].Severity != xs[j].Severity {
			return xs[i].Severity > xs[j].Severity
		}
		return xs[i].Name < xs[j].Name
	})
}

// CountCauses is how many entries of causes are causes (the consequences
// entry is not).
func CountCauses(causes []Cause) int {
	n := 0
	for _, c := range causes {
		if !c.Consequence {
			n++
		}
	}
	return n
}

// causeFinish sets Required and Severity and orders the checks most severe
// first.
func causeFinish(c *Cause, byName map[string]fitcheck.Check) {
	for _, n := range c.Checks {
		if byName[n].Required && !c.Consequence {
			c.Required = true
		}
	}
	c.Severity = 0
	anyRequired := false
	for _, n := range c.Checks {
		anyRequired = anyRequired || byName[n].Required
	}
	for _, n := range c.Checks {
		ch := byName[n]
		if ch.Required == anyRequired && !math.IsNaN(ch.Severity) {
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
//     count once; the checks that may follow from the causes (the
//     consequences entry) do not multiply it, since they may be a cause's
//     own effect, but the score is never lower than the largest severity
//     of any failed required check, so a scan whose feature distance is 14
//     times its limit beside a field of view 1.15 times too small scores
//     14, not 1.15, and ranks above a scan that is only a little unusual;
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
		if c.Required && !c.Consequence {
			score *= math.Max(1, c.Severity)
			failed = true
		}
	}
	if failed {
		for _, c := range checks {
			if c.Required && !c.Pass && !math.IsNaN(c.Severity) {
				score = math.Max(score, c.Severity)
			}
		}
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
