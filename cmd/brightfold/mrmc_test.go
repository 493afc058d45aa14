package main

import (
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
)

// vandykeCSV is the VanDyke reader study as distributed with the R package
// MRMCaov; its README lists the figures published for it.
const vandykeCSV = "/work/shared/reference/mrmc/vandyke.csv"

// mrmcJSON is the part of `brightfold mrmc --json` the tests read.
type mrmcJSON struct {
	Notice     string `json:"notice"`
	Covariance string `json:"covariance"`
	Factor     string `json:"readers_factor"`
	Conditions []struct {
		Name string     `json:"name"`
		AUC  float64    `json:"auc"`
		CI95 [2]float64 `json:"ci95"`
	} `json:"conditions"`
	Readers []struct {
		Reader, Condition string
		AUC               float64
	} `json:"readers"`
	Test       map[string]any `json:"test"`
	Difference struct {
		Estimate, SE, P float64
		CI95            [2]float64
	} `json:"difference"`
	Model *struct {
		AUC   float64 `json:"auc"`
		Cases int     `json:"cases"`
	} `json:"model"`
	Moves []struct {
		Toward int `json:"toward_truth"`
		Away   int `json:"away_from_truth"`
	} `json:"moves"`
	Threshold []struct {
		Sensitivity float64 `json:"sensitivity"`
	} `json:"threshold_50"`
}

func mrmcRun(t *testing.T, args ...string) mrmcJSON {
	t.Helper()
	code, out, errs := runCLI(append([]string{"mrmc", "--json"}, args...)...)
	if code != 0 {
		t.Fatalf("mrmc %v: exit %d: %s", args, code, errs)
	}
	var got mrmcJSON
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("mrmc JSON: %v\n%s", err, out)
	}
	if got.Notice != notice.Full {
		t.Errorf("no notice in the JSON")
	}
	return got
}

// printed checks got against a published figure to its printed digits.
func printed(t *testing.T, name string, got float64, want string) {
	t.Helper()
	w, _ := strconv.ParseFloat(want, 64)
	dec := 0
	if i := strings.IndexByte(want, '.'); i >= 0 {
		dec = len(want) - i - 1
	}
	if math.Abs(got-w) > 0.5*math.Pow(10, -float64(dec))*(1+1e-9) {
		t.Errorf("%s = %.12g, published %s", name, got, want)
	}
}

// brightfold mrmc on the VanDyke data reproduces the figures printed in the
// article documenting MRMCaov (shared/reference/mrmc/README.md): DeLong
// covariances with random readers, jackknife with fixed readers.
func TestMRMCVanDykeCLI(t *testing.T) {
	p := refcheck.Path(t, vandykeCSV)
	d := mrmcRun(t, p)
	if d.Covariance != "delong" || d.Factor != "random" || d.Test["statistic"] != "F" {
		t.Errorf("defaults: %s %s %v", d.Covariance, d.Factor, d.Test)
	}
	printed(t, "F", d.Test["F"].(float64), "4.484854")
	printed(t, "df2", d.Test["df2"].(float64), "15.06611")
	printed(t, "p", d.Test["p"].(float64), "0.05123303")
	printed(t, "difference", d.Difference.Estimate, "-0.04380032")
	printed(t, "difference SE", d.Difference.SE, "0.0206825")
	printed(t, "CI low", d.Difference.CI95[0], "-0.0878671960")
	printed(t, "CI high", d.Difference.CI95[1], "0.0002665519")
	printed(t, "treatment 1 AUC", d.Conditions[0].AUC, "0.8970370")
	printed(t, "treatment 1 CI low", d.Conditions[0].CI95[0], "0.8253461")
	printed(t, "treatment 2 CI high", d.Conditions[1].CI95[1], "0.9874592")

	j := mrmcRun(t, p, "--cov", "jackknife", "--readers", "fixed")
	if j.Test["statistic"] != "chi2" {
		t.Fatalf("fixed readers test %v", j.Test)
	}
	printed(t, "chi2", j.Test["chi2"].(float64), "5.475953")
	printed(t, "fixed p", j.Test["p"].(float64), "0.01927984")
	printed(t, "fixed CI low", j.Difference.CI95[0], "-0.08048591")
	printed(t, "fixed CI high", j.Difference.CI95[1], "-0.00711473")
	printed(t, "reader 4 treatment 2", j.Readers[8].AUC, "0.9993559")
}

// --out writes mrmc.json, reads_by_case.csv and a PDF whose text (read back
// with pdftotext, poppler-utils) carries the test and the notice.
func TestMRMCOutFolder(t *testing.T) {
	p := refcheck.Path(t, vandykeCSV)
	pdftotext := refcheck.Path(t, "/usr/bin/pdftotext")
	dir := filepath.Join(t.TempDir(), "out")
	code, out, errs := runCLI("mrmc", p, "--out", dir)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "F = 4.4849") || !strings.Contains(out, notice.Full) {
		t.Errorf("text output:\n%s", out)
	}
	for _, f := range []string{"mrmc.json", "reads_by_case.csv", "mrmc.pdf"} {
		b, err := os.ReadFile(filepath.Join(dir, f))
		if err != nil {
			t.Fatal(err)
		}
		if f != "mrmc.pdf" && !strings.Contains(string(b), notice.Full) {
			t.Errorf("%s has no notice", f)
		}
	}
	txt, err := exec.Command(pdftotext, "-raw", filepath.Join(dir, "mrmc.pdf"), "-").Output()
	if err != nil {
		t.Fatal(err)
	}
	flat := strings.Join(strings.Fields(string(txt)), " ")
	for _, want := range []string{notice.Full, "F = 4.4849", "p = 0.05123", "ROC curves, 1", "ROC curves, 2", "AUROC 0.920"} {
		if !strings.Contains(flat, want) {
			t.Errorf("PDF text lacks %q:\n%s", want, flat)
		}
	}
}

func TestMRMCBadInput(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "reads.csv")
	for _, body := range []string{"", "reader,case\n1,2\n", "reader,condition,case,truth,rating\n1,a,1,1,x\n",
		"reader,condition,case,truth,rating\n1,a,1,1,3\n1,a,1,1,4\n", "reader,condition,case,truth,rating\n1,a,1,1,3\n1,b,1,1,4\n"} {
		os.WriteFile(bad, []byte(body), 0o644)
		code, _, errs := runCLI("mrmc", bad)
		if code != 2 || !strings.Contains(errs, bad) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%q: exit %d, %q; want exit 2 and one line naming the file", body, code, errs)
		}
	}
	if code, _, _ := runCLI("mrmc", vandykeCSV, "--cov", "bootstrap"); code != 2 {
		t.Errorf("--cov bootstrap: exit %d", code)
	}
}
