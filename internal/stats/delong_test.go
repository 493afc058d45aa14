package stats

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"testing"

	"brightfold/internal/refcheck"
)

// delongProcResult is what testdata/delong_proc.R prints (R's pROC).
type delongProcResult struct {
	Truth []float64  `json:"truth"`
	A     []float64  `json:"a"`
	B     []float64  `json:"b"`
	AUCA  float64    `json:"auc_a"`
	CIA   [2]float64 `json:"ci_a"`
	AUCB  float64    `json:"auc_b"`
	CIB   [2]float64 `json:"ci_b"`
	Z     float64    `json:"z"`
	P     float64    `json:"p"`
}

// delongRunProc runs testdata/delong_proc.R (R's pROC) with optional args.
func delongRunProc(t *testing.T, args ...string) delongProcResult {
	t.Helper()
	rscript := refcheck.Path(t, "/usr/bin/Rscript")
	if out, err := exec.Command(rscript, "-e", "library(pROC)").CombinedOutput(); err != nil {
		refcheck.Missing(t, "R package pROC (r-cran-proc): %v: %s", err, out)
	}
	cmd := exec.Command(rscript, append([]string{filepath.Join("testdata", "delong_proc.R")}, args...)...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("delong_proc.R: %v\n%s", err, stderr.String())
	}
	var r delongProcResult
	if err := json.Unmarshal(stdout.Bytes(), &r); err != nil {
		t.Fatalf("delong_proc.R output: %v\n%s", err, stdout.String())
	}
	return r
}

func delongCheckAgainstProc(t *testing.T, r delongProcResult) {
	t.Helper()
	truth := make([]bool, len(r.Truth))
	for i, v := range r.Truth {
		truth[i] = v == 1
	}
	const tol = 1e-9
	near := func(name string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > tol*math.Max(1, math.Abs(want)) {
			t.Errorf("%s = %.12g, pROC %.12g", name, got, want)
		}
	}
	ca, err := DeLongCI(r.A, truth)
	if err != nil {
		t.Fatal(err)
	}
	cb, err := DeLongCI(r.B, truth)
	if err != nil {
		t.Fatal(err)
	}
	near("AUC a", ca.AUC, r.AUCA)
	near("AUC b", cb.AUC, r.AUCB)
	near("CI a low", ca.CI95[0], r.CIA[0])
	near("CI a high", ca.CI95[1], r.CIA[1])
	near("CI b low", cb.CI95[0], r.CIB[0])
	near("CI b high", cb.CI95[1], r.CIB[1])
	pt, err := DeLongPaired(r.A, r.B, truth)
	if err != nil {
		t.Fatal(err)
	}
	near("z", pt.Z, r.Z)
	near("p", pt.P, r.P)
	t.Logf("AUC %.4f vs %.4f, z %.4f, p %.4g (pROC z %.4f, p %.4g)", pt.AUC1, pt.AUC2, pt.Z, pt.P, r.Z, r.P)
}

// The paired DeLong test and the DeLong interval against R's pROC
// (roc.test(method = "delong", paired = TRUE), ci.auc(method = "delong")) on
// the aSAH data that ship with pROC: s100b against WFNS grade for a poor outcome.
func TestDeLongAgainstProcASAH(t *testing.T) {
	delongCheckAgainstProc(t, delongRunProc(t))
}

// The same on random data with ties (integer ratings) and without, written
// by the test and read by the R script.
func TestDeLongAgainstProcRandom(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 15))
	for trial, ties := range []bool{false, true, false, true} {
		n := 30 + rng.IntN(120)
		rows := [][]string{{"truth", "a", "b"}}
		for i := 0; i < n; i++ {
			y := 0
			if rng.Float64() < 0.4 || i == 0 {
				y = 1
			}
			if i == 1 {
				y = 0
			}
			a := rng.NormFloat64() + 0.8*float64(y)
			b := 0.6*a + 0.8*rng.NormFloat64() + 0.5*float64(y)
			if ties {
				a, b = math.Round(a*2), math.Round(b*2)
			}
			rows = append(rows, []string{strconv.Itoa(y),
				strconv.FormatFloat(a, 'g', -1, 64), strconv.FormatFloat(b, 'g', -1, 64)})
		}
		path := filepath.Join(t.TempDir(), "ratings.csv")
		f, err := os.Create(path)
		if err != nil {
			t.Fatal(err)
		}
		if err := csv.NewWriter(f).WriteAll(rows); err != nil {
			t.Fatal(err)
		}
		f.Close()
		t.Run(strconv.Itoa(trial), func(t *testing.T) { delongCheckAgainstProc(t, delongRunProc(t, path)) })
	}
}

