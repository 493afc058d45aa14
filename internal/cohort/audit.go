package cohort

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"brightfold/internal/notice"
	"brightfold/internal/report"
	"brightfold/internal/stats"
)

// Audit file names in OUTDIR.
const (
	AuditJSON = "audit.json"
	AuditTSV  = "audit.tsv"
	AuditPDF  = "audit.pdf"
)

// Audit settings and their common-practice defaults.
const (
	auditThreshold = 0.5  // probability at which sensitivity and specificity are read
	auditECEBins   = 15   // Guo et al. 2017 use 15 bins
	auditSmall     = 20   // a subgroup under 20 cases of a class is marked
	auditAlpha     = 0.05 // level of the closed test and the confounder tests
	auditFolds     = 5
)

// AuditOptions tune the audit.
type AuditOptions struct {
	AgeBands  []float64 // band edges in years; nil: decades
	Seed      uint64    // bootstrap, folds and permutations
	Bootstrap int       // resamples for the ECE interval (0: 1000)
	Perms     int       // permutations of the partial confounder test (0: 2000)
}

// Interval is a figure with its 95 % interval (NaN when not estimable).
type Interval struct {
	Value  report.Number `json:"value"`
	Lo     report.Number `json:"lo"`
	Hi     report.Number `json:"hi"`
	Method string        `json:"interval"`
}

// Metrics are the figures of one group of labelled, scored cases.
type Metrics struct {
	N           int      `json:"n"`
	Positives   int      `json:"n_positive"`
	Negatives   int      `json:"n_negative"`
	AUROC       Interval `json:"auroc"`
	Sensitivity Interval `json:"sensitivity"`
	Specificity Interval `json:"specificity"`
	ECE         Interval `json:"ece"`
	Brier       Interval `json:"brier"`
	Small       bool     `json:"under_20_per_class"`
}

// Subgroup is one site, sex or age band.
type Subgroup struct {
	By   string `json:"by"` // "site", "sex" or "age band"
	Name string `json:"name"`
	Metrics
}

// ReliabilityBin is one bin of the reliability diagram.
type ReliabilityBin struct {
	Lo, Hi   float64       `json:"-"`
	Range    [2]float64    `json:"range"`
	N        int           `json:"n"`
	MeanP    report.Number `json:"mean_probability"`
	Observed report.Number `json:"observed_rate"`
}

// CalibrationAudit is the calibration section.
type CalibrationAudit struct {
	ECE           Interval         `json:"ece"`
	Brier         Interval         `json:"brier"`
	Intercept     report.Number    `json:"calibration_intercept"`
	Slope         report.Number    `json:"calibration_slope"`
	Recalibration string           `json:"recommended_recalibration"`
	PRecalVsOrig  report.Number    `json:"p_recalibration_vs_original"`
	PRecalVsInt   report.Number    `json:"p_recalibration_vs_intercept"`
	Reliability   []ReliabilityBin `json:"reliability"`
	Sentence      string           `json:"sentence"`
}

// CovariateAUROC is how well the covariates alone predict the label.
type CovariateAUROC struct {
	Covariates []string      `json:"covariates"`
	N          int           `json:"n"`
	Folds      int           `json:"folds"`
	AUROC      report.Number `json:"auroc"`
	Sentence   string        `json:"sentence"`
}

// PartialConfound is the partial confounder test of one covariate.
type PartialConfound struct {
	Covariate string        `json:"covariate"`
	N         int           `json:"n"`
	R2        report.Number `json:"r2"`
	P         report.Number `json:"p"`
	Perms     int           `json:"permutations"`
	Sentence  string        `json:"sentence"`
}

// SiteFit is the out-of-distribution rate of one site.
type SiteFit struct {
	Site      string   `json:"site"`
	N         int      `json:"n"`
	OOD       int      `json:"out_of_distribution"`
	Rate      Interval `json:"rate"`
	TopCheck  string   `json:"most_frequent_failed_check"`
	TopCheckN int      `json:"most_frequent_failed_check_n"`
	Sentence  string   `json:"sentence"`
}

