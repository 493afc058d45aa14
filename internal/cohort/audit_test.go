package cohort

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/stats"
)

// TestAuditOfConfoundedCohort sweeps 60 coarse phantoms whose pattern
// prevalence differs by site (a planted confound), merges them and writes
// the audit; the AUROC and its DeLong interval must equal R's pROC on the
// same scores.tsv, sensitivity and specificity intervals statsmodels'
// Wilson intervals, the covariates alone must predict the label, and
// pdftotext must find the notice and both figures in audit.pdf.
func TestAuditOfConfoundedCohort(t *testing.T) {
	mf, sess := demoSession(t)
	dir := t.TempDir()
	root := filepath.Join(dir, "bids")
	subs := ConfoundedSubjects(5, map[string][2]int{"site-A": {15, 5}, "site-B": {10, 10}, "site-C": {5, 15}})
	must(t, WritePhantomBIDS(root, subs, 4))
	d, err := Open(root, "")
	must(t, err)
	out := filepath.Join(dir, "out")
	_, err = Sweep(context.Background(), d, out, Options{Model: mf, Session: sess, Jobs: 2})
	must(t, err)
	recs, err := Collect(d, out, mf.SHA256, "none")
	must(t, err)
	must(t, WriteScores(out, recs, d.Covariates))
	a, err := RunAudit(recs, AuditOptions{Seed: 1, Perms: 500, Bootstrap: 300})
	must(t, err)
	must(t, WriteAudit(out, a))
	if a.Labelled != 60 || len(a.Subgroups) < 5 || a.Covariates == nil || len(a.Partial) != 3 || len(a.Sites) != 3 {
		t.Fatalf("audit: %d labelled, %d subgroups, covariates %v, %d partial tests, %d sites", a.Labelled, len(a.Subgroups), a.Covariates, len(a.Partial), len(a.Sites))
	}
	for _, s := range a.Subgroups {
		if s.By == "site" && !s.Small {
			t.Errorf("site subgroup %s (n=%d) not marked as under 20 per class", s.Name, s.N)
		}
	}
	// planted: prevalence 75 %, 50 %, 25 % by site
	if float64(a.Covariates.AUROC) < 0.6 {
		t.Errorf("covariates-only AUROC %.3f on a cohort with a planted site confound", a.Covariates.AUROC)
	}

	tsv := filepath.Join(out, ScoresTable)
	rscript := refcheck.Path(t, "/usr/bin/Rscript")
	if b, err := exec.Command(rscript, "-e", "library(pROC)").CombinedOutput(); err != nil {
		refcheck.Missing(t, "R package pROC (r-cran-proc): %v: %s", err, b)
	}
	var stdout, stderr bytes.Buffer
	cmd := exec.Command(rscript, filepath.Join("testdata", "audit_proc.R"), tsv)
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("audit_proc.R: %v\n%s", err, stderr.String())
	}
	var proc struct {
		N           int
		AUC, Lo, Hi float64
	}
	must(t, json.Unmarshal(stdout.Bytes(), &proc))
	o := a.Overall
	if proc.N != o.N || math.Abs(proc.AUC-float64(o.AUROC.Value)) > 1e-9 || math.Abs(proc.Lo-float64(o.AUROC.Lo)) > 1e-9 || math.Abs(proc.Hi-float64(o.AUROC.Hi)) > 1e-9 {
		t.Errorf("AUROC %v [%v, %v] n=%d; pROC %v [%v, %v] n=%d", o.AUROC.Value, o.AUROC.Lo, o.AUROC.Hi, o.N, proc.AUC, proc.Lo, proc.Hi, proc.N)
	}

	refcheck.PythonModule(t, "statsmodels")
	var wil map[string]struct{ Value, Lo, Hi float64 }
	refcheck.RunPython(t, filepath.Join("testdata", "audit_wilson.py"), &wil, tsv)
	for name, got := range map[string]Interval{"sensitivity": o.Sensitivity, "specificity": o.Specificity} {
		w := wil[name]
		if math.Abs(w.Value-float64(got.Value)) > 1e-12 || math.Abs(w.Lo-float64(got.Lo)) > 1e-9 || math.Abs(w.Hi-float64(got.Hi)) > 1e-9 {
			t.Errorf("%s %+v; statsmodels Wilson %+v", name, got, w)
		}
	}

	pdftotext := refcheck.Path(t, "/usr/bin/pdftotext")
	text, err := exec.Command(pdftotext, "-layout", filepath.Join(out, AuditPDF), "-").Output()
	must(t, err)
	flat := strings.Join(strings.Fields(string(text)), " ")
	for _, want := range []string{strings.Join(strings.Fields(notice.Full), " "), "Figure 1. Reliability diagram", "Figure 2. Forest plot",
		"Discrimination", "Calibration", "Subgroups", "Confounds", "Fit check by site", "site-A",
		"AUROC " + f3(o.AUROC.Value)} {
		if !strings.Contains(flat, want) {
			t.Errorf("audit.pdf text lacks %q", want)
		}
	}
	for _, f := range []string{AuditJSON, AuditTSV} {
		b := readTree(t, out)[f]
		if !strings.Contains(b, notice.Full) {
			t.Errorf("%s lacks the notice", f)
		}
	}
	// The same cases with probabilities that also read the site (a model
	// that learnt site A's and C's intensity): the partial confounder test
	// must now flag site (Spisak 2022: the test's purpose).
	shifted := make([]*Record, len(recs))
	for i, r := range recs {
		c := *r
		res := *r.Result
		pred := *r.Result.Prediction
		shift := map[string]float64{"site-A": 2, "site-C": -2}[r.Covariates["site"]]
		pred.Probability = stats.Sigmoid(stats.Logit(pred.Probability) + shift)
		res.Prediction, c.Result = &pred, &res
		shifted[i] = &c
	}
	b, err := RunAudit(shifted, AuditOptions{Seed: 1, Perms: 500, Bootstrap: 100})
	must(t, err)
	for _, p := range b.Partial {
		if p.Covariate == "site" && float64(p.P) >= 0.05 {
			t.Errorf("site-reading probabilities: partial confounder p for site %.3f, want < 0.05", p.P)
		}
		if p.Covariate == "site" {
			t.Logf("site-reading probabilities: %s", p.Sentence)
		}
	}
	t.Logf("AUROC %.3f [%.3f, %.3f]; covariates-only AUROC %.3f; %s", o.AUROC.Value, o.AUROC.Lo, o.AUROC.Hi, a.Covariates.AUROC, a.Calibration.Sentence)
}
