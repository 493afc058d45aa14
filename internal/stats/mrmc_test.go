package stats

import (
	"encoding/csv"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
)

// vandykePath is the VanDyke et al. (1993) reader study as distributed with
// the R package MRMCaov (see its README for the published figures).
const vandykePath = "/work/shared/reference/mrmc/vandyke.csv"

// mrmcLoadVanDyke returns ratings[treatment][reader][case] and truth.
func mrmcLoadVanDyke(t *testing.T) ([][][]float64, []bool) {
	t.Helper()
	f, err := os.Open(refcheck.Path(t, vandykePath))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	const treatments, readers, cases = 2, 5, 114
	ratings := make([][][]float64, treatments)
	for i := range ratings {
		ratings[i] = make([][]float64, readers)
		for j := range ratings[i] {
			ratings[i][j] = make([]float64, cases)
		}
	}
	truth := make([]bool, cases)
	for _, row := range rows[1:] {
		var v [5]int
		for k := range v {
			if v[k], err = strconv.Atoi(row[k]); err != nil {
				t.Fatalf("row %v: %v", row, err)
			}
		}
		ratings[v[1]-1][v[0]-1][v[2]-1] = float64(v[4])
		truth[v[2]-1] = v[3] == 1
	}
	return ratings, truth
}

// mrmcPrinted checks got against a figure printed with the digits of want:
// it must round to the printed value (within half a unit of its last digit).
func mrmcPrinted(t *testing.T, name string, got float64, want string) {
	t.Helper()
	w, err := strconv.ParseFloat(want, 64)
	if err != nil {
		t.Fatal(err)
	}
	decimals := 0
	if i := strings.IndexByte(want, '.'); i >= 0 {
		decimals = len(want) - i - 1
	}
	if half := 0.5 * math.Pow(10, -float64(decimals)); math.Abs(got-w) > half*(1+1e-9) {
		t.Errorf("%s = %.12g, published %s", name, got, want)
	}
}

// Obuchowski-Rockette with DeLong covariances, random readers, against the
// figures printed for the VanDyke data in the article documenting MRMCaov
// (shared/reference/mrmc/README.md).
func TestMRMCVanDykeDeLong(t *testing.T) {
	ratings, truth := mrmcLoadVanDyke(t)
	res, err := MRMC(ratings, truth, CovDeLong, RandomReaders)
	if err != nil {
		t.Fatal(err)
	}
	mrmcPrinted(t, "mean AUC 1", res.Conditions[0].AUC, "0.8970370")
	mrmcPrinted(t, "mean AUC 2", res.Conditions[1].AUC, "0.9408374")
	mrmcPrinted(t, "error variance", res.ErrorVar, "0.0007921325")
	mrmcPrinted(t, "Cov1", res.Cov1, "0.0003420090")
	mrmcPrinted(t, "Cov2", res.Cov2, "0.0003395265")
	mrmcPrinted(t, "Cov3", res.Cov3, "0.0002358497")
	mrmcPrinted(t, "MS(T)", res.MST, "0.004796171")
	mrmcPrinted(t, "MS(T:R)", res.MSTR, "0.0005510306")
	mrmcPrinted(t, "F", res.Statistic, "4.484854")
	mrmcPrinted(t, "df1", res.DF1, "1")
	mrmcPrinted(t, "df2", res.DF2, "15.06611")
	mrmcPrinted(t, "p", res.P, "0.05123303")
	d := res.Differences[0]
	mrmcPrinted(t, "difference", d.Estimate, "-0.04380032")
	mrmcPrinted(t, "difference SE", d.SE, "0.0206825")
	mrmcPrinted(t, "difference CI low", d.CI95[0], "-0.0878671960")
	mrmcPrinted(t, "difference CI high", d.CI95[1], "0.0002665519")
	mrmcPrinted(t, "difference p", d.P, "0.05123303")
	mrmcPrinted(t, "treatment 1 CI low", res.Conditions[0].CI95[0], "0.8253461")
	mrmcPrinted(t, "treatment 1 CI high", res.Conditions[0].CI95[1], "0.9687280")
	mrmcPrinted(t, "treatment 1 df", res.Conditions[0].DF, "12.59597")
	mrmcPrinted(t, "treatment 2 CI low", res.Conditions[1].CI95[0], "0.8942155")
	mrmcPrinted(t, "treatment 2 CI high", res.Conditions[1].CI95[1], "0.9874592")
	mrmcPrinted(t, "treatment 2 df", res.Conditions[1].DF, "12.56530")
}

