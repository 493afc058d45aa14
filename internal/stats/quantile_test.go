package stats

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"brightfold/internal/refcheck"
)

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
		quantileSortForTest(s)
		for _, u := range []float64{0, 0.1, 0.25, 0.5, 0.75, 0.999, 1} {
			c := append([]float64(nil), x...)
			if got, want := SelectQuantile(c, u), Quantiles(s, []float64{u})[0]; got != want {
				t.Fatalf("n %d u %g: select %v, sort %v", n, u, got, want)
			}
		}
	}
}

// Quantiles of float32 values equal those of the same values as float64.
func TestQuantilesFloat32(t *testing.T) {
	x32 := []float32{-2, -0.5, 0, 0.25, 1, 3.5, 7}
	x64 := make([]float64, len(x32))
	for i, v := range x32 {
		x64[i] = float64(v)
	}
	lv := EvenLevels(9)
	a, b := Quantiles(x32, lv), Quantiles(x64, lv)
	for i := range a {
		if a[i] != b[i] {
			t.Errorf("level %v: float32 %v, float64 %v", lv[i], a[i], b[i])
		}
	}
}

// Quantile, Quantiles and SelectQuantile against numpy.quantile and
// numpy.percentile at numpy's default method ("linear", Hyndman & Fan 1996
// definition 7), on random samples with ties, float32 values and a single
// value; a percentile p is Quantile at p/100. numpy interpolates from the
// upper order statistic when the fraction is at least ½, so the two agree
// to rounding, not bit for bit.
func TestQuantileAgainstNumpy(t *testing.T) {
	refcheck.PythonModule(t, "numpy")
	rng := rand.New(rand.NewPCG(21, 22))
	type qCase struct {
		X           []float64 `json:"x"`
		Levels      []float64 `json:"levels"`
		Percentiles []float64 `json:"percentiles"`
	}
	levels := append([]float64{0, 0.01, 0.25, 0.5, 0.75, 0.99, 1}, EvenLevels(99)...)
	percentiles := []float64{0, 0.5, 1, 5, 50, 90, 95, 99, 99.5, 100}
	var cases []qCase
	for _, n := range []int{1, 2, 3, 10, 101, 1000, 4099} {
		c := qCase{Levels: levels, Percentiles: percentiles}
		for i := 0; i < n; i++ {
			x := rng.NormFloat64() * 100
			switch i % 3 {
			case 1:
				x = math.Round(x / 10) // ties
			case 2:
				x = float64(float32(x)) // exactly representable as float32
			}
			c.X = append(c.X, x)
		}
		cases = append(cases, c)
	}
	b, err := json.Marshal(cases)
	if err != nil {
		t.Fatal(err)
	}
	f := filepath.Join(t.TempDir(), "job.json")
	if err := os.WriteFile(f, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref []struct {
		Quantiles   []float64 `json:"quantiles"`
		Percentiles []float64 `json:"percentiles"`
	}
	refcheck.RunPython(t, "testdata/ref_quantile.py", &ref, f)
	if len(ref) != len(cases) {
		t.Fatalf("numpy returned %d cases, want %d", len(ref), len(cases))
	}
	for i, c := range cases {
		sorted := slices.Sorted(slices.Values(c.X))
		got := Quantiles(sorted, c.Levels)
		for j, u := range c.Levels {
			want := ref[i].Quantiles[j]
			kernelNear(t, fmt.Sprintf("n=%d Quantile(%v) vs numpy.quantile", len(c.X), u), got[j], want, 1e-12*(1+math.Abs(want)))
			sel := SelectQuantile(slices.Clone(c.X), u)
			if sel != got[j] {
				t.Errorf("n=%d u=%v: SelectQuantile %v, Quantile %v (same rule, must be identical)", len(c.X), u, sel, got[j])
			}
		}
		for j, p := range c.Percentiles {
			want := ref[i].Percentiles[j]
			kernelNear(t, fmt.Sprintf("n=%d Quantile(%v/100) vs numpy.percentile", len(c.X), p), Quantile(sorted, p/100), want, 1e-12*(1+math.Abs(want)))
		}
	}
	if !math.IsNaN(Quantile([]float64{}, 0.5)) || !math.IsNaN(Quantile([]float64{1, 2}, math.NaN())) {
		t.Error("no values or a NaN level should give NaN")
	}
}
