package fitcheck

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// AUROC is the area under the ROC curve of scores for telling positives
// (labels true) from negatives: the probability that a random positive scores
// higher than a random negative, ties counting half (the Mann-Whitney U
// statistic divided by n₊·n₋; Hanley & McNeil 1982). It equals sklearn's
// roc_auc_score. NaN when either class is empty.
func AUROC(scores []float64, labels []bool) float64 {
	n := len(scores)
	if n != len(labels) {
		return math.NaN()
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return scores[idx[a]] < scores[idx[b]] })
	var rankSum float64
	var npos, nneg float64
	for i := 0; i < n; {
		j := i
		for j < n && scores[idx[j]] == scores[idx[i]] {
			j++
		}
		avg := float64(i+j+1) / 2 // ranks i+1..j averaged
		for k := i; k < j; k++ {
			if labels[idx[k]] {
				rankSum += avg
				npos++
			} else {
				nneg++
			}
		}
		i = j
	}
	if npos == 0 || nneg == 0 {
		return math.NaN()
	}
	return (rankSum - npos*(npos+1)/2) / (npos * nneg)
}

// ECE is the expected calibration error of Guo et al. 2017 (ICML), Eq. 3:
// Σ_m |B_m|/n · |acc(B_m) − conf(B_m)| over bins equal-width bins of
// confidence, bin m holding confidences in ((m−1)/M, m/M] (a confidence of
// exactly 0 goes to the first bin). Guo et al. use M = 15.
func ECE(confidence []float64, correct []bool, bins int) float64 {
	n := len(confidence)
	if n == 0 || n != len(correct) || bins < 1 {
		return math.NaN()
	}
	cnt := make([]float64, bins)
	acc := make([]float64, bins)
	conf := make([]float64, bins)
	for i, c := range confidence {
		b := int(math.Ceil(c*float64(bins))) - 1
		b = max(0, min(bins-1, b))
		cnt[b]++
		conf[b] += c
		if correct[i] {
			acc[b]++
		}
	}
	var e float64
	for b := range cnt {
		if cnt[b] > 0 {
			e += cnt[b] / float64(n) * math.Abs(acc[b]/cnt[b]-conf[b]/cnt[b])
		}
	}
	return e
}

// NLL is the mean negative log-likelihood −(1/n) Σ log softmax(z_i/T)[y_i].
func NLL(logits [][]float64, labels []int, T float64) float64 {
	var s float64
	for i, z := range logits {
		sc := make([]float64, len(z))
		for k, x := range z {
			sc[k] = x / T
		}
		s += LogSumExp(sc) - sc[labels[i]]
	}
	return s / float64(len(logits))
}

// FitTemperature finds the temperature T that minimises the NLL of the
// validation logits (temperature scaling, Guo et al. 2017, Section 4.2). The
// NLL is convex in β = 1/T, so a golden-section search over β in
// [1/20, 1/0.05] finds the minimum; tol is the tolerance on β.
func FitTemperature(logits [][]float64, labels []int) (float64, error) {
	if len(logits) == 0 || len(logits) != len(labels) {
		return 0, errors.New("fit temperature: need logits and labels of the same, non-zero length")
	}
	for i, z := range logits {
		if labels[i] < 0 || labels[i] >= len(z) {
			return 0, fmt.Errorf("fit temperature: label %d out of range for %d logits", labels[i], len(z))
		}
	}
	f := func(beta float64) float64 { return NLL(logits, labels, 1/beta) }
	a, b := 1.0/20, 1/0.05
	g := (math.Sqrt(5) - 1) / 2
	c, d := b-g*(b-a), a+g*(b-a)
	fc, fd := f(c), f(d)
	for b-a > 1e-9 {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - g*(b-a)
			fc = f(c)
		} else {
			a, c, fc = c, d, fd
			d = a + g*(b-a)
			fd = f(d)
		}
	}
	return 1 / ((a + b) / 2), nil
}

// ThresholdAt returns the threshold that keeps at least the fraction
// retention of values: for direction "max" (higher is worse) the smallest
// order statistic with at least that fraction at or below it, for "min" the
// largest with at least that fraction at or above it; and the fraction of
// values that pass it.
func ThresholdAt(values []float64, retention float64, direction string) (thr, kept float64, err error) {
	n := len(values)
	if n == 0 || !(retention > 0 && retention <= 1) {
		return 0, 0, fmt.Errorf("threshold: need values and a retention in (0, 1], got %d values, %v", n, retention)
	}
	s := append([]float64(nil), values...)
	sort.Float64s(s)
	k := int(math.Ceil(retention*float64(n) - 1e-9))
	k = max(1, min(n, k))
	pass := 0
	if direction == "min" {
		thr = s[n-k]
		for _, v := range s {
			if v >= thr {
				pass++
			}
		}
	} else {
		thr = s[k-1]
		for _, v := range s {
			if v <= thr {
				pass++
			}
		}
	}
	return thr, float64(pass) / float64(n), nil
}

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
	}
	return out, s, nil
}

// InverseSPD inverts a symmetric positive-definite matrix by its Cholesky
// factorisation; a matrix that is not positive definite is refused.
func InverseSPD(a [][]float64) ([][]float64, error) {
	n := len(a)
	L := make([][]float64, n)
	for i := range L {
		if len(a[i]) != n {
			return nil, fmt.Errorf("inverse: row %d has %d values, want %d", i, len(a[i]), n)
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

// ClassMeansAndCentred returns the per-class means of the feature rows and
// the rows centred on their own class mean (the pooled, class-conditional
// centring of Lee et al. 2018, Section 2). Every class must have a row.
func ClassMeansAndCentred(features [][]float64, labels []int, classes int) ([][]float64, [][]float64, error) {
	if len(features) != len(labels) || len(features) == 0 {
		return nil, nil, errors.New("class means: need features and labels of the same, non-zero length")
	}
	p := len(features[0])
	means := make([][]float64, classes)
	count := make([]float64, classes)
	for c := range means {
		means[c] = make([]float64, p)
	}
	for i, f := range features {
		c := labels[i]
		if c < 0 || c >= classes || len(f) != p {
			return nil, nil, fmt.Errorf("class means: row %d has label %d or %d values (want 0..%d, %d)", i, c, len(f), classes-1, p)
		}
		count[c]++
		for j, x := range f {
			means[c][j] += x
		}
	}
	for c := range means {
		if count[c] == 0 {
			return nil, nil, fmt.Errorf("class means: class %d has no rows", c)
		}
		for j := range means[c] {
			means[c][j] /= count[c]
		}
	}
	centred := make([][]float64, len(features))
	for i, f := range features {
		centred[i] = make([]float64, p)
		for j, x := range f {
			centred[i][j] = x - means[labels[i]][j]
		}
	}
	return means, centred, nil
}
