package inference

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

// testPreprocessing is a small grid for tests.
func testPreprocessing() Preprocessing {
	return Preprocessing{
		Orientation: "RAS", SpacingMm: [3]float64{4, 4, 4}, Shape: [3]int{16, 16, 16},
		Crop: "head-centre", Antialias: "block-mean", Interpolation: "trilinear",
		HeadMask:  HeadMask{Method: "percentile-fraction", LowPercentile: 1, HighPercentile: 99, Fraction: 0.1},
		Intensity: Intensity{Method: NormZScoreHead},
	}
}

// ellipsoidHead makes a 1 mm RAS volume with a bright ellipsoid "head"
// (semi-axes in mm) centred at centre (RAS mm), with inner structure so that
// orientation matters, and background 0.
func ellipsoidHead(dims [3]int, centre, semi [3]float64) *volume.Volume {
	a := volume.Diag([3]float64{1, 1, 1}, [3]float64{-float64(dims[0]) / 2, -float64(dims[1]) / 2, -float64(dims[2]) / 2})
	v, _ := volume.New(dims, a)
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
				r := 0.0
				for c := 0; c < 3; c++ {
					d := (p[c] - centre[c]) / semi[c]
					r += d * d
				}
				if r <= 1 {
					// brighter towards anterior-superior-right so that flips change the image
					v.Data[v.Index(i, j, k)] = float32(100 + 30*(p[0]-centre[0])/semi[0] + 20*(p[1]-centre[1])/semi[1] + 10*(p[2]-centre[2])/semi[2])
				}
			}
		}
	}
	return v
}

// permuteVolume stores the same image with voxel axes permuted and flipped:
// new axis a is old axis perm[a], reversed when flip[a].
func permuteVolume(v *volume.Volume, perm [3]int, flip [3]bool) *volume.Volume {
	var nd [3]int
	for a := 0; a < 3; a++ {
		nd[a] = v.Dims[perm[a]]
	}
	// new index n -> old index o: o[perm[a]] = flip? nd[a]-1-n[a] : n[a]
	var m volume.Affine // new voxel -> old voxel
	m[3][3] = 1
	for a := 0; a < 3; a++ {
		if flip[a] {
			m[perm[a]][a] = -1
			m[perm[a]][3] = float64(nd[a] - 1)
		} else {
			m[perm[a]][a] = 1
		}
	}
	out, _ := volume.New(nd, v.Affine.Mul(m))
	for k := 0; k < nd[2]; k++ {
		for j := 0; j < nd[1]; j++ {
			for i := 0; i < nd[0]; i++ {
				o := m.Apply([3]float64{float64(i), float64(j), float64(k)})
				out.Data[out.Index(i, j, k)] = v.At(int(o[0]), int(o[1]), int(o[2]))
			}
		}
	}
	return out
}

// The same head stored in different voxel orders (RAS, LPS-like flips,
// permuted axes) must give the same model tensor: reorientation to the
// closest canonical RAS frame undoes storage order (NIfTI-1 qform/sform
// semantics: the affine, not the array order, defines anatomy).
func TestPreprocessInvariantToStorageOrder(t *testing.T) {
	base := ellipsoidHead([3]int{60, 72, 56}, [3]float64{3, -5, 2}, [3]float64{20, 26, 18})
	p := testPreprocessing()
	refPr, err := Prepare(base, p)
	if err != nil {
		t.Fatal(err)
	}
	ref := refPr.Tensor
	cases := []struct {
		perm [3]int
		flip [3]bool
	}{
		{[3]int{0, 1, 2}, [3]bool{true, true, false}}, // LPS
		{[3]int{2, 0, 1}, [3]bool{false, true, true}},
		{[3]int{1, 2, 0}, [3]bool{true, false, true}},
	}
	for _, c := range cases {
		v := permuteVolume(base, c.perm, c.flip)
		pr, err := Prepare(v, p)
		if err != nil {
			t.Fatal(err)
		}
		got, tr := pr.Tensor, pr.Transform
		for a := 0; a < 3; a++ {
			if math.Abs(pr.Head.Skewness[a]-refPr.Head.Skewness[a]) > 1e-9 || math.Abs(pr.Head.ExtentMm[a]-refPr.Head.ExtentMm[a]) > 1e-9 {
				t.Errorf("perm %v flip %v: head skewness %v / extent %v, RAS-stored %v / %v", c.perm, c.flip,
					pr.Head.Skewness, pr.Head.ExtentMm, refPr.Head.Skewness, refPr.Head.ExtentMm)
			}
		}
		maxd := 0.0
		for i := range got.Data {
			maxd = math.Max(maxd, math.Abs(float64(got.Data[i]-ref.Data[i])))
		}
		if maxd > 1e-4 {
			t.Errorf("perm %v flip %v (%s): tensor differs from the RAS-stored one by %g", c.perm, c.flip, v.Affine.Orientation(), maxd)
		}
		checkTransformConsistent(t, tr)
	}
}

