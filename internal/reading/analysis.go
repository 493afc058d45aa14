package reading

import (
	"fmt"
	"math"
	"sort"
	"strconv"

	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/stats"
)

// ModelReader is the reader name given to the model alone.
const ModelReader = "model"

// Analysis is the result of a reader-study analysis (brightfold mrmc).
type Analysis struct {
	Notice        string             `json:"notice"`
	Method        string             `json:"method"`
	Covariance    string             `json:"covariance"`
	ReadersFactor string             `json:"readers_factor"`
	Cases         CaseCount          `json:"cases"`
	Conditions    []ConditionAUC     `json:"conditions"`
	Readers       []ReaderAUC        `json:"readers"`
	Test          *Test              `json:"test,omitempty"`
	Difference    *Difference        `json:"difference,omitempty"`
	Differences   []Difference       `json:"differences,omitempty"`
	Components    *Components        `json:"components,omitempty"`
	Model         *ModelAUC          `json:"model,omitempty"`
	Threshold50   []Threshold        `json:"threshold_50,omitempty"`
	Moves         []Moves            `json:"moves,omitempty"`
	TimePerCase   []TimePerCase      `json:"time_per_case,omitempty"`
	Warnings      []string           `json:"warnings,omitempty"`
	Curves        map[string][]Point `json:"-"` // reader + "\x00" + condition → ROC points
	Table         *CaseTable         `json:"-"`
}

// CaseCount says which cases were analysed.
type CaseCount struct {
	Analysed   int `json:"analysed"`
	Positive   int `json:"positive"`
	Negative   int `json:"negative"`
	Incomplete int `json:"dropped_incomplete"` // not read by every reader in every condition
	NoTruth    int `json:"dropped_no_truth"`
}

// ConditionAUC is a condition's mean AUROC over readers with its 95 % interval.
type ConditionAUC struct {
	Name string      `json:"name"`
	AUC  float64     `json:"auc"`
	CI95 *[2]float64 `json:"ci95,omitempty"` // absent for several readers in one condition
	SE   float64     `json:"se,omitempty"`
	DF   *float64    `json:"df,omitempty"`
}

// ReaderAUC is one reader's empirical AUROC in one condition.
type ReaderAUC struct {
	Reader    string  `json:"reader"`
	Condition string  `json:"condition"`
	AUC       float64 `json:"auc"`
}

// Test is the test of equal AUROCs across conditions.
type Test struct {
	Statistic string   `json:"statistic"` // "F", "chi2" or "z"
	F         *float64 `json:"F,omitempty"`
	Chi2      *float64 `json:"chi2,omitempty"`
	Z         *float64 `json:"z,omitempty"`
	DF1       *float64 `json:"df1,omitempty"`
	DF2       *float64 `json:"df2,omitempty"`
	P         float64  `json:"p"`
}

// Difference is a difference of two conditions' mean AUROCs.
type Difference struct {
	Of       string     `json:"of"` // "A - B"
	Estimate float64    `json:"estimate"`
	SE       float64    `json:"se"`
	CI95     [2]float64 `json:"ci95"`
	DF       *float64   `json:"df,omitempty"`
	P        float64    `json:"p"`
}

// Components are the Obuchowski-Rockette variance components.
type Components struct {
	Error float64 `json:"error_variance"`
	Cov1  float64 `json:"cov1"`
	Cov2  float64 `json:"cov2"`
	Cov3  float64 `json:"cov3"`
	MST   float64 `json:"ms_t"`
	MSTR  float64 `json:"ms_tr"`
}

// ModelAUC is the model alone as a reader, on the cases whose output was shown.
type ModelAUC struct {
	SHA256 []string   `json:"model_sha256"`
	Cases  int        `json:"cases"`
	AUC    float64    `json:"auc"`
	CI95   [2]float64 `json:"ci95"` // DeLong
}

// Threshold is sensitivity and specificity at a rating of 50 (of 0–100).
type Threshold struct {
	Reader      string     `json:"reader"`
	Condition   string     `json:"condition"`
	Sensitivity float64    `json:"sensitivity"`
	SensCI95    [2]float64 `json:"sensitivity_ci95"` // Wilson
	Specificity float64    `json:"specificity"`
	SpecCI95    [2]float64 `json:"specificity_ci95"` // Wilson
}