// Audit is the site audit of a merged sweep.
type Audit struct {
	Notice         string            `json:"notice"`
	Model          report.Model      `json:"model"`
	Cases          int               `json:"cases"`
	Scored         int               `json:"scored"`
	Labelled       int               `json:"labelled_and_scored"`
	Threshold      float64           `json:"threshold"`
	Overall        Metrics           `json:"discrimination"`
	Discrimination string            `json:"discrimination_sentence"`
	Calibration    CalibrationAudit  `json:"calibration"`
	Subgroups      []Subgroup        `json:"subgroups"`
	SubgroupNote   string            `json:"subgroups_sentence"`
	Covariates     *CovariateAUROC   `json:"covariates_only"`
	Partial        []PartialConfound `json:"partial_confounder_tests"`
	Sites          []SiteFit         `json:"fit_check_by_site"`
	Method         []string          `json:"method"`
}

// auditCase is one labelled, scored case.
type auditCase struct {
	p   float64
	y   bool
	cov map[string]string
}

// RunAudit computes the audit from the merged records.
func RunAudit(recs []*Record, opt AuditOptions) (*Audit, error) {
	if opt.Bootstrap == 0 {
		opt.Bootstrap = 1000
	}
	if opt.Perms == 0 {
		opt.Perms = 2000
	}
	a := &Audit{Notice: notice.Full, Cases: len(recs), Threshold: auditThreshold}
	var cs []auditCase
	for _, r := range recs {
		if r.Result != nil && a.Model.SHA256 == "" {
			a.Model = r.Result.Model
		}
		p, ok := r.Probability()
		if ok {
			a.Scored++
		}
		if ok && r.Label != nil && *r.Label >= 0 {
			cs = append(cs, auditCase{p: p, y: *r.Label == 1, cov: r.Covariates})
		}
	}
	a.Labelled = len(cs)
	a.Overall = metrics(cs, opt)
	if a.Overall.Positives == 0 || a.Overall.Negatives == 0 {
		return nil, errors.New("the audit needs labelled cases of both classes (label 1/0 in participants.tsv or the manifest)")
	}
	a.Discrimination = discriminationSentence(a.Overall)
	cal, err := calibrationAudit(cs, a.Overall)
	if err != nil {
		return nil, err
	}
	a.Calibration = cal
	a.Subgroups = subgroups(cs, opt)
	a.SubgroupNote = fmt.Sprintf("Each site, sex and age band with its number of cases and 95 %% intervals; a subgroup with fewer than %d cases of either class is marked: its figures are too uncertain to compare.", auditSmall)
	a.Covariates = covariateAUROC(cs, opt)
	a.Partial = partialTests(cs, opt)
	a.Sites = siteFit(recs)
	a.Method = auditMethods()
	return a, nil
}

func auditMethods() []string {
	return []string{
		"AUROC with the DeLong 95 % interval (DeLong et al. 1988), as R's pROC ci.auc(method = \"delong\").",
		"Sensitivity and specificity at probability 0.5 with Wilson 95 % intervals (Wilson 1927).",
		fmt.Sprintf("ECE: %d equal-width bins of the top-class confidence (Guo et al. 2017, Eq. 3), percentile bootstrap 95 %% interval over cases; Brier score with the same bootstrap.", auditECEBins),
		"Calibration intercept (slope fixed at 1) and slope by logistic regression on logit(p) (Van Calster et al. 2019); recalibration chosen by the closed testing procedure of Vergouwe et al. 2017 at level 0.05.",
		"Covariates only: ridge logistic regression (C = 1, standardised) on site, sex and age, stratified 5-fold cross-validation, AUROC of the pooled held-out predictions (Snoek et al. 2019 on why confounds matter).",
		"Partial confounder test (Spisak 2022): R² of the model's log-odds logit(p) on the covariate, p by permuting the covariate within label classes.",
		"All figures are in-sample on this cohort's labelled, scored cases; none is held out from the model's training unless the cohort is.",
	}
}

func iv(v, lo, hi float64, method string) Interval {
	return Interval{Value: report.Number(v), Lo: report.Number(lo), Hi: report.Number(hi), Method: method}
}

func nanIv(method string) Interval { return iv(math.NaN(), math.NaN(), math.NaN(), method) }

