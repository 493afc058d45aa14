package stats

import (
	"fmt"
	"math"
	"path/filepath"
	"testing"

	"brightfold/internal/refcheck"
)

// The Wilson interval against statsmodels proportion_confint(method="wilson"),
// computed by testdata/wilson_statsmodels.py.
func TestWilsonAgainstStatsmodels(t *testing.T) {
	refcheck.PythonModule(t, "statsmodels")
	cases := [][2]int{{0, 1}, {1, 1}, {0, 10}, {3, 7}, {20, 20}, {45, 114}, {1, 1000}, {500, 1000}, {999, 1000}}
	var args []string
	for _, c := range cases {
		args = append(args, fmt.Sprintf("%d,%d", c[0], c[1]))
	}
	var want [][2]float64
	refcheck.RunPython(t, filepath.Join("testdata", "wilson_statsmodels.py"), &want, args...)
	for i, c := range cases {
		lo, hi, err := Wilson(c[0], c[1], 0.95)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(lo-want[i][0]) > 1e-12 || math.Abs(hi-want[i][1]) > 1e-12 {
			t.Errorf("Wilson(%d, %d) = [%.15g, %.15g], statsmodels [%.15g, %.15g]",
				c[0], c[1], lo, hi, want[i][0], want[i][1])
		}
	}
}

func TestWilsonBadInput(t *testing.T) {
	for _, c := range [][2]int{{0, 0}, {-1, 5}, {6, 5}} {
		if _, _, err := Wilson(c[0], c[1], 0.95); err == nil {
			t.Errorf("Wilson(%d, %d) accepted", c[0], c[1])
		}
	}
	if _, _, err := Wilson(1, 2, 1.5); err == nil {
		t.Error("level 1.5 accepted")
	}
}
