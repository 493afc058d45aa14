package phantom

import (
	"math"
	"slices"
	"testing"
)

// testVoxel is the coarse voxel size that keeps these tests fast; the
// anatomy is defined in millimetres, so it is the same head.
const testVoxel = 4.0

func gen(t *testing.T, seed uint64, index int, o Options) *Case {
	t.Helper()
	if o.VoxelMM == 0 {
		o.VoxelMM = testVoxel
	}
	c, err := Generate(seed, index, o)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func TestDeterministic(t *testing.T) {
	a := gen(t, 11, 3, Options{Workers: 1})
	b := gen(t, 11, 3, Options{Workers: 3})
	if !slices.Equal(a.Volume.Data, b.Volume.Data) || !slices.Equal(a.Mask.Data, b.Mask.Data) || !slices.Equal(a.Labels, b.Labels) {
		t.Fatal("same seed and index gave different voxels (workers 1 vs 3)")
	}
	if a.Subject.Age != b.Subject.Age || a.Subject.Site != b.Subject.Site {
		t.Fatal("same seed and index gave different covariates")
	}
	c := gen(t, 12, 3, Options{})
	if slices.Equal(a.Volume.Data, c.Volume.Data) {
		t.Fatal("different seeds gave the same voxels")
	}
	// A case does not depend on which other cases exist: the listing of a
	// large cohort holds the same subject as generating it alone.
	big := Cohort(11, 50, true)
	if big[3].Age != a.Subject.Age || big[3].Severity != a.Subject.Severity {
		t.Fatal("Cohort's subject 3 differs from Generate's")
	}
}

func TestBalancedLabels(t *testing.T) {
	subs := Cohort(5, 40, false)
	pos := 0
	for _, s := range subs {
		if s.Label == 1 {
			pos++
			if s.Severity <= 0 || s.Severity > 1 {
				t.Errorf("%s: severity %g outside (0, 1]", s.ID, s.Severity)
			}
		} else if s.Severity != 0 {
			t.Errorf("%s: negative case with severity %g", s.ID, s.Severity)
		}
		if s.Age < 55 || s.Age > 85 {
			t.Errorf("%s: age %g outside 55–85", s.ID, s.Age)
		}
		if _, ok := sites[s.Site]; !ok {
			t.Errorf("%s: unknown site %q", s.ID, s.Site)
		}
	}
	if pos != 20 {
		t.Errorf("%d of 40 cases positive, want exactly half", pos)
	}
	if subs[0].ID != "HMRU-0001" || subs[39].ID != "HMRU-0040" {
		t.Errorf("case codes %s..%s", subs[0].ID, subs[39].ID)
	}
}

// meanByTissue returns the mean intensity of the voxels of each tissue.
func meanByTissue(c *Case) map[Tissue]float64 {
	sum := map[Tissue]float64{}
	n := map[Tissue]int{}
	for i, t := range c.Labels {
		sum[t] += float64(c.Volume.Data[i])
		n[t]++
	}
	for t := range sum {
		sum[t] /= float64(n[t])
	}
	return sum
}

// The expected orderings come from the MR signal equations with typical
// relaxation times of brain tissue at 3 T (from memory: T1 about 0.85 s in
// white matter, 1.35 s in grey matter, 4 s in CSF; T2 about 75, 95 and
// 1500 ms): inversion recovery S ∝ PD·|1 − 2·exp(−TI/T1) + exp(−TR/T1)|,
// spin echo S ∝ PD·exp(−TE/T2)·(1 − exp(−TR/T1)). Computing them here, rather
// than asserting a remembered ordering, makes the check follow the physics.
func TestTissueOrdering(t *testing.T) {
	type tissue struct {
		t        Tissue
		pd       float64
		t1, t2ms float64
	}
	lit := []tissue{{WM, 0.69, 850, 75}, {GM, 0.80, 1350, 95}, {CSF, 1.0, 4000, 1500}}
	ir := func(x tissue, tr, ti float64) float64 {
		return x.pd * math.Abs(1-2*math.Exp(-ti/x.t1)+math.Exp(-tr/x.t1))
	}
	se := func(x tissue, tr, te float64) float64 {
		return x.pd * math.Exp(-te/x.t2ms) * (1 - math.Exp(-tr/x.t1))
	}
	for idx := 0; idx < 3; idx++ { // three cases, so three sites are likely covered
		c := gen(t, 2, idx, Options{VoxelMM: 2})
		m := meanByTissue(c)
		tr, ti := c.Volume.Meta.RepetitionTimeMs, c.Volume.Meta.InversionTimeMs
		for i := range lit {
			for j := range lit {
				want := ir(lit[i], tr, ti) > ir(lit[j], tr, ti)
				if got := m[lit[i].t] > m[lit[j].t]; got != want {
					t.Errorf("T1 %s: mean %s %.0f vs %s %.0f, signal equation says %v",
						c.Subject.Site, lit[i].t, m[lit[i].t], lit[j].t, m[lit[j].t], want)
				}
			}
		}
		if !(m[DeepGM] > m[GM] && m[DeepGM] < m[WM]) {
			t.Errorf("T1: deep grey matter %.0f not between GM %.0f and WM %.0f", m[DeepGM], m[GM], m[WM])
		}
	}
	c := gen(t, 2, 0, Options{VoxelMM: 2, Shift: ShiftT2})
	m := meanByTissue(c)
	tr, te := c.Volume.Meta.RepetitionTimeMs, c.Volume.Meta.EchoTimeMs
	for i := range lit {
		for j := range lit {
			want := se(lit[i], tr, te) > se(lit[j], tr, te)
			if got := m[lit[i].t] > m[lit[j].t]; got != want {
				t.Errorf("T2: mean %s %.0f vs %s %.0f, signal equation says %v", lit[i].t, m[lit[i].t], lit[j].t, m[lit[j].t], want)
			}
		}
	}
}

func TestMaskMatchesLabel(t *testing.T) {
	for idx := 0; idx < 4; idx++ {
		c := gen(t, 3, idx, Options{VoxelMM: 2})
		counts := map[float32]int{}
		for _, v := range c.Mask.Data {
			counts[v]++
		}
		changed := len(c.Mask.Data) - counts[0]
		if (changed > 0) != (c.Subject.Label == 1) {
			t.Errorf("%s label %d: %d changed voxels", c.Subject.ID, c.Subject.Label, changed)
		}
		if c.Subject.Label == 1 {
			for _, code := range []float32{float32(MaskVentricles), float32(MaskCortex), float32(MaskMedialTemporal)} {
				if counts[code] == 0 {
					t.Errorf("%s: no voxels with mask code %v", c.Subject.ID, code)
				}
			}
		}
	}
}

// TestMaskLocation checks that each changed voxel is where the pattern acts:
// ventricle codes on (enlarged) ventricles, medial temporal codes in the
// inferior medial temporal region, cortical codes in the cortex or its CSF,
// lateral and posterior (the temporal and parietal regions).
func TestMaskLocation(t *testing.T) {
	s := NewSubject(4, 0, ShiftNone).WithSeverity(1)
	c, err := Render(s, Options{VoxelMM: 2})
	if err != nil {
		t.Fatal(err)
	}
	v := c.Volume
	var ctxX, ctxN float64
	for k := 0; k < v.Dims[2]; k++ {
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				n := v.Index(i, j, k)
				code := uint8(c.Mask.Data[n])
				if code == 0 {
					continue
				}
				w := v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
				lab := c.Labels[n]
				switch code {
				case MaskVentricles:
					if lab != Ventricle || math.Abs(w[0]) > 40 {
						t.Fatalf("ventricle change at %v is %s", w, lab)
					}
				case MaskMedialTemporal:
					if lab != Ventricle || math.Abs(w[0]) < 8 || math.Abs(w[0]) > 45 || w[2] > 5 {
						t.Fatalf("medial temporal change at %v is %s", w, lab)
					}
				case MaskCortex:
					if lab != CSF && lab != GM {
						t.Fatalf("cortical change at %v is %s", w, lab)
					}
					if w[1] > 40 {
						t.Fatalf("cortical change in the frontal pole at %v", w)
					}
					ctxX += math.Abs(w[0])
					ctxN++
				default:
					t.Fatalf("mask code %d", code)
				}
			}
		}
	}
	if ctxN == 0 || ctxX/ctxN < 25 {
		t.Errorf("cortical changes: %g voxels, mean |x| %.1f mm, want lateral (> 25 mm)", ctxN, ctxX/ctxN)
	}
}

