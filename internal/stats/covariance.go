package stats

import (
	"fmt"
	"math"
)

// LedoitWolf returns the Ledoit-Wolf shrunk covariance (1 − s)·S + s·μ·I of
// the rows of x taken as already centred (S = xᵀx/n, μ = trace(S)/p), and the
// shrinkage intensity s, estimated as in Ledoit & Wolf 2004 (J. Multivariate
// Analysis 88, "A well-conditioned estimator for large-dimensional covariance
// matrices", Lemma 3.2 and Theorem 3.1 with the sample estimates of
// Section 3.3) — the same estimator as sklearn.covariance.ledoit_wolf with
// assume_centered=True.
func LedoitWolf(x [][]float64) ([][]float64, float64, error) {
	n := len(x)
	if n < 2 {
		return nil, 0, fmt.Errorf("ledoit-wolf: need at least 2 samples, got %d", n)
	}
	p := len(x[0])
	for i, r := range x {
		if len(r) != p {
			return nil, 0, fmt.Errorf("ledoit-wolf: row %d has %d values, want %d", i, len(r), p)
		}
		if !allFinite(r) {
			return nil, 0, fmt.Errorf("ledoit-wolf: row %d has a value that is not a finite number", i)
		}
	}
	S := make([][]float64, p)
	for i := range S {
		S[i] = make([]float64, p)
	}
	for _, r := range x {
		for i := 0; i < p; i++ {
			for j := 0; j <= i; j++ {
				S[i][j] += r[i] * r[j]
			}
		}
	}
	for i := 0; i < p; i++ {
		for j := 0; j <= i; j++ {
			S[i][j] /= float64(n)
			S[j][i] = S[i][j]
		}
	}
	var mu float64
	for i := 0; i < p; i++ {
		mu += S[i][i]
	}
	mu /= float64(p)
	// d² = ‖S − μI‖²/p; b̄² = (1/n²) Σ_k ‖x_k x_kᵀ − S‖²/p, capped at d².
	var d2 float64
	for i := 0; i < p; i++ {
		for j := 0; j < p; j++ {
			e := S[i][j]
			if i == j {
				e -= mu
			}
			d2 += e * e
		}
	}
	d2 /= float64(p)
	var b2 float64
	for _, r := range x {
		for i := 0; i < p; i++ {
			for j := 0; j < p; j++ {
				e := r[i]*r[j] - S[i][j]
				b2 += e * e
			}
		}
	}
	b2 /= float64(n) * float64(n) * float64(p)
	b2 = math.Min(b2, d2)
	s := 0.0
	if d2 > 0 {
		s = b2 / d2
	}
	out := make([][]float64, p)
	for i := range out {
		out[i] = make([]float64, p)
		for j := range out[i] {
			out[i][j] = (1 - s) * S[i][j]
			if i == j {
				out[i][j] += s * mu
			}
		}
		if !allFinite(out[i]) || !(s >= 0 && s <= 1) {
			return nil, 0, fmt.Errorf("ledoit-wolf: values too large: the covariance overflows")
		}
	}
	return out, s, nil
}

// InverseSPD inverts a symmetric positive-definite matrix by its Cholesky
// factorisation; a matrix that is not positive definite, or holds a NaN or
// ±Inf, is refused.
func InverseSPD(a [][]float64) ([][]float64, error) {
	n := len(a)
	L := make([][]float64, n)
	for i := range L {
		if len(a[i]) != n {
			return nil, fmt.Errorf("inverse: row %d has %d values, want %d", i, len(a[i]), n)
		}
		if !allFinite(a[i]) {
			return nil, fmt.Errorf("inverse: row %d has a value that is not a finite number", i)
		}
		L[i] = make([]float64, n)
	}
	for j := 0; j < n; j++ {
		d := a[j][j]
		for k := 0; k < j; k++ {
			d -= L[j][k] * L[j][k]
		}
		if !(d > 1e-300) {
			return nil, fmt.Errorf("inverse: matrix is not positive definite (pivot %d is %g)", j, d)
		}
		L[j][j] = math.Sqrt(d)
		for i := j + 1; i < n; i++ {
			s := a[i][j]
			for k := 0; k < j; k++ {
				s -= L[i][k] * L[j][k]
			}
			L[i][j] = s / L[j][j]
		}
	}
	// inverse = L⁻ᵀ L⁻¹; solve column by column.
	inv := make([][]float64, n)
	for i := range inv {
		inv[i] = make([]float64, n)
	}
	y := make([]float64, n)
	for c := 0; c < n; c++ {
		for i := 0; i < n; i++ { // L y = e_c
			s := 0.0
			if i == c {
				s = 1
			}
			for k := 0; k < i; k++ {
				s -= L[i][k] * y[k]
			}
			y[i] = s / L[i][i]
		}
		for i := n - 1; i >= 0; i-- { // Lᵀ x = y
			s := y[i]
			for k := i + 1; k < n; k++ {
				s -= L[k][i] * inv[k][c]
			}
			inv[i][c] = s / L[i][i]
		}
	}
	for i := 0; i < n; i++ { // symmetrise rounding
		for j := 0; j < i; j++ {
			m := (inv[i][j] + inv[j][i]) / 2
			inv[i][j], inv[j][i] = m, m
		}
	}
	return inv, nil
}