// Moves counts how the aided read moved from the unaided read of a case.
type Moves struct {
	Reader    string `json:"reader"`
	Toward    int    `json:"toward_truth"`
	Away      int    `json:"away_from_truth"`
	Unchanged int    `json:"unchanged"`
}

// TimePerCase summarises the seconds from opening a case to locking its read.
type TimePerCase struct {
	Condition     string  `json:"condition"`
	Reads         int     `json:"reads"`
	MedianSeconds float64 `json:"median_seconds"`
	MeanSeconds   float64 `json:"mean_seconds"`
}

// Point is one point of an empirical ROC curve.
type Point struct{ FPR, TPR float64 }

// CaseTable is the analysed ratings: Ratings[condition][reader][case].
type CaseTable struct {
	Conditions []string
	Readers    []string
	Cases      []string
	Truth      []bool
	Ratings    [][][]float64
	Model      []float64 // per case, NaN where not shown; nil without model outputs
}

// AnalysisOptions choose the covariance method and the readers factor.
type AnalysisOptions struct {
	Cov     stats.CovMethod
	Readers stats.ReadersFactor
}

// Analyse runs the reader-study analysis on reads.
func Analyse(in *Reads, opts AnalysisOptions) (*Analysis, error) {
	if opts.Cov == "" {
		opts.Cov = stats.CovDeLong
	}
	if opts.Readers == "" {
		opts.Readers = stats.RandomReaders
	}
	tab, count, err := buildTable(in)
	if err != nil {
		return nil, err
	}
	a := &Analysis{Notice: notice.Full, Covariance: string(opts.Cov), ReadersFactor: string(opts.Readers),
		Cases: count, Table: tab, Curves: map[string][]Point{}}
	if err := a.aucs(); err != nil {
		return nil, err
	}
	switch {
	case len(tab.Conditions) < 2:
		a.Method = "empirical AUROC per reader (one condition: no comparison)"
		a.Warnings = append(a.Warnings, "only one condition ("+tab.Conditions[0]+"): nothing to compare")
	case len(tab.Readers) == 1 && len(tab.Conditions) == 2:
		err = a.pairedDeLong()
	default:
		err = a.obuchowskiRockette(opts)
	}
	if err != nil {
		return nil, err
	}
	a.sanitize()
	a.modelAlone(in)
	a.threshold50(in)
	a.moves()
	a.times(in)
	return a, nil
}

// conditionOrder puts aided before unaided (so that a difference is aided −
// unaided) and sorts other names.
func conditionOrder(names map[string]bool) []string {
	var out []string
	for n := range names {
		out = append(out, n)
	}
	rank := func(s string) int {
		switch s {
		case string(Aided):
			return 0
		case string(Unaided):
			return 1
		}
		return 2
	}
	sort.Slice(out, func(i, j int) bool {
		if ri, rj := rank(out[i]), rank(out[j]); ri != rj {
			return ri < rj
		}
		return naturalLess(out[i], out[j])
	})
	return out
}

// naturalLess orders numbers numerically, then strings.
func naturalLess(a, b string) bool {
	fa, ea := strconv.ParseFloat(a, 64)
	fb, eb := strconv.ParseFloat(b, 64)
	if ea == nil && eb == nil {
		return fa < fb
	}
	return a < b
}