func TestPatternDirection(t *testing.T) {
	s := NewSubject(6, 1, ShiftNone)
	var prev *Case
	for _, sev := range []float64{0, 0.5, 1} {
		c, err := Render(s.WithSeverity(sev), Options{VoxelMM: 2})
		if err != nil {
			t.Fatal(err)
		}
		if prev != nil {
			p, q := prev.VolumesML, c.VolumesML
			if !(q[Ventricle] > p[Ventricle]) {
				t.Errorf("severity %g: ventricles %.1f ml not larger than %.1f", sev, q[Ventricle], p[Ventricle])
			}
			if !(q[Hippocampus]+q[Amygdala] < p[Hippocampus]+p[Amygdala]) {
				t.Errorf("severity %g: medial temporal %.2f ml not smaller than %.2f", sev,
					q[Hippocampus]+q[Amygdala], p[Hippocampus]+p[Amygdala])
			}
			if !(q[GM] < p[GM]) || !(q[CSF] > p[CSF]) {
				t.Errorf("severity %g: GM %.1f→%.1f, CSF %.1f→%.1f; want thinner cortex, more CSF", sev, p[GM], q[GM], p[CSF], q[CSF])
			}
		}
		prev = c
	}
	// Normal ageing acts in the same direction, more mildly.
	young, old := s.WithSeverity(0), s.WithSeverity(0)
	young.Age, old.Age = 55, 85
	cy, _ := Render(young, Options{VoxelMM: 2})
	co, _ := Render(old, Options{VoxelMM: 2})
	if !(co.VolumesML[Ventricle] > cy.VolumesML[Ventricle]) || !(co.VolumesML[Hippocampus] < cy.VolumesML[Hippocampus]) {
		t.Errorf("ageing 55→85: ventricles %.1f→%.1f ml, hippocampus %.2f→%.2f ml",
			cy.VolumesML[Ventricle], co.VolumesML[Ventricle], cy.VolumesML[Hippocampus], co.VolumesML[Hippocampus])
	}
	for _, m := range co.Mask.Data {
		if m != 0 {
			t.Fatal("ageing alone marked voxels in the mask")
		}
	}
}

