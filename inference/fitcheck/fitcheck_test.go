package fitcheck

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol || math.IsNaN(got) {
		t.Errorf("%s = %.12g, want %.12g (±%g)", what, got, want, tol)
	}
}

// Hendrycks & Gimpel 2017, Section 2: the score is the maximum softmax
// probability. Hand computation: softmax(2, 1, 0) = e²/(e²+e+1) = 0.665241.
func TestMSPHandExample(t *testing.T) {
	e := math.E
	near(t, "MSP(2,1,0)", MSP([]float64{2, 1, 0}, 1), e*e/(e*e+e+1), 1e-12)
	near(t, "MSP(2,1,0)", MSP([]float64{2, 1, 0}, 1), 0.665240955775, 1e-9)
	// temperature 2 halves the logits: softmax(1, 0.5, 0)
	near(t, "MSP T=2", MSP([]float64{2, 1, 0}, 2), e/(e+math.Sqrt(e)+1), 1e-12)
	// sigmoid as two logits (0, z): max(σ(z), 1−σ(z))
	near(t, "MSP binary", MSP(BinaryLogits(-1.5), 1), 1-Sigmoid(-1.5), 1e-12)
}

// Liu et al. 2020, Eq. 1: E(x; f) = −T · log Σ_i exp(f_i(x)/T).
// Hand computation: −log(e² + e + 1) = −2.407606; with T = 2,
// −2·log(e + √e + 1) = −3.360559.
func TestEnergyHandExample(t *testing.T) {
	e := math.E
	near(t, "E T=1", Energy([]float64{2, 1, 0}, 1), -math.Log(e*e+e+1), 1e-12)
	near(t, "E T=1", Energy([]float64{2, 1, 0}, 1), -2.40760596444, 1e-9)
	near(t, "E T=2", Energy([]float64{2, 1, 0}, 2), -2*math.Log(e+math.Sqrt(e)+1), 1e-12)
	// large logits stay finite (log-sum-exp): −log(2·e^1000) = −1000 − log 2
	near(t, "E large", Energy([]float64{1000, 1000}, 1), -1000-math.Ln2, 1e-9)
}

// Lee et al. 2018, Eq. 2: M(x) = max_c −(f(x) − μ_c)ᵀ Σ⁻¹ (f(x) − μ_c); we
// report the distance min_c (f − μ_c)ᵀ Σ⁻¹ (f − μ_c).
func TestMahalanobisHandExample(t *testing.T) {
	// Σ = diag(1, 4): precision diag(1, 1/4). f = (1, 2):
	// to μ0 = (0, 0): 1 + 4/4 = 2; to μ1 = (2, 2): 1 + 0 = 1.
	d, c, err := Mahalanobis([]float64{1, 2}, [][]float64{{0, 0}, {2, 2}}, [][]float64{{1, 0}, {0, 0.25}})
	if err != nil || c != 1 {
		t.Fatalf("closest class %d, err %v", c, err)
	}
	near(t, "diag", d, 1, 1e-12)
	// Σ = [[2, 1], [1, 2]], Σ⁻¹ = (1/3)[[2, −1], [−1, 2]]; f − μ = (1, 1): 2/3.
	prec, err := InverseSPD([][]float64{{2, 1}, {1, 2}})
	if err != nil {
		t.Fatal(err)
	}
	near(t, "prec[0][1]", prec[0][1], -1.0/3, 1e-12)
	d, _, _ = Mahalanobis([]float64{1, 1}, [][]float64{{0, 0}}, prec)
	near(t, "full", d, 2.0/3, 1e-12)
	if _, _, err := Mahalanobis([]float64{1}, [][]float64{{0, 0}}, prec); err == nil {
		t.Error("dimension mismatch accepted")
	}
}

// Guo et al. 2017, Eq. 3, with M = 15 equal-width bins. Hand example:
// confidences 0.9, 0.9 (one correct) fall in bin (13/15, 14/15]: accuracy 0.5,
// confidence 0.9, weight 2/5 → 0.16; confidences 0.62 ×3 (two correct) fall in
// (9/15, 10/15]: |2/3 − 0.62| · 3/5 = 0.028. ECE = 0.188.
func TestECEHandExample(t *testing.T) {
	conf := []float64{0.9, 0.9, 0.62, 0.62, 0.62}
	ok := []bool{true, false, true, true, false}
	near(t, "ECE", ECE(conf, ok, 15), 0.16+math.Abs(2.0/3-0.62)*3/5, 1e-12)
	near(t, "ECE perfect", ECE([]float64{1, 1}, []bool{true, true}, 15), 0, 0)
}