// Placement values against the definition (DeLong et al. 1988, section 2),
// computed pair by pair.
func TestPlacementValuesDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	scores := make([]float64, 60)
	truth := make([]bool, 60)
	for i := range scores {
		truth[i] = i%3 == 0
		scores[i] = float64(rng.IntN(5))
	}
	p, err := PlacementValues(scores, truth)
	if err != nil {
		t.Fatal(err)
	}
	psi := func(x, y float64) float64 {
		switch {
		case x > y:
			return 1
		case x == y:
			return 0.5
		}
		return 0
	}
	var pos, neg []float64
	for i, s := range scores {
		if truth[i] {
			pos = append(pos, s)
		} else {
			neg = append(neg, s)
		}
	}
	sum := 0.0
	for i, x := range pos {
		v := 0.0
		for _, y := range neg {
			v += psi(x, y)
		}
		sum += v
		if math.Abs(v/float64(len(neg))-p.Pos[i]) > 1e-12 {
			t.Fatalf("V10[%d] = %g, definition %g", i, p.Pos[i], v/float64(len(neg)))
		}
	}
	for j, y := range neg {
		v := 0.0
		for _, x := range pos {
			v += psi(x, y)
		}
		if math.Abs(v/float64(len(pos))-p.Neg[j]) > 1e-12 {
			t.Fatalf("V01[%d] = %g, definition %g", j, p.Neg[j], v/float64(len(pos)))
		}
	}
	if want := sum / float64(len(pos)*len(neg)); math.Abs(p.AUC-want) > 1e-12 {
		t.Fatalf("AUC %g, definition %g", p.AUC, want)
	}
	if a := AUROC(scores, truth); math.Abs(a-p.AUC) > 1e-12 {
		t.Fatalf("AUC %g, stats.AUROC %g", p.AUC, a)
	}
}

func TestPlacementValuesBadInput(t *testing.T) {
	if _, err := PlacementValues([]float64{1, 2}, []bool{true, true}); err == nil {
		t.Error("one class accepted")
	}
	if _, err := PlacementValues([]float64{1, math.NaN()}, []bool{true, false}); err == nil {
		t.Error("NaN accepted")
	}
	if _, err := DeLongPaired([]float64{1, 2}, []float64{1}, []bool{true, false}); err == nil {
		t.Error("unpaired lengths accepted")
	}
}

// A reader who rates at random: the DeLong 95 % interval should cover 0.5 in
// about 95 % of simulated studies (the nominal coverage of the interval).
func TestDeLongRandomReaderCoversHalf(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const studies = 400
	covered := 0
	for s := 0; s < studies; s++ {
		truth := make([]bool, 100)
		scores := make([]float64, 100)
		for i := range truth {
			truth[i] = i < 40
			scores[i] = float64(rng.IntN(101)) // a 0–100 rating with no information
		}
		ci, err := DeLongCI(scores, truth)
		if err != nil {
			t.Fatal(err)
		}
		if ci.CI95[0] <= 0.5 && 0.5 <= ci.CI95[1] {
			covered++
		}
	}
	// 95 % nominal; with 400 studies a binomial 99.9 % band is about 91.5–98 %.
	if frac := float64(covered) / studies; frac < 0.915 || frac > 0.985 {
		t.Errorf("0.5 covered in %.1f %% of %d random-reader studies, want about 95 %%", 100*frac, studies)
	} else {
		t.Logf("0.5 covered in %.1f %% of %d random-reader studies", 100*frac, studies)
	}
}
