package preprocess_test

import (
	"math"
	"testing"

	"brightfold/inference/internal/scantest"
	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
)

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
	base := scantest.EllipsoidHead([3]int{60, 72, 56}, [3]float64{3, -5, 2}, [3]float64{20, 26, 18})
	p := scantest.Spec()
	refPr, err := preprocess.Prepare(base, p)
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
		pr, err := preprocess.Prepare(v, p)
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
	v := scantest.EllipsoidHead([3]int{48, 48, 64}, [3]float64{0, 0, 6}, [3]float64{16, 18, 14})
	for k := 0; k < 20; k++ {
		for j := 20; j < 28; j++ {
			for i := 20; i < 28; i++ {
				v.Data[v.Index(i, j, k)] = 90
			}
		}
	}
	up, err := preprocess.Prepare(v, scantest.Spec())
	if err != nil {
		t.Fatal(err)
	}
	f := v.Clone()
	for k := 0; k < 64; k++ {
		copy(f.Data[f.Index(0, 0, k):f.Index(0, 0, k)+48*48], v.Data[v.Index(0, 0, 63-k):v.Index(0, 0, 63-k)+48*48])
	}
	down, err := preprocess.Prepare(f, scantest.Spec())
	if err != nil {
		t.Fatal(err)
	}
	if !(up.Head.Skewness[2] < -0.1) || math.Abs(up.Head.Skewness[2]+down.Head.Skewness[2]) > 0.05 {
		t.Errorf("S skewness upright %v, flipped %v", up.Head.Skewness[2], down.Head.Skewness[2])
	}
}

// checkTransformConsistent: GridAffine = ScanAffine · GridToScan.
func checkTransformConsistent(t *testing.T, tr preprocess.Transform) {
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
	v := scantest.EllipsoidHead([3]int{64, 64, 64}, centre, [3]float64{18, 22, 16})
	pr, err := preprocess.Prepare(v, scantest.Spec())
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
	if _, _, err := preprocess.Preprocess(v, scantest.Spec()); err == nil {
		t.Error("constant volume accepted")
	}
	v.Data = v.Data[:10]
	if _, _, err := preprocess.Preprocess(v, scantest.Spec()); err == nil {
		t.Error("short data accepted")
	}
	w := scantest.EllipsoidHead([3]int{20, 20, 20}, [3]float64{}, [3]float64{5, 5, 5})
	w.Affine[0][0] = math.NaN()
	if _, _, err := preprocess.Preprocess(w, scantest.Spec()); err == nil {
		t.Error("NaN affine accepted")
	}
	p := scantest.Spec()
	p.Shape[0] = 100000
	if _, _, err := preprocess.Preprocess(scantest.EllipsoidHead([3]int{20, 20, 20}, [3]float64{}, [3]float64{5, 5, 5}), p); err == nil {
		t.Error("huge grid accepted")
	}
}

func TestLayoutNCXYZ(t *testing.T) {
	v := scantest.EllipsoidHead([3]int{40, 40, 40}, [3]float64{}, [3]float64{12, 14, 10})
	p := scantest.Spec()
	p.Shape = [3]int{8, 10, 12}
	a, _, err := preprocess.Preprocess(v, p)
	if err != nil {
		t.Fatal(err)
	}
	b := a.ToLayout(preprocess.LayoutNCXYZ)
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
