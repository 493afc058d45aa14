package stats

import (
	"math"
	"testing"
	"time"
)

// Every statistic must return (an error or its documented value) for NaN and
// ±Inf input rather than hang or panic: a diverging training run feeds NaN
// scores to AUROC every epoch. The fuzz targets below decode bytes into
// values rich in ties and non-finite numbers; the unit test runs each
// statistic on NaN and Inf input under a deadline, so a hang fails the test
// instead of stalling it.

// nonfiniteValue maps a byte to a value: a few special bytes give NaN, ±Inf,
// the largest and smallest magnitudes; the rest give small integers (many
// ties) and halves.
func nonfiniteValue(b byte) float64 {
	switch b {
	case 255:
		return math.NaN()
	case 254:
		return math.Inf(1)
	case 253:
		return math.Inf(-1)
	case 252:
		return math.MaxFloat64
	case 251:
		return -math.MaxFloat64
	case 250:
		return math.SmallestNonzeroFloat64
	}
	return float64(b%16) / float64(1+b/128)
}

func nonfiniteValues(data []byte) []float64 {
	out := make([]float64, len(data))
	for i, b := range data {
		out[i] = nonfiniteValue(b)
	}
	return out
}

func nonfiniteLabels(data []byte) []bool {
	out := make([]bool, len(data))
	for i, b := range data {
		out[i] = b&1 == 1
	}
	return out
}

func nonfiniteSeeds(f *testing.F) {
	f.Add([]byte{1, 2, 3, 4, 2, 2, 7, 8})
	f.Add([]byte{255, 1, 255, 2, 3, 4})
	f.Add([]byte{254, 253, 1, 254, 0, 253})
	f.Add([]byte{252, 251, 250, 0, 0, 1})
}

func anyNonfinite(x []float64) bool { return !allFinite(x) }

func FuzzAUROC(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		s := nonfiniteValues(data)
		l := nonfiniteLabels(append(append([]byte(nil), data...), 0)[1:])
		a := AUROC(s, l)
		if anyNaN(s) != math.IsNaN(a) && !math.IsNaN(a) {
			t.Fatalf("AUROC %v of scores %v: NaN input must give NaN", a, s)
		}
		if !math.IsNaN(a) && !(a >= 0 && a <= 1) {
			t.Fatalf("AUROC %v outside [0, 1]", a)
		}
		p, err := PlacementValues(s, l)
		if err == nil && (anyNonfinite(s) || math.Abs(p.AUC-a) > 1e-12) {
			t.Fatalf("PlacementValues AUC %v (AUROC %v) on %v", p.AUC, a, s)
		}
	})
}

func FuzzWasserstein1(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		h := len(data) / 2
		a, b := nonfiniteValues(data[:h]), nonfiniteValues(data[h:])
		w := Wasserstein1(a, b)
		bad := len(a) == 0 || len(b) == 0 || anyNonfinite(a) || anyNonfinite(b)
		if bad != math.IsNaN(w) {
			t.Fatalf("W1(%v, %v) = %v", a, b, w)
		}
		if !bad && !(w >= 0) {
			t.Fatalf("W1 %v < 0", w)
		}
		if len(a) == len(b) && len(a) > 0 {
			q := QuantileW1(EvenLevels(len(a)), a, b)
			if bad != math.IsNaN(q) {
				t.Fatalf("QuantileW1(%v, %v) = %v", a, b, q)
			}
		}
	})
}

func FuzzCalibration(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		v := nonfiniteValues(data)
		ok := nonfiniteLabels(data)
		conf := make([]float64, len(v))
		for i, x := range v {
			conf[i] = x / 16
		}
		e := ECE(conf, ok, 15)
		if !math.IsNaN(e) && !(e >= 0 && e <= 1) {
			t.Fatalf("ECE %v outside [0, 1]", e)
		}
		if len(v) < 2 {
			return
		}
		logits := make([][]float64, len(v)/2)
		labels := make([]int, len(logits))
		for i := range logits {
			logits[i] = []float64{v[2*i], v[2*i+1]}
			labels[i] = int(data[i] & 1)
		}
		T, err := FitTemperature(logits, labels)
		if err == nil && !(T > 0 && !math.IsInf(T, 0)) {
			t.Fatalf("temperature %v", T)
		}
		finite := allFinite(v[:2*len(logits)])
		if (err == nil) != finite {
			t.Fatalf("FitTemperature error %v for finite=%v", err, finite)
		}
		if nll := NLL(logits, labels, 1); finite && !(nll >= 0) && !math.IsInf(nll, 1) {
			t.Fatalf("NLL %v of finite logits", nll)
		}
		lo, hi, err := ECEInterval(conf, ok, 15, 50, 1, 0.95)
		if err == nil && !(lo <= hi && lo >= 0 && hi <= 1) {
			t.Fatalf("ECE interval [%v, %v]", lo, hi)
		}
		if b := Brier(conf, ok); math.IsNaN(b) != !(len(conf) > 0 && allProbabilities(conf)) {
			t.Fatalf("Brier %v", b)
		}
	})
}

func allProbabilities(p []float64) bool {
	for _, x := range p {
		if !(x >= 0 && x <= 1) {
			return false
		}
	}
	return true
}