// buildTable keeps the cases with a known truth read by every reader in every condition.
func buildTable(in *Reads) (*CaseTable, CaseCount, error) {
	var count CaseCount
	if len(in.Rows) == 0 {
		return nil, count, inputerr.New("", "no reads in the inputs")
	}
	conds, readers := map[string]bool{}, map[string]bool{}
	truth := map[string]int{}
	type key struct{ r, c, k string }
	rating := map[key]float64{}
	for _, r := range in.Rows {
		conds[r.Condition], readers[r.Reader] = true, true
		k := key{r.Reader, r.Condition, r.Case}
		if _, dup := rating[k]; dup {
			return nil, count, inputerr.New("", "reader %q rated case %q twice in condition %q", r.Reader, r.Case, r.Condition)
		}
		rating[k] = r.Rating
		if t, seen := truth[r.Case]; seen && t != r.Truth && r.Truth >= 0 && t >= 0 {
			return nil, count, inputerr.New("", "case %q has truth %d in one input and %d in another", r.Case, t, r.Truth)
		}
		if t, seen := truth[r.Case]; !seen || t < 0 {
			truth[r.Case] = r.Truth
		}
	}
	tab := &CaseTable{Conditions: conditionOrder(conds)}
	for r := range readers {
		tab.Readers = append(tab.Readers, r)
	}
	sort.Slice(tab.Readers, func(i, j int) bool { return naturalLess(tab.Readers[i], tab.Readers[j]) })
	var cases []string
	for c := range truth {
		cases = append(cases, c)
	}
	sort.Slice(cases, func(i, j int) bool { return naturalLess(cases[i], cases[j]) })
	for _, c := range cases {
		complete := true
		for _, cond := range tab.Conditions {
			for _, r := range tab.Readers {
				if _, ok := rating[key{r, cond, c}]; !ok {
					complete = false
				}
			}
		}
		switch {
		case truth[c] < 0:
			count.NoTruth++
		case !complete:
			count.Incomplete++
		default:
			tab.Cases = append(tab.Cases, c)
			tab.Truth = append(tab.Truth, truth[c] == 1)
		}
	}
	tab.Ratings = make([][][]float64, len(tab.Conditions))
	for i, cond := range tab.Conditions {
		tab.Ratings[i] = make([][]float64, len(tab.Readers))
		for j, r := range tab.Readers {
			for _, c := range tab.Cases {
				tab.Ratings[i][j] = append(tab.Ratings[i][j], rating[key{r, cond, c}])
			}
		}
	}
	for _, t := range tab.Truth {
		if t {
			count.Positive++
		} else {
			count.Negative++
		}
	}
	count.Analysed = len(tab.Cases)
	if count.Positive == 0 || count.Negative == 0 {
		return nil, count, inputerr.New("", "%d positive and %d negative complete cases with a known truth: an AUROC needs both (%d cases dropped as incomplete, %d without truth)",
			count.Positive, count.Negative, count.Incomplete, count.NoTruth)
	}
	return tab, count, nil
}

// aucs fills the per-reader AUROCs and ROC curves.
func (a *Analysis) aucs() error {
	t := a.Table
	for i, cond := range t.Conditions {
		for j, r := range t.Readers {
			auc, err := stats.EmpiricalAUC(t.Ratings[i][j], t.Truth)
			if err != nil {
				return err
			}
			a.Readers = append(a.Readers, ReaderAUC{Reader: r, Condition: cond, AUC: auc})
			a.Curves[r+"\x00"+cond] = ROCPoints(t.Ratings[i][j], t.Truth)
		}
	}
	if len(t.Conditions) < 2 {
		for i, cond := range t.Conditions {
			c := ConditionAUC{Name: cond}
			if len(t.Readers) == 1 {
				ci, err := stats.DeLongCI(t.Ratings[i][0], t.Truth)
				if err != nil {
					return err
				}
				c.AUC, c.CI95, c.SE = ci.AUC, &ci.CI95, ci.SE
			} else {
				for _, r := range a.Readers {
					c.AUC += r.AUC / float64(len(t.Readers))
				}
			}
			a.Conditions = append(a.Conditions, c)
		}
	}
	return nil
}

func (a *Analysis) pairedDeLong() error {
	t := a.Table
	a.Method = "paired DeLong test of two correlated AUROCs (DeLong et al. 1988), one reader"
	a.Covariance = string(stats.CovDeLong)
	for i, cond := range t.Conditions {
		ci, err := stats.DeLongCI(t.Ratings[i][0], t.Truth)
		if err != nil {
			return err
		}
		a.Conditions = append(a.Conditions, ConditionAUC{Name: cond, AUC: ci.AUC, CI95: &ci.CI95, SE: ci.SE})
	}
	pt, err := stats.DeLongPaired(t.Ratings[0][0], t.Ratings[1][0], t.Truth)
	if err != nil {
		return err
	}
	z := pt.Z
	a.Test = &Test{Statistic: "z", Z: &z, P: pt.P}
	a.Difference = &Difference{Of: t.Conditions[0] + " - " + t.Conditions[1], Estimate: pt.Diff, SE: pt.SE, CI95: pt.CI95, P: pt.P}
	return nil
}

