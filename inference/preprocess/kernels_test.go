package preprocess

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/stats"
	"brightfold/internal/volume"
)

// The canonical frame agrees with nibabel's as_closest_canonical (nibabel
// 5.0, orientations.io_orientation); stats.Quantile at p/100 agrees with
// numpy.percentile's default linear method. (Trilinear sampling is
// volume.ResampleFill, checked against scipy in package volume.)
func TestPreprocessAgainstNibabelScipy(t *testing.T) {
	refcheck.PythonModule(t, "nibabel")
	rng := rand.New(rand.NewPCG(1, 2))
	var affines []volume.Affine
	for n := 0; n < 12; n++ {
		affines = append(affines, randomAffine(rng))
	}
	vals := make([]float64, 101)
	for i := range vals {
		vals[i] = rng.NormFloat64()
	}
	ps := []float64{0, 1, 2.5, 50, 97.5, 99, 100}
	job := map[string]any{"affines": affines, "percentiles": map[string]any{"values": vals, "p": ps}}
	jb, _ := json.Marshal(job)
	jf := filepath.Join(t.TempDir(), "job.json")
	if err := os.WriteFile(jf, jb, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Canonical   []volume.Affine
		Percentiles []float64
	}
	refcheck.RunPython(t, "testdata/ref_preprocess.py", &ref, jf)
	for n, a := range affines {
		f, err := canonicalFrame(a)
		if err != nil {
			t.Fatal(err)
		}
		sp := a.Spacing()
		for g := 0; g < 3; g++ {
			for r := 0; r < 3; r++ {
				got := f.Dir[g][r] * sp[f.Axis[g]]
				if math.Abs(got-ref.Canonical[n][r][g]) > 1e-9 {
					t.Fatalf("affine %d: canonical column %d = %v, nibabel %v", n, g, got, ref.Canonical[n])
				}
			}
		}
	}
	sorted := append([]float64(nil), vals...)
	sort.Float64s(sorted)
	for i, p := range ps {
		if got := stats.Quantile(sorted, p/100); math.Abs(got-ref.Percentiles[i]) > 1e-12 {
			t.Errorf("percentile %g = %v, numpy %v", p, got, ref.Percentiles[i])
		}
	}
}

// randomAffine is a random rotation (up to ~40°) of a random permutation and
// flip, with random spacing and origin.
func randomAffine(rng *rand.Rand) volume.Affine {
	perm := rng.Perm(3)
	a := volume.Identity()
	for c := 0; c < 3; c++ {
		for r := 0; r < 3; r++ {
			a[r][c] = 0
		}
		s := 0.5 + 3*rng.Float64()
		if rng.IntN(2) == 0 {
			s = -s
		}
		a[perm[c]][c] = s
		a[c][3] = rng.NormFloat64() * 50
	}
	ang := (rng.Float64() - 0.5) * 1.4
	cs, sn := math.Cos(ang), math.Sin(ang)
	rot := volume.Identity()
	rot[0][0], rot[0][1], rot[1][0], rot[1][1] = cs, -sn, sn, cs
	return rot.Mul(a)
}

// Block means skip non-finite voxels and keep the exact block-centre affine.
func TestBlockMeanNonFinite(t *testing.T) {
	v, _ := volume.New([3]int{4, 2, 2}, volume.Diag([3]float64{1, 1, 1}, [3]float64{10, 20, 30}))
	for i := range v.Data {
		v.Data[i] = float32(i)
	}
	v.Data[0] = float32(math.NaN())
	v.Data[1] = float32(math.Inf(1))
	b := BlockMean(v, [3]int{2, 2, 2})
	// block 0 holds voxels 0,1,4,5,8,9,12,13 (offset i + 4·(j + 2·k)); 0 and 1 are dropped
	if want := float32(4+5+8+9+12+13) / 6; b.Data[0] != want {
		t.Errorf("block 0 = %v, want %v", b.Data[0], want)
	}
	if want := float32(2+3+6+7+10+11+14+15) / 8; b.Data[1] != want {
		t.Errorf("block 1 = %v, want %v", b.Data[1], want)
	}
	// new voxel 0 is centred on old voxel (0.5, 0.5, 0.5)
	if p := b.Affine.Apply([3]float64{0, 0, 0}); p != [3]float64{10.5, 20.5, 30.5} {
		t.Errorf("block centre %v", p)
	}
}