func TestWassersteinHandExample(t *testing.T) {
	// {0, 1} vs {0, 3}: move mass 1/2 from 1 to 3 → 1.
	near(t, "W1", Wasserstein1([]float64{0, 1}, []float64{0, 3}), 1, 1e-12)
	// a point mass at 0 against one at 2.5: 2.5
	near(t, "W1 shift", Wasserstein1([]float64{0, 0, 0}, []float64{2.5}), 2.5, 1e-12)
	// quantile form with even levels: mean |q − r|
	lv := EvenLevels(4)
	near(t, "QuantileW1", QuantileW1(lv, []float64{0, 1, 2, 3}, []float64{1, 1, 1, 1}), (1+0+1+2)/4.0, 1e-12)
}

func TestThresholdAt(t *testing.T) {
	v := make([]float64, 20)
	for i := range v {
		v[i] = float64(i + 1)
	}
	thr, kept, err := ThresholdAt(v, 0.95, "max")
	if err != nil || thr != 19 || kept != 0.95 {
		t.Errorf("max: %v %v %v", thr, kept, err)
	}
	thr, kept, _ = ThresholdAt(v, 0.95, "min")
	if thr != 2 || kept != 0.95 {
		t.Errorf("min: %v %v", thr, kept)
	}
}

func TestAUROCHandExample(t *testing.T) {
	// 0.1(−) 0.4(−) 0.35(+) 0.8(+): positives beat negatives in 3 of 4 pairs.
	near(t, "AUROC", AUROC([]float64{0.1, 0.4, 0.35, 0.8}, []bool{false, false, true, true}), 0.75, 1e-12)
	// a tie counts half
	near(t, "AUROC tie", AUROC([]float64{1, 1}, []bool{false, true}), 0.5, 1e-12)
}

func TestVolumeMeasures(t *testing.T) {
	// A CT-like volume: half air at −1000, a shell of bone at +1200, brain at 40.
	ct := make([]float32, 1000)
	for i := range ct {
		switch {
		case i < 500:
			ct[i] = -1000
		case i < 600:
			ct[i] = 1200
		default:
			ct[i] = 40
		}
	}
	air, bone := HUSignature(ct)
	near(t, "air", air, 0.5, 1e-12)
	near(t, "bone", bone, 0.2, 1e-12)
	mr := make([]float32, 1000)
	for i := range mr {
		mr[i] = float32(i % 300)
	}
	air, bone = HUSignature(mr)
	if air != 0 || bone != 0 {
		t.Errorf("MR-like: air %v bone %v", air, bone)
	}
	a := volume.Identity()
	near(t, "obliquity RAS", ObliquityDeg(a), 0, 1e-12)
	c, s := math.Cos(20*math.Pi/180), math.Sin(20*math.Pi/180)
	a[0][0], a[0][1], a[1][0], a[1][1] = c, -s, s, c
	near(t, "obliquity 20°", ObliquityDeg(a), 20, 1e-9)

	// Noise ratio of a two-level image with Gaussian noise σ: neighbour
	// differences inside one tissue have sd σ√2, so the estimate is σ / IQR.
	rng := rand.New(rand.NewPCG(3, 4))
	v, _ := volume.New([3]int{64, 64, 16}, volume.Identity())
	for k := 0; k < 16; k++ {
		for j := 0; j < 64; j++ {
			for i := 0; i < 64; i++ {
				base := 100.0
				if j >= 32 {
					base = 200
				}
				v.Data[v.Index(i, j, k)] = float32(base + 5*rng.NormFloat64())
			}
		}
	}
	// IQR of the mixture of N(100, 5²) and N(200, 5²) is about 100.
	near(t, "noise ratio", NoiseRatio(v, 50), 5.0/100, 0.005)
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
		near(t, "AUROC vs roc_auc_score", AUROC(c.Scores, lab), ref.AUROC[i], 1e-12)
	}
	cov, s, err := LedoitWolf(lw)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "Ledoit-Wolf shrinkage", s, ref.LWShrinkage, 1e-10)
	for i := range cov {
		for j := range cov[i] {
			near(t, "Ledoit-Wolf covariance", cov[i][j], ref.LWCov[i][j], 1e-9*(1+math.Abs(ref.LWCov[i][j])))
		}
	}
	for i, w := range ws {
		near(t, "Wasserstein1 vs scipy", Wasserstein1(w.A, w.B), ref.Wasserstein[i], 1e-10)
	}
	T, err := FitTemperature(logits, labels)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "temperature vs scipy", T, ref.Temperature, 1e-5*ref.Temperature)
	if T <= 1 {
		t.Errorf("temperature %v: overconfident logits should give T > 1", T)
	}
	for i, c := range cps {
		lb, err := BinomialLowerBound(c.K, c.N, c.Confidence)
		if err != nil {
			t.Fatal(err)
		}
		near(t, fmt.Sprintf("Clopper-Pearson %d/%d at %v vs scipy beta.ppf", c.K, c.N, c.Confidence), lb, ref.CP[i], 1e-9)
	}
	for i, c := range bis {
		near(t, fmt.Sprintf("I_%v(%v, %v) vs scipy betainc", c.X, c.A, c.B), RegIncBeta(c.A, c.B, c.X), ref.BetaInc[i], 1e-10)
	}
	t.Logf("AUROC cases %d agree with sklearn to 1e-12; Ledoit-Wolf shrinkage %.6f; T = %.6f", len(aucs), s, T)
}