func (a *Analysis) obuchowskiRockette(opts AnalysisOptions) error {
	t := a.Table
	res, err := stats.MRMC(t.Ratings, t.Truth, opts.Cov, opts.Readers)
	if err != nil {
		return inputerr.New("", "%v", err)
	}
	a.Method = fmt.Sprintf("Obuchowski-Rockette with %s covariances, %s readers", opts.Cov, opts.Readers)
	if opts.Readers == stats.RandomReaders {
		a.Method += ", Hillis (2007) denominator degrees of freedom"
	}
	a.Components = &Components{Error: res.ErrorVar, Cov1: res.Cov1, Cov2: res.Cov2, Cov3: res.Cov3, MST: res.MST, MSTR: res.MSTR}
	for i, c := range res.Conditions {
		ci := c.CI95
		ca := ConditionAUC{Name: t.Conditions[i], AUC: c.AUC, CI95: &ci, SE: c.SE}
		if !math.IsInf(c.DF, 1) {
			df := c.DF
			ca.DF = &df
		}
		a.Conditions = append(a.Conditions, ca)
	}
	stat, df1 := res.Statistic, res.DF1
	a.Test = &Test{DF1: &df1, P: res.P}
	if opts.Readers == stats.RandomReaders {
		df2 := res.DF2
		a.Test.Statistic, a.Test.F, a.Test.DF2 = "F", &stat, &df2
	} else {
		a.Test.Statistic, a.Test.Chi2 = "chi2", &stat
	}
	for _, d := range res.Differences {
		diff := Difference{Of: t.Conditions[d.A] + " - " + t.Conditions[d.B], Estimate: d.Estimate, SE: d.SE, CI95: d.CI95, P: d.P}
		if !math.IsInf(d.DF, 1) {
			df := d.DF
			diff.DF = &df
		}
		a.Differences = append(a.Differences, diff)
	}
	a.Difference = &a.Differences[0]
	return nil
}

// ROCPoints is the empirical ROC curve of scores: (0,0), one point per
// distinct score from the highest down, ending at (1,1).
func ROCPoints(scores []float64, truth []bool) []Point {
	idx := make([]int, len(scores))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return scores[idx[a]] > scores[idx[b]] })
	var pos, neg float64
	for _, t := range truth {
		if t {
			pos++
		} else {
			neg++
		}
	}
	pts := []Point{{0, 0}}
	var tp, fp float64
	for i := 0; i < len(idx); {
		j := i
		for ; j < len(idx) && scores[idx[j]] == scores[idx[i]]; j++ {
			if truth[idx[j]] {
				tp++
			} else {
				fp++
			}
		}
		pts = append(pts, Point{FPR: fp / math.Max(neg, 1), TPR: tp / math.Max(pos, 1)})
		i = j
	}
	return pts
}

// modelAlone adds the model as a reader on the analysed cases where its output was shown.
func (a *Analysis) modelAlone(in *Reads) {
	if len(in.Model) == 0 {
		return
	}
	prob := map[string]float64{}
	shas := map[string]bool{}
	for _, m := range in.Model {
		prob[m.Case] = m.Probability
		shas[m.SHA256] = true
	}
	t := a.Table
	t.Model = make([]float64, len(t.Cases))
	var scores []float64
	var truth []bool
	for i, c := range t.Cases {
		t.Model[i] = math.NaN()
		if p, ok := prob[c]; ok {
			t.Model[i] = p
			scores = append(scores, p)
			truth = append(truth, t.Truth[i])
		}
	}
	ci, err := stats.DeLongCI(scores, truth)
	if err != nil {
		a.Warnings = append(a.Warnings, "model alone: "+err.Error())
		return
	}
	m := &ModelAUC{Cases: len(scores), AUC: ci.AUC, CI95: ci.CI95}
	for s := range shas {
		m.SHA256 = append(m.SHA256, s)
	}
	sort.Strings(m.SHA256)
	if len(shas) > 1 {
		a.Warnings = append(a.Warnings, fmt.Sprintf("model outputs come from %d different model folders", len(shas)))
	}
	a.Model = m
	a.Readers = append(a.Readers, ReaderAUC{Reader: ModelReader, Condition: "model alone", AUC: ci.AUC})
	a.Curves[ModelReader+"\x00model alone"] = ROCPoints(scores, truth)
}

