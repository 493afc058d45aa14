package study

import (
	"math"
	"sort"

	"brightfold/inference"
	"brightfold/internal/phantom"
	"brightfold/internal/report"
	"brightfold/internal/stats"
)

// ECEBins is the number of equal-width confidence bins of the expected
// calibration error, as in Guo et al. 2017 (ICML), Section 2.
const ECEBins = 15

// Figures are the evaluation's measured figures. Values that cannot be
// computed (an AUROC with an empty class) are NaN, written as JSON null.
type Figures struct {
	HeldOut     HeldOut       `json:"held_out"`
	Calibration Calibration   `json:"calibration"`
	FalseAlarms FalseAlarms   `json:"false_alarms"`
	Shifts      []ShiftFigure `json:"shifts"`
}

// HeldOut is the discrimination on the fresh in-distribution cases.
type HeldOut struct {
	N           int           `json:"n"`
	Positives   int           `json:"positives"`
	NotPrepared int           `json:"not_prepared"` // model not run: left out of the figures
	AUROC       report.Number `json:"auroc"`        // of the calibrated positive-class probability
	Accuracy    report.Number `json:"accuracy"`
}

// Calibration is the expected calibration error of the top-class
// confidence on the fresh in-distribution cases (Guo et al. 2017, Eq. 3,
// ECEBins bins), at temperature 1 and at the card's temperature, with the
// mean negative log-likelihood beside it.
type Calibration struct {
	N           int           `json:"n"`
	Bins        int           `json:"bins"`
	Temperature float64       `json:"temperature"`
	ECEBefore   report.Number `json:"ece_before_scaling"`
	ECEAfter    report.Number `json:"ece_after_scaling"`
	NLLBefore   report.Number `json:"nll_before_scaling"`
	NLLAfter    report.Number `json:"nll_after_scaling"`
	// ECE percentile bootstrap 95 % intervals (stats.ECEInterval, 2000
	// resamples) and Brier scores of the positive-class probability.
	ECEBeforeCI []float64     `json:"ece_before_scaling_ci95"`
	ECEAfterCI  []float64     `json:"ece_after_scaling_ci95"`
	BrierBefore report.Number `json:"brier_before_scaling"`
	BrierAfter  report.Number `json:"brier_after_scaling"`
	// Decision is the card's sentence on which temperature it applies and why.
	Decision string `json:"temperature_decision"`
}

// FalseAlarms counts in-distribution cases whose verdict is
// out-of-distribution, and which required checks failed on them.
type FalseAlarms struct {
	N            int            `json:"n"`
	Flagged      int            `json:"flagged"`
	Rate         report.Number  `json:"rate"`
	FailedChecks map[string]int `json:"failed_checks"`
	Causes       map[string]int `json:"causes"` // flagged cases by required cause
}

// ShiftFigure is the fit check's detection of one shift type against the
// in-distribution cases.
type ShiftFigure struct {
	Shift       phantom.Shift `json:"shift"`
	N           int           `json:"n"`
	Flagged     int           `json:"flagged"`
	NotPrepared int           `json:"not_prepared"` // model not run; verdict and fit score from the checks that need no model
	FlagRate    report.Number `json:"flag_rate"`
	// AUROC of the fit score (shifted cases positive, in-distribution
	// negative).
	AUROC report.Number `json:"auroc"`
	// CheckAUROC is the AUROC of each single check's severity, over the
	// cases that have the check (a case whose scan could not be prepared
	// has only the checks that need no model).
	CheckAUROC   map[string]report.Number `json:"check_auroc"`
	FailedChecks map[string]int           `json:"failed_checks"`
	// Causes counts flagged cases by required cause (inference.GroupCauses);
	// a case with two causes counts in both.
	Causes map[string]int `json:"causes"`
}