// Flipping the voxels head to foot while keeping the affine (a wrong
// orientation header) flips the sign of the head mask's S skewness.
func TestHeadSkewnessFlipsWithData(t *testing.T) {
	// a head with a "neck": a narrow column below the ellipsoid
	v := ellipsoidHead([3]int{48, 48, 64}, [3]float64{0, 0, 6}, [3]float64{16, 18, 14})
	for k := 0; k < 20; k++ {
		for j := 20; j < 28; j++ {
			for i := 20; i < 28; i++ {
				v.Data[v.Index(i, j, k)] = 90
			}
		}
	}
	up, err := Prepare(v, testPreprocessing())
	if err != nil {
		t.Fatal(err)
	}
	f := v.Clone()
	for k := 0; k < 64; k++ {
		copy(f.Data[f.Index(0, 0, k):f.Index(0, 0, k)+48*48], v.Data[v.Index(0, 0, 63-k):v.Index(0, 0, 63-k)+48*48])
	}
	down, err := Prepare(f, testPreprocessing())
	if err != nil {
		t.Fatal(err)
	}
	if !(up.Head.Skewness[2] < -0.1) || math.Abs(up.Head.Skewness[2]+down.Head.Skewness[2]) > 0.05 {
		t.Errorf("S skewness upright %v, flipped %v", up.Head.Skewness[2], down.Head.Skewness[2])
	}
}

// checkTransformConsistent: GridAffine = ScanAffine · GridToScan.
func checkTransformConsistent(t *testing.T, tr Transform) {
	t.Helper()
	m := tr.ScanAffine.Mul(tr.GridToScan)
	for r := 0; r < 4; r++ {
		for c := 0; c < 4; c++ {
			if math.Abs(m[r][c]-tr.GridAffine[r][c]) > 1e-9 {
				t.Fatalf("ScanAffine·GridToScan = %v, GridAffine = %v", m, tr.GridAffine)
			}
		}
	}
}

