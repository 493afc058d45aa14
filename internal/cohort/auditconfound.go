package cohort

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"brightfold/internal/report"
	"brightfold/internal/stats"
)

// confoundCovariates are the covariates the confound analyses use, with
// whether each is categorical.
var confoundCovariates = []struct {
	name        string
	categorical bool
}{{"site", true}, {"sex", true}, {"age", false}}

// encodeCovariate turns one covariate into columns: indicators of every
// level but the first (sorted) for a categorical one, the number for a
// numeric one. ok[i] is false where the value is missing or unreadable.
func encodeCovariate(cs []auditCase, name string, categorical bool) (cols [][]float64, ok []bool) {
	cols, ok = make([][]float64, len(cs)), make([]bool, len(cs))
	if !categorical {
		for i, c := range cs {
			x, err := strconv.ParseFloat(strings.TrimSpace(c.cov[name]), 64)
			if err == nil && !math.IsNaN(x) && !math.IsInf(x, 0) {
				cols[i], ok[i] = []float64{x}, true
			}
		}
		return cols, ok
	}
	seen := map[string]bool{}
	for _, c := range cs {
		if v := c.cov[name]; v != "" && v != "n/a" {
			seen[v] = true
		}
	}
	levels := make([]string, 0, len(seen))
	for v := range seen {
		levels = append(levels, v)
	}
	sort.Strings(levels)
	for i, c := range cs {
		v := c.cov[name]
		if !seen[v] {
			continue
		}
		row := make([]float64, max(0, len(levels)-1))
		for j, l := range levels[1:] {
			if v == l {
				row[j] = 1
			}
		}
		cols[i], ok[i] = row, true
	}
	return cols, ok
}

// covariateAUROC: how well site, sex and age alone predict the label.
func covariateAUROC(cs []auditCase, opt AuditOptions) *CovariateAUROC {
	rows := make([][]float64, len(cs))
	keep := make([]bool, len(cs))
	for i := range keep {
		keep[i] = true
	}
	var used []string
	for _, cv := range confoundCovariates {
		cols, ok := encodeCovariate(cs, cv.name, cv.categorical)
		present := 0
		for _, o := range ok {
			if o {
				present++
			}
		}
		if present == 0 {
			continue
		}
		used = append(used, cv.name)
		for i := range cs {
			keep[i] = keep[i] && ok[i]
			rows[i] = append(rows[i], cols[i]...)
		}
	}
	if len(used) == 0 {
		return nil
	}
	var x [][]float64
	var y []bool
	npos := 0
	for i, c := range cs {
		if keep[i] {
			x, y = append(x, rows[i]), append(y, c.y)
			if c.y {
				npos++
			}
		}
	}
	out := &CovariateAUROC{Covariates: used, N: len(y), Folds: auditFolds, AUROC: report.Number(math.NaN())}
	if npos < auditFolds || len(y)-npos < auditFolds || len(x[0]) == 0 {
		out.Sentence = "Too few cases of a class to cross-validate a covariates-only model."
		return out
	}
	auc, _, err := stats.CrossValidatedAUROC(x, y, stats.StratifiedFolds(y, auditFolds, opt.Seed), 1)
	if err != nil {
		out.Sentence = "The covariates-only model could not be fitted: " + err.Error()
		return out
	}
	out.AUROC = report.Number(auc)
	names := strings.Join(used, ", ")
	switch {
	case auc >= 0.6:
		out.Sentence = fmt.Sprintf("%s alone predict the label with a cross-validated AUROC of %.2f: cases with and without the pattern differ in these, so a model can score well here by reading them instead of the disease; compare the model's AUROC within sites and bands, not only overall.", capitalize(names), auc)
	default:
		out.Sentence = fmt.Sprintf("%s alone barely predict the label (cross-validated AUROC %.2f), so they leave little room for a model to score well by reading them.", capitalize(names), auc)
	}
	return out
}

func capitalize(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// partialTests runs the partial confounder test for each covariate.
func partialTests(cs []auditCase, opt AuditOptions) []PartialConfound {
	var out []PartialConfound
	for k, cv := range confoundCovariates {
		cols, ok := encodeCovariate(cs, cv.name, cv.categorical)
		var pred []float64
		var x [][]float64
		var lab []int
		for i, c := range cs {
			if ok[i] && len(cols[i]) > 0 {
				// the log-odds: probabilities near 0 and 1 hide shifts that
				// a linear R² on the probability scale would barely see
				pred, x = append(pred, stats.Logit(c.p)), append(x, cols[i])
				lab = append(lab, b2i(c.y))
			}
		}
		if len(pred) < 3 {
			continue
		}
		r, err := stats.PartialConfounder(pred, x, lab, opt.Perms, opt.Seed+uint64(k))
		if err != nil {
			continue
		}
		pc := PartialConfound{Covariate: cv.name, N: len(pred), R2: report.Number(r.R2), P: report.Number(r.P), Perms: r.Perms}
		if r.P < auditAlpha {
			pc.Sentence = fmt.Sprintf("The model's output depends on %s beyond what the label explains (p = %.3g): it may partly read %s rather than the disease.", cv.name, r.P, cv.name)
		} else {
			pc.Sentence = fmt.Sprintf("No evidence that the model's output depends on %s beyond the label (p = %.2g).", cv.name, r.P)
		}
		out = append(out, pc)
	}
	return out
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// siteFit is the out-of-distribution rate and most frequent failed check
// per site, over every case (labelled or not; a case that could not be
// read counts as out of distribution with the check "unreadable").
func siteFit(recs []*Record) []SiteFit {
	type acc struct {
		n, ood int
		checks map[string]int
	}
	by := map[string]*acc{}
	for _, r := range recs {
		site := r.Covariates["site"]
		if site == "" || site == "n/a" {
			site = "(no site)"
		}
		a := by[site]
		if a == nil {
			a = &acc{checks: map[string]int{}}
			by[site] = a
		}
		a.n++
		switch {
		case r.Result == nil:
			a.ood++
			a.checks["unreadable"]++
		case r.Result.OOD.Verdict != "in-distribution":
			a.ood++
		}
		if r.Result != nil {
			for _, c := range r.Result.OOD.Checks {
				if !c.Pass {
					a.checks[c.Name]++
				}
			}
		}
	}
	sites := make([]string, 0, len(by))
	for s := range by {
		sites = append(sites, s)
	}
	sort.Strings(sites)
	var out []SiteFit
	for _, s := range sites {
		a := by[s]
		f := SiteFit{Site: s, N: a.n, OOD: a.ood}
		lo, hi, _ := stats.Wilson(a.ood, a.n, 0.95)
		f.Rate = iv(float64(a.ood)/float64(a.n), lo, hi, "Wilson")
		for name, k := range a.checks {
			if k > f.TopCheckN || (k == f.TopCheckN && name < f.TopCheck) {
				f.TopCheck, f.TopCheckN = name, k
			}
		}
		if f.TopCheckN == 0 {
			f.Sentence = fmt.Sprintf("%s: all %d scans passed every fit check.", s, a.n)
		} else {
			f.Sentence = fmt.Sprintf("%s: %d of %d scans (%.0f %%) were out of distribution; the check failed most often was %q (%d scans).", s, a.ood, a.n, 100*float64(a.ood)/float64(a.n), f.TopCheck, f.TopCheckN)
		}
		out = append(out, f)
	}
	return out
}