// Compute computes the figures from scored cases; card gives the classes
// and the temperature.
func Compute(card *inference.Card, cases []Case) Figures {
	var id []Case
	bySh := map[phantom.Shift][]Case{}
	var order []phantom.Shift
	for _, c := range cases {
		if c.Shift == phantom.ShiftNone {
			id = append(id, c)
			continue
		}
		if _, ok := bySh[c.Shift]; !ok {
			order = append(order, c.Shift)
		}
		bySh[c.Shift] = append(bySh[c.Shift], c)
	}
	f := Figures{HeldOut: heldOut(id), Calibration: calibration(card, id), FalseAlarms: falseAlarms(id)}
	names := CheckNames(cases)
	for _, sh := range order {
		f.Shifts = append(f.Shifts, shiftFigure(sh, id, bySh[sh], names))
	}
	return f
}

// CheckNames lists the check names that occur in the cases, in the order
// inference reports them.
func CheckNames(cases []Case) []string {
	rank := map[string]int{}
	for i, n := range checkOrder {
		rank[n] = i
	}
	seen := map[string]bool{}
	var out []string
	for _, c := range cases {
		for n := range c.Severities {
			if !seen[n] {
				seen[n] = true
				out = append(out, n)
			}
		}
	}
	sort.Slice(out, func(a, b int) bool {
		ra, oka := rank[out[a]]
		rb, okb := rank[out[b]]
		switch {
		case oka && okb:
			return ra < rb
		case oka != okb:
			return oka
		}
		return out[a] < out[b]
	})
	return out
}

// checkOrder is the order in which inference.RunChecks reports its checks.
var checkOrder = []string{inference.CheckModality, inference.CheckSpacing, inference.CheckSliceThickness,
	inference.CheckFOV, inference.CheckSlices, inference.CheckAnisotropy, inference.CheckOrientation,
	inference.CheckSingleVolume, inference.CheckHeadVolume, inference.CheckHeadAPLR, inference.CheckHeadSIAP,
	inference.CheckHeadSkewSI, inference.CheckNoise, inference.CheckHUSignature, inference.CheckIntensityProfile,
	inference.CheckMSP, inference.CheckEnergy, inference.CheckMahalanobis, inference.CheckPreparation}

// prepared are the cases the model ran on.
func prepared(cs []Case) []Case {
	var out []Case
	for _, c := range cs {
		if c.Prepared() {
			out = append(out, c)
		}
	}
	return out
}

func heldOut(id []Case) HeldOut {
	ok := prepared(id)
	h := HeldOut{N: len(ok), NotPrepared: len(id) - len(ok)}
	scores := make([]float64, len(ok))
	pos := make([]bool, len(ok))
	right := 0
	for i, c := range ok {
		scores[i], pos[i] = c.Probability, c.Label == 1
		if pos[i] {
			h.Positives++
		}
		if (c.Probability > 0.5) == pos[i] {
			right++
		}
	}
	h.AUROC = report.Number(stats.AUROC(scores, pos))
	h.Accuracy = report.Number(ratio(right, len(ok)))
	return h
}

// calibration computes the top-class confidence and correctness at
// temperature 1 and at the card's temperature with the card's own
// probabilities (inference.ClassProbabilities).
func calibration(card *inference.Card, id []Case) Calibration {
	ok := prepared(id)
	T := card.Calibration.Temperature
	k := Calibration{N: len(ok), Bins: ECEBins, Temperature: T, Decision: card.Calibration.Decision}
	logits := make([][]float64, len(ok))
	labels := make([]int, len(ok))
	for i, c := range ok {
		logits[i], labels[i] = inference.ClassLogits(card, c.Logits), TrueClass(card, c.Label)
	}
	ece := func(t float64) float64 {
		conf := make([]float64, len(ok))
		right := make([]bool, len(ok))
		for i, c := range ok {
			p := inference.ClassProbabilities(card, c.Logits, t)
			best := stats.Argmax(p)
			conf[i], right[i] = p[best], best == TrueClass(card, c.Label)
		}
		return stats.ECE(conf, right, ECEBins)
	}
	k.ECEBefore, k.ECEAfter = report.Number(ece(1)), report.Number(ece(T))
	k.ECEBeforeCI, k.BrierBefore = calibrationSpread(card, ok, 1)
	k.ECEAfterCI, k.BrierAfter = calibrationSpread(card, ok, T)
	if len(ok) > 0 {
		k.NLLBefore = report.Number(stats.NLL(logits, labels, 1))
		k.NLLAfter = report.Number(stats.NLL(logits, labels, T))
	} else {
		k.NLLBefore, k.NLLAfter = report.Number(math.NaN()), report.Number(math.NaN())
	}
	return k
}