func TestInverseSPDRefusesIndefinite(t *testing.T) {
	if _, err := InverseSPD([][]float64{{1, 2}, {2, 1}}); err == nil {
		t.Error("indefinite matrix inverted")
	}
	inv, err := InverseSPD([][]float64{{4, 2, 0}, {2, 5, 1}, {0, 1, 3}})
	if err != nil {
		t.Fatal(err)
	}
	a := [][]float64{{4, 2, 0}, {2, 5, 1}, {0, 1, 3}}
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			var s float64
			for k := 0; k < 3; k++ {
				s += a[i][k] * inv[k][j]
			}
			want := 0.0
			if i == j {
				want = 1
			}
			near(t, "A·A⁻¹", s, want, 1e-12)
		}
	}
}

// SelectQuantile agrees with sorting and linear interpolation (numpy's
// default method, as Quantiles).
func TestSelectQuantileMatchesSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for n := 1; n < 300; n += 7 {
		x := make([]float64, n)
		for i := range x {
			x[i] = math.Round(rng.NormFloat64() * 3) // ties
		}
		s := append([]float64(nil), x...)
		sortFloats(s)
		for _, u := range []float64{0, 0.1, 0.25, 0.5, 0.75, 0.999, 1} {
			c := append([]float64(nil), x...)
			if got, want := SelectQuantile(c, u), Quantiles(s, []float64{u})[0]; got != want {
				t.Fatalf("n %d u %g: select %v, sort %v", n, u, got, want)
			}
		}
	}
}

func sortFloats(x []float64) {
	for i := 1; i < len(x); i++ {
		for j := i; j > 0 && x[j] < x[j-1]; j-- {
			x[j], x[j-1] = x[j-1], x[j]
		}
	}
}

// TestBetaClosedForms checks RegIncBeta and BinomialLowerBound on closed
// forms of the beta distribution: I_x(1, 1) = x, I_x(a, 1) = x^a,
// I_x(1, b) = 1 − (1 − x)^b, I_½(a, a) = ½ by symmetry, and the
// Clopper–Pearson bound after n successes in n trials, (1 − confidence)^(1/n)
// (e.g. 0.1^(1/200) = 0.98855 for 200 of 200 at 90 %).
func TestBetaClosedForms(t *testing.T) {
	for _, x := range []float64{0.01, 0.3, 0.5, 0.77, 0.999} {
		near(t, "I_x(1,1)", RegIncBeta(1, 1, x), x, 1e-13)
		near(t, "I_x(3.5,1)", RegIncBeta(3.5, 1, x), math.Pow(x, 3.5), 1e-12)
		near(t, "I_x(1,7)", RegIncBeta(1, 7, x), 1-math.Pow(1-x, 7), 1e-12)
	}
	for _, a := range []float64{0.5, 2, 40, 300} {
		near(t, "I_½(a,a)", RegIncBeta(a, a, 0.5), 0.5, 1e-12)
	}
	lb, err := BinomialLowerBound(200, 200, 0.9)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "Clopper-Pearson n of n", lb, math.Pow(0.1, 1.0/200), 1e-14)
	if lb0, _ := BinomialLowerBound(0, 10, 0.9); lb0 != 0 {
		t.Errorf("0 of 10: lower bound %v, want 0", lb0)
	}
	// a bisection on a monotone CDF: more successes never lower the bound
	prev := 0.0
	for k := 1; k <= 50; k++ {
		b, _ := BinomialLowerBound(k, 50, 0.95)
		if b < prev {
			t.Errorf("bound falls from %v to %v at k=%d", prev, b, k)
		}
		prev = b
	}
	for _, bad := range [][3]float64{{-1, 10, 0.9}, {11, 10, 0.9}, {5, 0, 0.9}, {5, 10, 1}, {5, 10, 0}} {
		if _, err := BinomialLowerBound(int(bad[0]), int(bad[1]), bad[2]); err == nil {
			t.Errorf("BinomialLowerBound%v: no error", bad)
		}
	}
}
