package fitcheck

import (
	"math"
	"math/rand/v2"
	"testing"

	"brightfold/internal/stats"
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
	prec, err := stats.InverseSPD([][]float64{{2, 1}, {1, 2}})
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
