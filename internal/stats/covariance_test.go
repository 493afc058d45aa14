package stats

import (
	"testing"
)

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
			kernelNear(t, "A·A⁻¹", s, want, 1e-12)
		}
	}
}
