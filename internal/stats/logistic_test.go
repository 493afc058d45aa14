package stats

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
)

// calibrationCase draws n probabilities whose truth follows
// logit(P(y)) = a + b·logit(p).
func calibrationCase(seed uint64, n int, a, b float64) ([]float64, []bool) {
	rng := rand.New(rand.NewPCG(seed, 1))
	p := make([]float64, n)
	y := make([]bool, n)
	for i := range p {
		p[i] = Sigmoid(2 * rng.NormFloat64())
		y[i] = rng.Float64() < Sigmoid(a+b*Logit(p[i]))
	}
	return p, y
}

// TestCalibrationAgainstStatsmodels: calibration intercept, slope and
// log-likelihoods against statsmodels (GLM with offset; Logit), Brier
// against sklearn's brier_score_loss; cross-validated AUROC of a ridge
// logistic regression against sklearn's pipeline on the same folds.
func TestCalibrationAgainstStatsmodels(t *testing.T) {
	refcheck.PythonModule(t, "statsmodels")
	refcheck.PythonModule(t, "sklearn")
	type calCase struct {
		P []float64 `json:"p"`
		Y []int     `json:"y"`
	}
	type cvCase struct {
		X     [][]float64 `json:"x"`
		Y     []int       `json:"y"`
		Folds []int       `json:"folds"`
		C     float64     `json:"C"`
	}
	var job struct {
		Calibration []calCase `json:"calibration"`
		CV          []cvCase  `json:"cv"`
	}
	var truths [][]bool
	for k, ab := range [][2]float64{{0, 1}, {0.7, 0.6}, {-0.5, 1.4}} {
		p, y := calibrationCase(uint64(k+1), 300, ab[0], ab[1])
		truths = append(truths, y)
		job.Calibration = append(job.Calibration, calCase{p, boolsTo01(y)})
	}
	var cvTruths [][]bool
	var cvX [][][]float64
	for k := 0; k < 2; k++ {
		rng := rand.New(rand.NewPCG(uint64(10+k), 2))
		n := 240
		x := make([][]float64, n)
		y := make([]bool, n)
		for i := range x {
			site := rng.IntN(3)
			age := 50 + 15*rng.NormFloat64()
			sex := float64(rng.IntN(2))
			x[i] = []float64{b2f(site == 1), b2f(site == 2), age, sex}
			y[i] = rng.Float64() < Sigmoid(-0.5+0.9*b2f(site == 2)+0.03*(age-50)*float64(k))
		}
		folds := StratifiedFolds(y, 5, uint64(k))
		cvTruths, cvX = append(cvTruths, y), append(cvX, x)
		job.CV = append(job.CV, cvCase{x, boolsTo01(y), folds, 1})
	}
	f := filepath.Join(t.TempDir(), "job.json")
	b, _ := json.Marshal(job)
	os.WriteFile(f, b, 0o644)
	var ref struct {
		Calibration []struct {
			Intercept      float64 `json:"intercept"`
			LLIntercept    float64 `json:"ll_intercept"`
			SlopeIntercept float64 `json:"slope_intercept"`
			Slope          float64 `json:"slope"`
			LLSlope        float64 `json:"ll_slope"`
			Brier          float64 `json:"brier"`
		} `json:"calibration"`
		CV []struct {
			AUROC float64   `json:"auroc"`
			OOF   []float64 `json:"oof"`
		} `json:"cv"`
	}
	refcheck.RunPython(t, "testdata/logistic_ref.py", &ref, f)
	for k, c := range job.Calibration {
		got, err := CalibrationFit(c.P, truths[k])
		if err != nil {
			t.Fatal(err)
		}
		r := ref.Calibration[k]
		for _, chk := range []struct {
			name      string
			got, want float64
		}{
			{"intercept", got.Intercept, r.Intercept}, {"slope", got.Slope, r.Slope},
			{"slope intercept", got.SlopeIntercept, r.SlopeIntercept},
			{"loglik intercept", got.LogLikIntercept, r.LLIntercept}, {"loglik slope", got.LogLikRecalibrated, r.LLSlope},
			{"brier", Brier(c.P, truths[k]), r.Brier},
		} {
			if math.Abs(chk.got-chk.want) > 1e-6*math.Max(1, math.Abs(chk.want)) {
				t.Errorf("case %d %s: %.9g, statsmodels/sklearn %.9g", k, chk.name, chk.got, chk.want)
			}
		}
	}
	for k, c := range job.CV {
		auc, oof, err := CrossValidatedAUROC(cvX[k], cvTruths[k], c.Folds, 1/c.C)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(auc-ref.CV[k].AUROC) > 1e-6 {
			t.Errorf("cv case %d: AUROC %.9f, sklearn %.9f", k, auc, ref.CV[k].AUROC)
		}
		for i := range oof {
			if math.Abs(oof[i]-ref.CV[k].OOF[i]) > 1e-5 {
				t.Fatalf("cv case %d: out-of-fold probability %d: %.8f, sklearn %.8f", k, i, oof[i], ref.CV[k].OOF[i])
			}
		}
	}
}
