package modelmake

import (
	"fmt"
	"math"
	"sort"

	"brightfold/inference"
	"brightfold/internal/stats"
)

// MinPerClassFigure is the class size below which a figure carries a
// warning (common practice for small-sample estimates; not from a standard).
const MinPerClassFigure = 20

// BootstrapResamples is B of the percentile bootstrap intervals.
const BootstrapResamples = 1000

// Figures are the validation figures of cases under the card's calibration,
// each with a 95 % interval: AUROC (DeLong), sensitivity and specificity at
// a positive-class probability of 0.5 (Wilson), ECE with 15 bins and Brier
// score (percentile bootstrap, B = 1000, seeded), calibration intercept and
// slope (Wald); then the same per site when cases carry sites.
func Figures(card *inference.Card, cases []Case, desc string, seed uint64) []inference.Metric {
	out := figuresOf(card, cases, desc, "", seed)
	sites := map[string][]Case{}
	for _, c := range cases {
		if c.Site != "" {
			sites[c.Site] = append(sites[c.Site], c)
		}
	}
	names := make([]string, 0, len(sites))
	for s := range sites {
		names = append(names, s)
	}
	sort.Strings(names)
	for _, s := range names {
		if len(names) < 2 && len(sites[s]) == len(cases) {
			break // one site holding every case: the overall figures say it
		}
		out = append(out, figuresOf(card, sites[s], fmt.Sprintf("%d of the %s at site %s", len(sites[s]), desc, s), s, seed)...)
	}
	return out
}

// scored are the arrays every figure is computed from.
type scoredSet struct {
	p, lp, conf []float64
	truth, ok   []bool
}

func score(card *inference.Card, cases []Case) scoredSet {
	pos := card.PositiveIndex()
	var s scoredSet
	for _, c := range cases {
		pr := inference.CalibratedProbabilities(card, c.Fit.Output.Logits)
		best := stats.Argmax(pr)
		q := math.Min(math.Max(pr[pos], 1e-15), 1-1e-15)
		s.p = append(s.p, pr[pos])
		s.lp = append(s.lp, math.Log(q/(1-q)))
		s.conf = append(s.conf, pr[best])
		s.truth = append(s.truth, c.Fit.Label == pos)
		s.ok = append(s.ok, best == c.Fit.Label)
	}
	return s
}

func figuresOf(card *inference.Card, cases []Case, desc, site string, seed uint64) []inference.Metric {
	s := score(card, cases)
	npos, nneg := 0, 0
	for _, t := range s.truth {
		if t {
			npos++
		} else {
			nneg++
		}
	}
	warn := ""
	if npos < MinPerClassFigure || nneg < MinPerClassFigure {
		warn = fmt.Sprintf("fewer than %d cases of a class (%d positive, %d negative): the interval is wide and the figure unstable", MinPerClassFigure, npos, nneg)
	}
	n := len(cases)
	m := func(name string, v float64, ci []float64, interval, how string) inference.Metric {
		return inference.Metric{Name: name, Value: v, N: n, Split: desc, How: how, CI95: ci, Interval: interval, Site: site, Warning: warn}
	}
	var out []inference.Metric
	if npos > 0 && nneg > 0 {
		if a, err := stats.DeLongCI(s.p, s.truth); err == nil {
			out = append(out, m("auroc", a.AUC, a.CI95[:], "DeLong et al. 1988 variance, normal 95 % interval clipped to [0, 1] (as pROC ci.auc, method delong)",
				"AUROC of the calibrated positive-class probability (Mann-Whitney)"))
		}
	}
	tp, fn, tn, fp := 0, 0, 0, 0
	for i, p := range s.p {
		switch {
		case s.truth[i] && p >= 0.5:
			tp++
		case s.truth[i]:
			fn++
		case p < 0.5:
			tn++
		default:
			fp++
		}
	}
	if lo, hi, err := stats.Wilson(tp, tp+fn, 0.95); err == nil {
		out = append(out, m("sensitivity", float64(tp)/float64(tp+fn), []float64{lo, hi}, "Wilson score interval (Wilson 1927)",
			"fraction of positive cases with calibrated positive-class probability ≥ 0.5"))
	}
	if lo, hi, err := stats.Wilson(tn, tn+fp, 0.95); err == nil {
		out = append(out, m("specificity", float64(tn)/float64(tn+fp), []float64{lo, hi}, "Wilson score interval (Wilson 1927)",
			"fraction of negative cases with calibrated positive-class probability < 0.5"))
	}
	boot := fmt.Sprintf("percentile bootstrap over cases, B = %d, seed %d", BootstrapResamples, seed)
	ece := func(idx []int) float64 {
		c, k := make([]float64, len(idx)), make([]bool, len(idx))
		for j, i := range idx {
			c[j], k[j] = s.conf[i], s.ok[i]
		}
		return stats.ECE(c, k, 15)
	}
	brier := func(idx []int) float64 {
		p, t := make([]float64, len(idx)), make([]bool, len(idx))
		for j, i := range idx {
			p[j], t[j] = s.p[i], s.truth[i]
		}
		return stats.Brier(p, t)
	}
	all := make([]int, n)
	for i := range all {
		all[i] = i
	}
	for _, f := range []struct {
		name, how string
		stat      func([]int) float64
	}{
		{"ece", "expected calibration error of the top-class probability, 15 equal-width bins (Guo et al. 2017)", ece},
		{"brier", "Brier score of the calibrated positive-class probability (Brier 1950)", brier},
	} {
		if n < 2 {
			break
		}
		var ci []float64
		if b, err := stats.Bootstrap(n, BootstrapResamples, seed, 0.95, f.stat); err == nil {
			ci = []float64{b.Lo, b.Hi}
		}
		out = append(out, m(f.name, f.stat(all), ci, boot, f.how))
	}
	if a, b, _, err := stats.CalibrationWald(s.p, s.truth); err == nil {
		out = append(out, m("calibration_intercept", a.Value, a.CI95[:], "Wald 95 % interval",
			"calibration in the large: intercept of a logistic model of the outcome with the calibrated logit as offset (0 is ideal)"),
			m("calibration_slope", b.Value, b.CI95[:], "Wald 95 % interval",
				"slope of a logistic model of the outcome on the calibrated logit (1 is ideal; below 1, predictions too extreme)"))
	}
	return out
}