// metrics computes the figures of a group of cases.
func metrics(cs []auditCase, opt AuditOptions) Metrics {
	m := Metrics{N: len(cs)}
	p := make([]float64, len(cs))
	y := make([]bool, len(cs))
	tp, tn := 0, 0
	for i, c := range cs {
		p[i], y[i] = c.p, c.y
		if c.y {
			m.Positives++
			if c.p >= auditThreshold {
				tp++
			}
		} else {
			m.Negatives++
			if c.p < auditThreshold {
				tn++
			}
		}
	}
	m.Small = m.Positives < auditSmall || m.Negatives < auditSmall
	m.AUROC, m.Sensitivity, m.Specificity = nanIv("DeLong"), nanIv("Wilson"), nanIv("Wilson")
	if d, err := stats.DeLongCI(p, y); err == nil {
		m.AUROC = iv(d.AUC, d.CI95[0], d.CI95[1], "DeLong")
	}
	if lo, hi, err := stats.Wilson(tp, m.Positives, 0.95); err == nil {
		m.Sensitivity = iv(float64(tp)/float64(m.Positives), lo, hi, "Wilson")
	}
	if lo, hi, err := stats.Wilson(tn, m.Negatives, 0.95); err == nil {
		m.Specificity = iv(float64(tn)/float64(m.Negatives), lo, hi, "Wilson")
	}
	m.ECE, m.Brier = nanIv("bootstrap"), nanIv("bootstrap")
	if len(cs) >= 2 {
		m.ECE = bootIv(p, y, opt, ece)
		m.Brier = bootIv(p, y, opt, stats.Brier)
	}
	return m
}

// ece is the top-label ECE of positive-class probabilities.
func ece(p []float64, y []bool) float64 {
	conf := make([]float64, len(p))
	ok := make([]bool, len(p))
	for i, x := range p {
		conf[i] = math.Max(x, 1-x)
		ok[i] = (x >= auditThreshold) == y[i]
	}
	return stats.ECE(conf, ok, auditECEBins)
}

func bootIv(p []float64, y []bool, opt AuditOptions, f func([]float64, []bool) float64) Interval {
	b, err := stats.BootstrapPairs(p, y, opt.Bootstrap, opt.Seed, 0.95, f)
	if err != nil {
		return nanIv("bootstrap")
	}
	return iv(b.Estimate, b.Lo, b.Hi, fmt.Sprintf("percentile bootstrap, %d resamples", opt.Bootstrap))
}

func pct(x report.Number) string { return fmt.Sprintf("%.0f %%", 100*float64(x)) }

func discriminationSentence(m Metrics) string {
	return fmt.Sprintf("On these %d cases, a case with the pattern scored higher than one without it %s of the time (AUROC %.2f, 95 %% CI %.2f-%.2f); at probability 0.5 the model found %s of the cases with the pattern (sensitivity) and cleared %s of those without (specificity).",
		m.N, pct(m.AUROC.Value), m.AUROC.Value, m.AUROC.Lo, m.AUROC.Hi, pct(m.Sensitivity.Value), pct(m.Specificity.Value))
}