func TestFullSizeGrid(t *testing.T) {
	g, err := gridFor(ShiftNone, 1)
	if err != nil {
		t.Fatal(err)
	}
	if g.dims != [3]int{160, 192, 160} {
		t.Errorf("default dims %v", g.dims)
	}
	// The affine is RAS with 1 mm voxels and maps the centre of the field of view to 0.
	c := g.affine.Apply([3]float64{79.5, 95.5, 79.5})
	if c != [3]float64{} || g.affine.Orientation() != "RAS" || g.affine.Spacing() != [3]float64{1, 1, 1} {
		t.Errorf("centre %v, orientation %s, spacing %v", c, g.affine.Orientation(), g.affine.Spacing())
	}
}

func TestRenderRejects(t *testing.T) {
	if _, err := Render(Subject{ID: "x"}, Options{}); err == nil {
		t.Error("a Subject not from NewSubject was rendered")
	}
	if _, err := Generate(1, 0, Options{VoxelMM: 0.1}); err == nil {
		t.Error("a 0.1 mm voxel size was accepted")
	}
	if _, err := Generate(1, -1, Options{}); err == nil {
		t.Error("a negative index was accepted")
	}
	if _, err := ParseShift("sideways"); err == nil {
		t.Error("an unknown shift was accepted")
	}
}

// TestFieldRow checks the rotation recurrence of fillRow against direct
// evaluation of the sum of sines.
func TestFieldRow(t *testing.T) {
	f := newField(newRand(1, 0, 99), 7, 15, 40)
	p0, dp := [3]float64{-80, 3, 12}, [3]float64{0.98, 0.1, -0.05}
	out := make([]float64, 150)
	f.steps(dp).fillRow(out, p0, 10)
	for i, v := range out {
		s := float64(10 + i)
		want := f.at([3]float64{p0[0] + s*dp[0], p0[1] + s*dp[1], p0[2] + s*dp[2]})
		if math.Abs(v-want) > 1e-9 {
			t.Fatalf("voxel %d: recurrence %v, direct %v", i, v, want)
		}
	}
}