// TrueClass is the card's class index of a phantom label: the positive
// class for 1, the other class of a two-class card for 0.
func TrueClass(card *inference.Card, label int) int {
	pos := card.PositiveIndex()
	if label == 1 {
		return pos
	}
	if pos == 0 {
		return 1
	}
	return 0
}

// calibrationSpread is the percentile bootstrap 95 % interval of the ECE
// and the Brier score of the positive-class probability at temperature t
// (nil and NaN without cases).
func calibrationSpread(card *inference.Card, ok []Case, t float64) ([]float64, report.Number) {
	conf, right := make([]float64, len(ok)), make([]bool, len(ok))
	prob, isPos := make([]float64, len(ok)), make([]bool, len(ok))
	pos := card.PositiveIndex()
	for i, c := range ok {
		p := inference.ClassProbabilities(card, c.Logits, t)
		best := stats.Argmax(p)
		conf[i], right[i] = p[best], best == TrueClass(card, c.Label)
		prob[i], isPos[i] = p[pos], TrueClass(card, c.Label) == pos
	}
	lo, hi, err := stats.ECEInterval(conf, right, ECEBins, 2000, 20261211, 0.95)
	if err != nil {
		return nil, report.Number(math.NaN())
	}
	return []float64{lo, hi}, report.Number(stats.Brier(prob, isPos))
}

func falseAlarms(id []Case) FalseAlarms {
	fa := FalseAlarms{N: len(id), FailedChecks: map[string]int{}, Causes: map[string]int{}}
	for _, c := range id {
		if c.Flagged() {
			fa.Flagged++
			countFailed(fa.FailedChecks, c)
			countCauses(fa.Causes, c)
		}
	}
	fa.Rate = report.Number(ratio(fa.Flagged, fa.N))
	return fa
}

func countCauses(m map[string]int, c Case) {
	for _, n := range c.Causes {
		m[n]++
	}
}

func countFailed(m map[string]int, c Case) {
	for _, n := range c.Failed {
		m[n]++
	}
}

func shiftFigure(sh phantom.Shift, id, cs []Case, names []string) ShiftFigure {
	f := ShiftFigure{Shift: sh, N: len(cs), FailedChecks: map[string]int{}, CheckAUROC: map[string]report.Number{}, Causes: map[string]int{}}
	var scores []float64
	var pos []bool
	for _, c := range id {
		scores, pos = append(scores, c.FitScore), append(pos, false)
	}
	for _, c := range cs {
		scores, pos = append(scores, c.FitScore), append(pos, true)
		if c.Flagged() {
			f.Flagged++
			countFailed(f.FailedChecks, c)
			countCauses(f.Causes, c)
		}
		if !c.Prepared() {
			f.NotPrepared++
		}
	}
	f.FlagRate = report.Number(ratio(f.Flagged, f.N))
	f.AUROC = report.Number(stats.AUROC(scores, pos))
	for _, n := range names {
		f.CheckAUROC[n] = report.Number(checkAUROC(n, id, cs))
	}
	return f
}

// checkAUROC is the AUROC of one check's severity, shifted against
// in-distribution; a case without that check is left out.
func checkAUROC(name string, id, sh []Case) float64 {
	var scores []float64
	var pos []bool
	for k, set := range [2][]Case{id, sh} {
		for _, c := range set {
			if s, ok := c.Severities[name]; ok {
				scores, pos = append(scores, s), append(pos, k == 1)
			}
		}
	}
	return stats.AUROC(scores, pos)
}

func ratio(a, b int) float64 {
	if b == 0 {
		return math.NaN()
	}
	return float64(a) / float64(b)
}