// Jackknife covariances, random and fixed readers, against the same article.
func TestMRMCVanDykeJackknife(t *testing.T) {
	ratings, truth := mrmcLoadVanDyke(t)
	res, err := MRMC(ratings, truth, CovJackknife, RandomReaders)
	if err != nil {
		t.Fatal(err)
	}
	mrmcPrinted(t, "error variance", res.ErrorVar, "0.0008022883")
	mrmcPrinted(t, "Cov1", res.Cov1, "0.0003466137")
	mrmcPrinted(t, "Cov2", res.Cov2, "0.0003440748")
	mrmcPrinted(t, "Cov3", res.Cov3, "0.0002390284")

	fixed, err := MRMC(ratings, truth, CovJackknife, FixedReaders)
	if err != nil {
		t.Fatal(err)
	}
	mrmcPrinted(t, "fixed χ²", fixed.Statistic, "5.475953")
	mrmcPrinted(t, "fixed df", fixed.DF1, "1")
	mrmcPrinted(t, "fixed p", fixed.P, "0.01927984")
	d := fixed.Differences[0]
	mrmcPrinted(t, "fixed CI low", d.CI95[0], "-0.08048591")
	mrmcPrinted(t, "fixed CI high", d.CI95[1], "-0.00711473")
	mrmcPrinted(t, "fixed z", d.Statistic, "-2.340075")
	published := [2][]string{
		{"0.9196457", "0.8587762", "0.9038647", "0.9731079", "0.8297907"},
		{"0.9478261", "0.9053140", "0.9217391", "0.9993559", "0.9299517"},
	}
	for i, row := range published {
		for j, want := range row {
			mrmcPrinted(t, "reader "+strconv.Itoa(j+1)+" AUC, treatment "+strconv.Itoa(i+1), fixed.AUC[i][j], want)
		}
	}
}

// With one reader and fixed readers, the analysis is the paired DeLong test:
// χ² = z² (Hillis 2007 reduces to DeLong et al. 1988 for r = 1).
func TestMRMCOneReaderIsDeLong(t *testing.T) {
	ratings, truth := mrmcLoadVanDyke(t)
	one := [][][]float64{{ratings[0][2]}, {ratings[1][2]}}
	res, err := MRMC(one, truth, CovDeLong, FixedReaders)
	if err != nil {
		t.Fatal(err)
	}
	pt, err := DeLongPaired(ratings[0][2], ratings[1][2], truth)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(res.Statistic-pt.Z*pt.Z) > 1e-9 || math.Abs(res.P-pt.P) > 1e-9 {
		t.Errorf("one reader: χ² %g p %g; DeLong z² %g p %g", res.Statistic, res.P, pt.Z*pt.Z, pt.P)
	}
	if _, err := MRMC(one, truth, CovDeLong, RandomReaders); err == nil {
		t.Error("random readers with one reader accepted")
	}
}

// Readers who rate at random in both conditions: the random-readers 95 %
// interval of the difference should cover 0 in about 95 % of simulated
// studies, and each condition's interval should lie around 0.5.
func TestMRMCRandomReadersCoverage(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	const studies, readers, cases = 200, 4, 80
	covered, around := 0, 0
	truth := make([]bool, cases)
	for k := range truth {
		truth[k] = k < 35
	}
	for s := 0; s < studies; s++ {
		ratings := make([][][]float64, 2)
		for i := range ratings {
			ratings[i] = make([][]float64, readers)
			for j := range ratings[i] {
				ratings[i][j] = make([]float64, cases)
				for k := range ratings[i][j] {
					ratings[i][j][k] = float64(rng.IntN(101))
				}
			}
		}
		res, err := MRMC(ratings, truth, CovDeLong, RandomReaders)
		if err != nil {
			t.Fatal(err)
		}
		if d := res.Differences[0]; d.CI95[0] <= 0 && 0 <= d.CI95[1] {
			covered++
		}
		if c := res.Conditions[0]; c.CI95[0] <= 0.5 && 0.5 <= c.CI95[1] {
			around++
		}
	}
	// Nominal 95 %; with 200 studies a binomial 99.9 % band is about 89–99 %.
	for name, n := range map[string]int{"difference covers 0": covered, "condition covers 0.5": around} {
		if frac := float64(n) / studies; frac < 0.89 || frac > 0.995 {
			t.Errorf("%s in %.1f %% of %d studies, want about 95 %%", name, 100*frac, studies)
		} else {
			t.Logf("%s in %.1f %% of %d studies", name, 100*frac, studies)
		}
	}
}
