package stats

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
)

// Guo et al. 2017, Eq. 3, with M = 15 equal-width bins. Hand example:
// confidences 0.9, 0.9 (one correct) fall in bin (13/15, 14/15]: accuracy 0.5,
// confidence 0.9, weight 2/5 → 0.16; confidences 0.62 ×3 (two correct) fall in
// (9/15, 10/15]: |2/3 − 0.62| · 3/5 = 0.028. ECE = 0.188.
func TestECEHandExample(t *testing.T) {
	conf := []float64{0.9, 0.9, 0.62, 0.62, 0.62}
	ok := []bool{true, false, true, true, false}
	kernelNear(t, "ECE", ECE(conf, ok, 15), 0.16+math.Abs(2.0/3-0.62)*3/5, 1e-12)
	kernelNear(t, "ECE perfect", ECE([]float64{1, 1}, []bool{true, true}, 15), 0, 0)
}

// AUROC against sklearn.metrics.roc_auc_score, Ledoit-Wolf against
// sklearn.covariance.ledoit_wolf, Wasserstein1 against
// scipy.stats.wasserstein_distance, FitTemperature against
// scipy.optimize.minimize_scalar on the same NLL, on random data.
func TestAgainstSklearnScipy(t *testing.T) {
	refcheck.PythonModule(t, "sklearn")
	refcheck.PythonModule(t, "scipy")
	rng := rand.New(rand.NewPCG(11, 12))
	type aucCase struct {
		Scores []float64 `json:"scores"`
		Labels []int     `json:"labels"`
	}
	var aucs []aucCase
	for c := 0; c < 6; c++ {
		n := 20 + rng.IntN(200)
		ac := aucCase{}
		for i := 0; i < n; i++ {
			l := rng.IntN(2)
			s := rng.NormFloat64() + 0.7*float64(l)
			if c%2 == 1 {
				s = math.Round(s * 2) // ties
			}
			ac.Scores = append(ac.Scores, s)
			ac.Labels = append(ac.Labels, l)
		}
		ac.Labels[0], ac.Labels[1] = 0, 1
		aucs = append(aucs, ac)
	}
	var lw [][]float64
	for i := 0; i < 40; i++ {
		r := make([]float64, 6)
		for j := range r {
			r[j] = rng.NormFloat64() * float64(j+1)
		}
		r[1] += r[0]
		lw = append(lw, r)
	}
	type wCase struct {
		A []float64 `json:"a"`
		B []float64 `json:"b"`
	}
	var ws []wCase
	for c := 0; c < 4; c++ {
		var w wCase
		for i := 0; i < 30+c*17; i++ {
			w.A = append(w.A, rng.NormFloat64())
		}
		for i := 0; i < 25+c*31; i++ {
			w.B = append(w.B, math.Round(rng.ExpFloat64()*4)/4)
		}
		ws = append(ws, w)
	}
	var logits [][]float64
	var labels []int
	for i := 0; i < 300; i++ {
		y := rng.IntN(3)
		z := []float64{rng.NormFloat64() * 3, rng.NormFloat64() * 3, rng.NormFloat64() * 3}
		z[y] += 2.5
		if rng.IntN(5) == 0 {
			y = rng.IntN(3) // label noise: overconfident logits, T > 1
		}
		logits = append(logits, z)
		labels = append(labels, y)
	}
	type cpCase struct {
		K          int     `json:"k"`
		N          int     `json:"n"`
		Confidence float64 `json:"confidence"`
	}
	cps := []cpCase{{190, 200, 0.9}, {481, 500, 0.9}, {1, 3, 0.5}, {499, 500, 0.99}, {7, 40, 0.95}, {3000, 3200, 0.8}}
	type biCase struct {
		A float64 `json:"a"`
		B float64 `json:"b"`
		X float64 `json:"x"`
	}
	var bis []biCase
	for i := 0; i < 30; i++ {
		bis = append(bis, biCase{A: 0.2 + rng.Float64()*60, B: 0.2 + rng.Float64()*60, X: rng.Float64()})
	}
	job := map[string]any{"auroc": aucs, "ledoit_wolf": lw, "wasserstein": ws,
		"temperature":     map[string]any{"logits": logits, "labels": labels},
		"clopper_pearson": cps, "betainc": bis}
	b, _ := json.Marshal(job)
	f := filepath.Join(t.TempDir(), "job.json")
	if err := os.WriteFile(f, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref struct {
		AUROC       []float64   `json:"auroc"`
		LWCov       [][]float64 `json:"lw_cov"`
		LWShrinkage float64     `json:"lw_shrinkage"`
		Wasserstein []float64   `json:"wasserstein"`
		Temperature float64     `json:"temperature"`
		CP          []float64   `json:"clopper_pearson"`
		BetaInc     []float64   `json:"betainc"`
	}
	refcheck.RunPython(t, "testdata/ref_fit.py", &ref, f)
	for i, c := range aucs {
		lab := make([]bool, len(c.Labels))
		for j, l := range c.Labels {
			lab[j] = l == 1
		}
		kernelNear(t, "AUROC vs roc_auc_score", AUROC(c.Scores, lab), ref.AUROC[i], 1e-12)
	}
	cov, s, err := LedoitWolf(lw)
	if err != nil {
		t.Fatal(err)
	}
	kernelNear(t, "Ledoit-Wolf shrinkage", s, ref.LWShrinkage, 1e-10)
	for i := range cov {
		for j := range cov[i] {
			kernelNear(t, "Ledoit-Wolf covariance", cov[i][j], ref.LWCov[i][j], 1e-9*(1+math.Abs(ref.LWCov[i][j])))
		}
	}
	for i, w := range ws {
		kernelNear(t, "Wasserstein1 vs scipy", Wasserstein1(w.A, w.B), ref.Wasserstein[i], 1e-10)
	}
	T, err := FitTemperature(logits, labels)
	if err != nil {
		t.Fatal(err)
	}
	kernelNear(t, "temperature vs scipy", T, ref.Temperature, 1e-5*ref.Temperature)
	if T <= 1 {
		t.Errorf("temperature %v: overconfident logits should give T > 1", T)
	}
	for i, c := range cps {
		lb, err := BinomialLowerBound(c.K, c.N, c.Confidence)
		if err != nil {
			t.Fatal(err)
		}
		kernelNear(t, fmt.Sprintf("Clopper-Pearson %d/%d at %v vs scipy beta.ppf", c.K, c.N, c.Confidence), lb, ref.CP[i], 1e-9)
	}
	for i, c := range bis {
		kernelNear(t, fmt.Sprintf("I_%v(%v, %v) vs scipy betainc", c.X, c.A, c.B), RegIncBeta(c.A, c.B, c.X), ref.BetaInc[i], 1e-10)
	}
	t.Logf("AUROC cases %d agree with sklearn to 1e-12; Ledoit-Wolf shrinkage %.6f; T = %.6f", len(aucs), s, T)
}