// threshold50 computes sensitivity and specificity at a rating of 50 for
// readers whose ratings are probabilities from 0 to 100 (session reads).
func (a *Analysis) threshold50(in *Reads) {
	prob := map[string]bool{}
	for _, r := range in.Rows {
		if r.Session {
			prob[r.Reader] = true
		}
	}
	t := a.Table
	for i, cond := range t.Conditions {
		for j, r := range t.Readers {
			if !prob[r] {
				continue
			}
			var tp, fn, tn, fp int
			for k, y := range t.Truth {
				called := t.Ratings[i][j][k] >= 50
				switch {
				case y && called:
					tp++
				case y:
					fn++
				case called:
					fp++
				default:
					tn++
				}
			}
			th := Threshold{Reader: r, Condition: cond,
				Sensitivity: float64(tp) / float64(tp+fn), Specificity: float64(tn) / float64(tn+fp)}
			th.SensCI95[0], th.SensCI95[1], _ = stats.Wilson(tp, tp+fn, 0.95)
			th.SpecCI95[0], th.SpecCI95[1], _ = stats.Wilson(tn, tn+fp, 0.95)
			a.Threshold50 = append(a.Threshold50, th)
		}
	}
}

// moves counts, per reader, aided reads that moved toward or away from the truth.
func (a *Analysis) moves() {
	t := a.Table
	ai, ui := -1, -1
	for i, c := range t.Conditions {
		switch c {
		case string(Aided):
			ai = i
		case string(Unaided):
			ui = i
		}
	}
	if ai < 0 || ui < 0 {
		return
	}
	for j, r := range t.Readers {
		m := Moves{Reader: r}
		for k, y := range t.Truth {
			d := t.Ratings[ai][j][k] - t.Ratings[ui][j][k]
			switch {
			case d == 0:
				m.Unchanged++
			case (d > 0) == y:
				m.Toward++
			default:
				m.Away++
			}
		}
		a.Moves = append(a.Moves, m)
	}
}

// times summarises seconds per read by condition, over every read that has them.
func (a *Analysis) times(in *Reads) {
	secs := map[string][]float64{}
	for _, r := range in.Rows {
		if r.Seconds >= 0 {
			secs[r.Condition] = append(secs[r.Condition], r.Seconds)
		}
	}
	for _, c := range a.Table.Conditions {
		s := secs[c]
		if len(s) == 0 {
			continue
		}
		sort.Float64s(s)
		sum := 0.0
		for _, v := range s {
			sum += v
		}
		a.TimePerCase = append(a.TimePerCase, TimePerCase{Condition: c, Reads: len(s),
			MedianSeconds: stats.Quantile(s, 0.5), MeanSeconds: sum / float64(len(s))})
	}
}

// finite reports whether every value is a finite number.
func finite(xs ...float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

func finitePtr(p *float64) bool { return p == nil || finite(*p) }

// sanitize drops figures that are undefined for these data (for example a
// zero variance with a single case per class, or readers who agree exactly)
// and says so, so that every number reported is finite.
func (a *Analysis) sanitize() {
	if t := a.Test; t != nil && !(finite(t.P) && finitePtr(t.F) && finitePtr(t.Chi2) && finitePtr(t.Z) && finitePtr(t.DF1) && finitePtr(t.DF2)) {
		a.Test = nil
		a.Warnings = append(a.Warnings, "the test is undefined for these data (no variance between or within readers)")
	}
	var diffs []Difference
	for _, d := range a.Differences {
		if finite(d.Estimate, d.SE, d.P, d.CI95[0], d.CI95[1]) && finitePtr(d.DF) {
			diffs = append(diffs, d)
		}
	}
	a.Differences = diffs
	if d := a.Difference; d != nil && !(finite(d.Estimate, d.SE, d.P, d.CI95[0], d.CI95[1]) && finitePtr(d.DF)) {
		a.Difference = nil
		a.Warnings = append(a.Warnings, "the difference's interval is undefined for these data")
	} else if len(a.Differences) > 0 {
		a.Difference = &a.Differences[0]
	}
	for i := range a.Conditions {
		c := &a.Conditions[i]
		if c.CI95 != nil && !finite(c.CI95[0], c.CI95[1]) {
			c.CI95 = nil
		}
		if !finite(c.SE) {
			c.SE = 0
		}
		if !finitePtr(c.DF) {
			c.DF = nil
		}
	}
	if m := a.Components; m != nil && !finite(m.Error, m.Cov1, m.Cov2, m.Cov3, m.MST, m.MSTR) {
		a.Components = nil
	}
}