// Blocks of one voxel leave a finite scan as it is (no copy) and replace
// non-finite voxels in a copy, leaving the scan untouched.
func TestBlockMeanOneVoxel(t *testing.T) {
	v, _ := volume.New([3]int{3, 2, 2}, volume.Diag([3]float64{1, 1, 1}, [3]float64{0, 0, 0}))
	for i := range v.Data {
		v.Data[i] = float32(i) + 0.5
	}
	if b := BlockMean(v, [3]int{1, 1, 1}); b != v {
		t.Error("finite scan: BlockMean copied it")
	}
	v.Data[4] = float32(math.NaN())
	b := BlockMean(v, [3]int{1, 1, 1})
	if b == v || b.Data[4] != 0 || b.Data[5] != 5.5 || !math.IsNaN(float64(v.Data[4])) {
		t.Errorf("scan with a NaN: copy %v, voxel 4 %v, 5 %v; original voxel 4 %v", b != v, b.Data[4], b.Data[5], v.Data[4])
	}
	if b.Affine != v.Affine {
		t.Errorf("affine changed: %v", b.Affine)
	}
}

// headStats (integer raw moments, summed per slice on all cores) agrees with
// the textbook two-pass computation: the centre exactly (both sum integer
// voxel indices exactly), extent and skewness to 1e-9 relative.
func TestHeadStatsMatchesTwoPass(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	v, _ := volume.New([3]int{37, 29, 23}, volume.Diag([3]float64{1.1, 0.9, 1.3}, [3]float64{-20, -13, -15}))
	for k := 0; k < 23; k++ {
		for j := 0; j < 29; j++ {
			for i := 0; i < 37; i++ {
				x, y, z := float64(i-15)/14, float64(j-13)/12, float64(k-9)/10
				if x*x+y*y+z*z*(1+0.5*z) < 1 {
					v.Data[v.Index(i, j, k)] = float32(100 + 10*rng.NormFloat64())
				}
			}
		}
	}
	fr, err := canonicalFrame(v.Affine)
	if err != nil {
		t.Fatal(err)
	}
	h, err := headStats(v, fr, 50)
	if err != nil {
		t.Fatal(err)
	}
	var n float64
	var s1, m2, m3 [3]float64
	var pts [][3]float64
	for k := 0; k < 23; k++ {
		for j := 0; j < 29; j++ {
			for i := 0; i < 37; i++ {
				if v.Data[v.Index(i, j, k)] > 50 {
					p := [3]float64{float64(i), float64(j), float64(k)}
					pts = append(pts, p)
					n++
					for a := range s1 {
						s1[a] += p[a]
					}
				}
			}
		}
	}
	mean := [3]float64{s1[0] / n, s1[1] / n, s1[2] / n}
	for _, p := range pts {
		for a := range p {
			d := p[a] - mean[a]
			m2[a] += d * d
			m3[a] += d * d * d
		}
	}
	if c := v.Affine.Apply(mean); c != h.Centre {
		t.Errorf("centre %v, two-pass %v", h.Centre, c)
	}
	sp := v.Spacing()
	for a := 0; a < 3; a++ {
		sd := math.Sqrt(m2[a] / n)
		if got, want := h.ExtentMm[a], sd*sp[a]; math.Abs(got-want) > 1e-9*want {
			t.Errorf("axis %d extent %v, two-pass %v", a, got, want)
		}
		if got, want := h.Skewness[a], m3[a]/n/(sd*sd*sd); math.Abs(got-want) > 1e-9*(1+math.Abs(want)) {
			t.Errorf("axis %d skewness %v, two-pass %v", a, got, want)
		}
	}
	if h.Skewness[2] == 0 {
		t.Error("the test head is asymmetric along S; skewness 0")
	}
}
