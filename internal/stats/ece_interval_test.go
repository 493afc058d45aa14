package stats

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
)

// Brier against sklearn.metrics.brier_score_loss, and ECEInterval
// against scipy.stats.bootstrap (percentile method, paired resampling of the
// cases) of the same numpy ECE: the two bootstraps use different random
// generators, so their ends agree only up to Monte-Carlo error; with 4000
// and 4999 resamples of 300 cases that error is a few thousandths.
func TestECEIntervalAndBrierAgainstScipy(t *testing.T) {
	refcheck.PythonModule(t, "sklearn")
	refcheck.PythonModule(t, "scipy")
	rng := rand.New(rand.NewPCG(5, 6))
	var prob, conf []float64
	var pos, correct []bool
	for i := 0; i < 300; i++ {
		p := rng.Float64()
		y := rng.Float64() < p*0.9+0.05 // slightly miscalibrated
		prob, pos = append(prob, p), append(pos, y)
		c := max(p, 1-p)
		conf, correct = append(conf, c), append(correct, (p >= 0.5) == y)
	}
	job, _ := json.Marshal(map[string]any{"prob": prob, "positive": boolsTo01(pos), "conf": conf, "correct": boolsTo01(correct), "bins": 15})
	f := filepath.Join(t.TempDir(), "job.json")
	if err := os.WriteFile(f, job, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref struct{ Brier, ECE, Lo, Hi float64 }
	refcheck.RunPython(t, "testdata/ref_ece_interval.py", &ref, f)
	kernelNear(t, "Brier", Brier(prob, pos), ref.Brier, 1e-12)
	kernelNear(t, "ECE", ECE(conf, correct, 15), ref.ECE, 1e-12)
	lo, hi, err := ECEInterval(conf, correct, 15, 4000, 1, 0.95)
	if err != nil {
		t.Fatal(err)
	}
	kernelNear(t, "ECE interval low", lo, ref.Lo, 0.006)
	kernelNear(t, "ECE interval high", hi, ref.Hi, 0.006)
	lo2, hi2, _ := ECEInterval(conf, correct, 15, 4000, 1, 0.95)
	if lo2 != lo || hi2 != hi {
		t.Errorf("same seed gave [%v, %v] then [%v, %v]", lo, hi, lo2, hi2)
	}
}
