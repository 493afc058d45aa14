package phantom

import (
	"math"
	"slices"
	"sort"
	"testing"
)

func median(x []float64) float64 {
	s := slices.Clone(x)
	sort.Float64s(s)
	return s[len(s)/2]
}

func valuesOf(c *Case, t Tissue) []float64 {
	var v []float64
	for i, l := range c.Labels {
		if l == t {
			v = append(v, float64(c.Volume.Data[i]))
		}
	}
	return v
}

// TestShiftCT checks Hounsfield units: by the definition of the scale air is
// −1000 HU and water 0 HU; cortical bone is far above soft tissue (about
// +1000 HU, common knowledge), CSF close to water.
func TestShiftCT(t *testing.T) {
	c := gen(t, 1, 0, Options{Shift: ShiftCT, VoxelMM: 1})
	if c.Volume.Meta.Modality != "CT" {
		t.Errorf("modality %q", c.Volume.Meta.Modality)
	}
	if a := median(valuesOf(c, Air)); math.Abs(a+1000) > 10 {
		t.Errorf("air median %g HU, want −1000", a)
	}
	if v := median(valuesOf(c, Ventricle)); v < -5 || v > 20 {
		t.Errorf("ventricular CSF median %g HU, want near water (0–15)", v)
	}
	g, w := median(valuesOf(c, GM)), median(valuesOf(c, WM))
	if !(g > w && w > 15 && g < 50) {
		t.Errorf("grey %g, white %g HU; want 25–45 with grey above white", g, w)
	}
	if _, mx, _ := c.Volume.Stats(); mx < 800 {
		t.Errorf("max %g HU: no bone", mx)
	}
}

func TestShiftT2(t *testing.T) {
	c := gen(t, 1, 0, Options{Shift: ShiftT2, VoxelMM: 2})
	if !(median(valuesOf(c, Ventricle)) > 1.5*median(valuesOf(c, WM))) {
		t.Error("T2: CSF not bright")
	}
	if c.Volume.Meta.EchoTimeMs < 50 {
		t.Errorf("T2 echo time %g ms", c.Volume.Meta.EchoTimeMs)
	}
}

func TestShiftThick(t *testing.T) {
	c := gen(t, 1, 0, Options{Shift: ShiftThick, VoxelMM: 2})
	sp := c.Volume.Spacing()
	if sp[2] != ThickSliceMM || sp[0] != 2 || c.Volume.Meta.SliceThicknessMm != ThickSliceMM {
		t.Errorf("spacing %v, slice thickness %g", sp, c.Volume.Meta.SliceThicknessMm)
	}
	if c.Volume.Dims[2] != int(math.Round(FieldOfViewMM()[2]/ThickSliceMM)) {
		t.Errorf("dims %v", c.Volume.Dims)
	}
	full := gen(t, 1, 0, Options{Shift: ShiftThick, VoxelMM: 1})
	if s := full.Volume.Spacing(); s != [3]float64{1, 1, 6} {
		t.Errorf("full-size thick spacing %v, want 1×1×6", s)
	}
}

func TestShiftCropped(t *testing.T) {
	c := gen(t, 1, 0, Options{Shift: ShiftCropped})
	n := gen(t, 1, 0, Options{})
	if c.Volume.Dims[2] >= n.Volume.Dims[2] || c.Volume.Affine != n.Volume.Affine {
		t.Fatalf("cropped dims %v affine %v vs %v %v", c.Volume.Dims, c.Volume.Affine, n.Volume.Dims, n.Volume.Affine)
	}
	// The top slice cuts through the head: the head is partly missing.
	nx, ny, nz := c.Volume.Dims[0], c.Volume.Dims[1], c.Volume.Dims[2]
	brain := 0
	for _, l := range c.Labels[(nz-1)*nx*ny:] {
		if l == GM || l == WM {
			brain++
		}
	}
	if brain == 0 {
		t.Error("the top slice of the cropped case holds no brain")
	}
}

func TestShiftFlipped(t *testing.T) {
	f := gen(t, 1, 2, Options{Shift: ShiftFlipped})
	n := gen(t, 1, 2, Options{})
	if f.Volume.Affine != n.Volume.Affine {
		t.Fatal("flipped case has a different affine")
	}
	v := n.Volume
	for k := 0; k < v.Dims[2]; k++ {
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				if f.Volume.At(i, j, k) != v.At(i, j, v.Dims[2]-1-k) {
					t.Fatalf("voxel (%d,%d,%d) is not the head-to-foot mirror", i, j, k)
				}
			}
		}
	}
}

// noiseSD estimates the noise from the air in a corner of the field of
// view, where Rician noise on zero signal is Rayleigh distributed with mean
// σ·sqrt(π/2) (Gudbjartsson & Patz 1995).
func noiseSD(c *Case) float64 {
	v := c.Volume
	var s float64
	n := 0
	for k := 0; k < v.Dims[2]; k++ {
		for j := 0; j < 3; j++ {
			for i := 0; i < 3; i++ {
				s += float64(v.At(i, j, k))
				n++
			}
		}
	}
	return s / float64(n) / math.Sqrt(math.Pi/2)
}

func TestShiftNoisy(t *testing.T) {
	a := gen(t, 1, 0, Options{})
	b := gen(t, 1, 0, Options{Shift: ShiftNoisy})
	if ra := noiseSD(b) / noiseSD(a); ra < 6 {
		t.Errorf("noise ratio %.1f, want about 8", ra)
	}
	want := sites[a.Subject.Site].noise * sites[a.Subject.Site].scale * a.Subject.draw.gain
	if got := noiseSD(a); math.Abs(got/want-1) > 0.1 {
		t.Errorf("air noise s.d. %.1f, site's σ %.1f", got, want)
	}
}

func TestShiftChild(t *testing.T) {
	for idx := 0; idx < 2; idx++ {
		c := gen(t, 1, idx, Options{Shift: ShiftChild})
		a := gen(t, 1, idx, Options{})
		if c.Subject.Label != 0 || c.Subject.Age > 12 {
			t.Errorf("child: label %d age %g", c.Subject.Label, c.Subject.Age)
		}
		brain := func(x *Case) float64 { return x.VolumesML[GM] + x.VolumesML[WM] }
		if r := brain(c) / brain(a); r > 0.7 {
			t.Errorf("child brain %.0f ml is %.2f of the adult's", brain(c), r)
		}
	}
}