func calibrationAudit(cs []auditCase, m Metrics) (CalibrationAudit, error) {
	p := make([]float64, len(cs))
	y := make([]bool, len(cs))
	for i, c := range cs {
		p[i], y[i] = c.p, c.y
	}
	fit, err := stats.CalibrationFit(p, y)
	if err != nil {
		return CalibrationAudit{}, err
	}
	ct := stats.ClosedTestChoice(fit, auditAlpha)
	ca := CalibrationAudit{ECE: m.ECE, Brier: m.Brier, Intercept: report.Number(fit.Intercept), Slope: report.Number(fit.Slope),
		Recalibration: ct.Choice, PRecalVsOrig: report.Number(ct.PRecalibratedVsOriginal), PRecalVsInt: report.Number(ct.PRecalibratedVsIntercept)}
	for b := 0; b < auditECEBins; b++ {
		lo, hi := float64(b)/auditECEBins, float64(b+1)/auditECEBins
		var n int
		var sp, sy float64
		for i, x := range p {
			if bin := max(0, min(auditECEBins-1, int(math.Ceil(x*auditECEBins))-1)); bin == b {
				n++
				sp += x
				if y[i] {
					sy++
				}
			}
		}
		rb := ReliabilityBin{Lo: lo, Hi: hi, Range: [2]float64{lo, hi}, N: n, MeanP: report.Number(math.NaN()), Observed: report.Number(math.NaN())}
		if n > 0 {
			rb.MeanP, rb.Observed = report.Number(sp/float64(n)), report.Number(sy/float64(n))
		}
		ca.Reliability = append(ca.Reliability, rb)
	}
	advice := map[string]string{
		stats.RecalibrateNone:      "the closed test finds no reason to recalibrate here",
		stats.RecalibrateIntercept: "the closed test recommends shifting them (recalibration in the large: new intercept)",
		stats.RecalibrateLogistic:  "the closed test recommends rescaling them (logistic recalibration: new intercept and slope)",
	}[ct.Choice]
	ca.Sentence = fmt.Sprintf("The probabilities were off by %.0f percentage points on average (ECE %.3f, 95 %% CI %.3f-%.3f; Brier %.3f); calibration intercept %.2f (0 is ideal) and slope %.2f (1 is ideal); %s.",
		100*float64(m.ECE.Value), m.ECE.Value, m.ECE.Lo, m.ECE.Hi, m.Brier.Value, fit.Intercept, fit.Slope, advice)
	return ca, nil
}

// ageBand names the band of an age: decades by default ("60-69"), else
// the bands between the given edges ("<40", "40-59", ">=80").
func ageBand(s string, edges []float64) string {
	age, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil || math.IsNaN(age) {
		return ""
	}
	if len(edges) == 0 {
		d := math.Floor(age/10) * 10
		return fmt.Sprintf("%.0f-%.0f", d, d+9)
	}
	if age < edges[0] {
		return fmt.Sprintf("<%g", edges[0])
	}
	for i := 1; i < len(edges); i++ {
		if age < edges[i] {
			return fmt.Sprintf("%g-%g", edges[i-1], edges[i]-1)
		}
	}
	return fmt.Sprintf(">=%g", edges[len(edges)-1])
}

// ParseAgeBands reads "40,60,80" (increasing edges in years).
func ParseAgeBands(s string) ([]float64, error) {
	if strings.TrimSpace(s) == "" {
		return nil, nil
	}
	var out []float64
	for _, f := range strings.Split(s, ",") {
		x, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil || (len(out) > 0 && x <= out[len(out)-1]) || math.IsNaN(x) || math.IsInf(x, 0) {
			return nil, fmt.Errorf("--age-bands %q: want increasing ages separated by commas, e.g. 40,60,80", s)
		}
		out = append(out, x)
	}
	return out, nil
}

func subgroups(cs []auditCase, opt AuditOptions) []Subgroup {
	var out []Subgroup
	for _, by := range []string{"site", "sex", "age band"} {
		groups := map[string][]auditCase{}
		for _, c := range cs {
			k := c.cov[by]
			if by == "age band" {
				k = ageBand(c.cov["age"], opt.AgeBands)
			}
			if k != "" && k != "n/a" {
				groups[k] = append(groups[k], c)
			}
		}
		names := make([]string, 0, len(groups))
		for k := range groups {
			names = append(names, k)
		}
		sort.Slice(names, func(i, j int) bool { return bandLess(names[i], names[j]) })
		for _, k := range names {
			out = append(out, Subgroup{By: by, Name: k, Metrics: metrics(groups[k], opt)})
		}
	}
	return out
}

// bandLess orders names, numeric prefixes by value ("<40" first, then
// "40-59", ...).
func bandLess(a, b string) bool {
	na, ea := leadingNumber(a)
	nb, eb := leadingNumber(b)
	if ea == nil && eb == nil && na != nb {
		return na < nb
	}
	return a < b
}

func leadingNumber(orig string) (float64, error) {
	s := strings.TrimLeft(orig, "<>=")
	i := strings.IndexFunc(s, func(r rune) bool { return !(r >= '0' && r <= '9' || r == '.') })
	if i == 0 {
		return 0, errors.New("no number")
	}
	if i > 0 {
		s = s[:i]
	}
	x, err := strconv.ParseFloat(s, 64)
	if strings.HasPrefix(orig, "<") {
		x -= 0.5
	}
	return x, err
}