func TestPreprocessCentresHeadAndNormalises(t *testing.T) {
	centre := [3]float64{6, -4, 3}
	v := ellipsoidHead([3]int{64, 64, 64}, centre, [3]float64{18, 22, 16})
	pr, err := Prepare(v, testPreprocessing())
	if err != nil {
		t.Fatal(err)
	}
	// grid centre voxel maps to the head's centre of mass (within a voxel of the
	// true centre; the brightness ramp does not move the mask's centre)
	g := pr.Transform.GridAffine.Apply([3]float64{7.5, 7.5, 7.5})
	for a := 0; a < 3; a++ {
		if math.Abs(g[a]-centre[a]) > 1.5 {
			t.Errorf("grid centre %v, head centre %v", g, centre)
		}
	}
	// z-score over head voxels: mean 0, sd 1
	var s, s2, n float64
	for i, x := range pr.Tensor.Data {
		if pr.Tensor.HeadMask[i] {
			s += float64(x)
			s2 += float64(x) * float64(x)
			n++
		}
	}
	if m := s / n; math.Abs(m) > 1e-5 || math.Abs(s2/n-1) > 1e-4 {
		t.Errorf("head mean %g, mean square %g; want 0 and 1", m, s2/n)
	}
	// volume of the ellipsoid 4/3·π·abc in mL; 4 mm block means blur the edge
	// by about 2 mm, and the 10 % threshold counts the blurred rim (+36 % at most)
	want := 4.0 / 3 * math.Pi * 18 * 22 * 16 / 1000
	if r := pr.Head.VolumeMl / want; r < 0.95 || r > 1.36 {
		t.Errorf("head volume %.1f mL, ellipsoid %.1f mL", pr.Head.VolumeMl, want)
	}
	// inside-FOV fraction: count grid centres within half a voxel of the scan
	inside := 0
	for z := 0; z < 16; z++ {
		for y := 0; y < 16; y++ {
			for x := 0; x < 16; x++ {
				q := pr.Transform.GridToScan.Apply([3]float64{float64(x), float64(y), float64(z)})
				ok := true
				for a := 0; a < 3; a++ {
					ok = ok && q[a] >= -0.5 && q[a] <= 63.5
				}
				if ok {
					inside++
				}
			}
		}
	}
	if want := float64(inside) / 4096; math.Abs(pr.InsideFOV-want) > 0.02 {
		t.Errorf("inside FOV %g, counted %g", pr.InsideFOV, want)
	}
	if pr.Tensor.Shape[2] != 16 || len(pr.Tensor.Data) != 16*16*16 {
		t.Errorf("shape %v", pr.Tensor.Shape)
	}
}

func TestPreprocessRefusesBadInput(t *testing.T) {
	v, _ := volume.New([3]int{8, 8, 8}, volume.Identity())
	if _, _, err := Preprocess(v, testPreprocessing()); err == nil {
		t.Error("constant volume accepted")
	}
	v.Data = v.Data[:10]
	if _, _, err := Preprocess(v, testPreprocessing()); err == nil {
		t.Error("short data accepted")
	}
	w := ellipsoidHead([3]int{20, 20, 20}, [3]float64{}, [3]float64{5, 5, 5})
	w.Affine[0][0] = math.NaN()
	if _, _, err := Preprocess(w, testPreprocessing()); err == nil {
		t.Error("NaN affine accepted")
	}
	p := testPreprocessing()
	p.Shape[0] = 100000
	if _, _, err := Preprocess(ellipsoidHead([3]int{20, 20, 20}, [3]float64{}, [3]float64{5, 5, 5}), p); err == nil {
		t.Error("huge grid accepted")
	}
}

func TestLayoutNCXYZ(t *testing.T) {
	v := ellipsoidHead([3]int{40, 40, 40}, [3]float64{}, [3]float64{12, 14, 10})
	p := testPreprocessing()
	p.Shape = [3]int{8, 10, 12}
	a, _, err := Preprocess(v, p)
	if err != nil {
		t.Fatal(err)
	}
	b := a.ToLayout(LayoutNCXYZ)
	if b.Shape[2] != 8 || b.Shape[4] != 12 {
		t.Fatalf("NCXYZ shape %v", b.Shape)
	}
	for z := 0; z < 12; z++ {
		for x := 0; x < 8; x++ {
			// NCXYZ: z fastest; NCDHW: x fastest
			if b.Data[z+12*(3+10*x)] != a.Data[x+8*(3+10*z)] {
				t.Fatal("NCXYZ transpose wrong")
			}
		}
	}
	g := b.GridValues()
	for i := range g {
		if g[i] != a.Data[i] {
			t.Fatal("GridValues does not undo the layout")
		}
	}
}

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
	b := blockMean(v, [3]int{2, 2, 2})
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
	if b := blockMean(v, [3]int{1, 1, 1}); b != v {
		t.Error("finite scan: blockMean copied it")
	}
	v.Data[4] = float32(math.NaN())
	b := blockMean(v, [3]int{1, 1, 1})
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