func FuzzQuantile(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) == 0 {
			return
		}
		u := float64(data[0]) / 250
		x := nonfiniteValues(data[1:])
		got := SelectQuantile(append([]float64(nil), x...), u)
		if anyNaN(x) != math.IsNaN(got) && len(x) > 0 {
			t.Fatalf("SelectQuantile(%v, %v) = %v", x, u, got)
		}
		s := append([]float64(nil), x...)
		quantileSortForTest(s)
		if q := Quantile(s, u); len(x) > 0 && anyNaN(x) != math.IsNaN(q) {
			t.Fatalf("Quantile(%v, %v) = %v", s, u, q)
		}
	})
}

func FuzzLedoitWolf(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) < 6 {
			return
		}
		p := 1 + int(data[0])%3
		v := nonfiniteValues(data[1:])
		var x [][]float64
		for i := 0; i+p <= len(v); i += p {
			x = append(x, v[i:i+p])
		}
		cov, s, err := LedoitWolf(x)
		if err != nil {
			return
		}
		if !(s >= 0 && s <= 1) {
			t.Fatalf("shrinkage %v", s)
		}
		for _, r := range cov {
			if anyNaN(r) {
				t.Fatalf("NaN covariance from %v", x)
			}
		}
		_, _ = InverseSPD(cov)
	})
}

func FuzzBinomial(f *testing.F) {
	nonfiniteSeeds(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) < 3 {
			return
		}
		n := int(data[0])
		k := int(data[1])
		c := nonfiniteValue(data[2]) / 16
		lb, err := BinomialLowerBound(k, n, c)
		if err == nil && !(lb >= 0 && lb <= 1) {
			t.Fatalf("bound %v for %d/%d at %v", lb, k, n, c)
		}
		if lo, hi, err := Wilson(k, n, c); err == nil && !(lo <= hi) {
			t.Fatalf("wilson [%v, %v]", lo, hi)
		}
		_ = RegIncBeta(nonfiniteValue(data[0]), nonfiniteValue(data[1]), c)
	})
}

// TestNonFiniteTerminates runs every statistic on NaN and ±Inf input with a
// deadline and checks the documented result.
func TestNonFiniteTerminates(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	cases := []struct {
		name string
		run  func() bool // true when the documented result came back
	}{
		{"AUROC NaN", func() bool { return math.IsNaN(AUROC([]float64{1, nan, 2, 3}, []bool{true, false, true, false})) }},
		{"AUROC all NaN", func() bool { return math.IsNaN(AUROC([]float64{nan, nan}, []bool{true, false})) }},
		{"AUROC Inf ranks", func() bool { return AUROC([]float64{inf, -inf, inf}, []bool{true, false, true}) == 1 }},
		{"Wasserstein1 NaN", func() bool { return math.IsNaN(Wasserstein1([]float64{nan, 1}, []float64{1, 2})) }},
		{"Wasserstein1 Inf", func() bool { return math.IsNaN(Wasserstein1([]float64{inf, 1}, []float64{1, 2})) }},
		{"QuantileW1 NaN", func() bool { return math.IsNaN(QuantileW1([]float64{0.5}, []float64{nan}, []float64{1})) }},
		{"ECE NaN", func() bool { return math.IsNaN(ECE([]float64{nan, 0.5}, []bool{true, false}, 15)) }},
		{"NLL NaN", func() bool { return math.IsNaN(NLL([][]float64{{0, nan}}, []int{1}, 1)) }},
		{"FitTemperature NaN", func() bool { _, err := FitTemperature([][]float64{{0, nan}}, []int{1}); return err != nil }},
		{"FitTemperature Inf", func() bool { _, err := FitTemperature([][]float64{{0, inf}}, []int{1}); return err != nil }},
		{"LogSumExp NaN and Inf", func() bool { return math.IsNaN(LogSumExp([]float64{inf, nan})) }},
		{"LedoitWolf NaN", func() bool { _, _, err := LedoitWolf([][]float64{{1, nan}, {2, 3}}); return err != nil }},
		{"InverseSPD Inf", func() bool { _, err := InverseSPD([][]float64{{inf}}); return err != nil }},
		{"Quantile NaN", func() bool { return math.IsNaN(Quantile([]float64{nan, 1, 2}, 0.9)) }},
		{"SelectQuantile NaN", func() bool { return math.IsNaN(SelectQuantile([]float64{3, 1, nan, 2}, 0.5)) }},
		{"RegIncBeta NaN", func() bool { return math.IsNaN(RegIncBeta(nan, 1, 0.5)) }},
		{"BinomialLowerBound NaN", func() bool { _, err := BinomialLowerBound(1, 2, nan); return err != nil }},
		{"PlacementValues NaN", func() bool { _, err := PlacementValues([]float64{nan, 1}, []bool{true, false}); return err != nil }},
		{"ECEInterval NaN", func() bool {
			_, _, err := ECEInterval([]float64{nan, 0.5}, []bool{true, false}, 15, 10, 1, 0.95)
			return err != nil
		}},
		{"Brier NaN", func() bool { return math.IsNaN(Brier([]float64{nan}, []bool{true})) }},
	}
	for _, c := range cases {
		done := make(chan bool, 1)
		go func() { done <- c.run() }()
		select {
		case ok := <-done:
			if !ok {
				t.Errorf("%s: not the documented result", c.name)
			}
		case <-time.After(5 * time.Second):
			t.Fatalf("%s: did not return within 5 s", c.name)
		}
	}
}
