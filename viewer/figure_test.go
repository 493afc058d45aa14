package viewer

import (
	"image/color"
	"math"
	"testing"
)

// The head mask keeps the dark ventricles and the skull (no path of air
// reaches them from outside) and drops the air around the head; a
// DisplayMap is zero outside the mask and 100 at its strongest voxel inside.
func TestHeadMaskAndDisplayMap(t *testing.T) {
	v := headPhantom(t, [3]int{80, 96, 80}, [3]float64{2, 2, 2})
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	head := s.HeadMask()
	for _, c := range []struct {
		p    [3]float64
		want bool
		what string
	}{{[3]float64{-9, 5, 12}, true, "ventricle"}, {[3]float64{0, 0, -64}, true, "skull"}, {[3]float64{0, 0, 0}, true, "brain"},
		{[3]float64{-75, -90, -75}, false, "corner air"}, {[3]float64{0, 0, 76}, false, "air above the head"}} {
		ijk, _ := s.NearestVoxel(c.p)
		if got := head[v.Index(ijk[0], ijk[1], ijk[2])]; got != c.want {
			t.Errorf("%s at %v: in head %v, want %v", c.what, c.p, got, c.want)
		}
	}
	m := newVolume(t, v.Dims, v.Affine, func(i, j, k int) float32 { return float32(i + j + k) }) // largest in the corner air
	d := DisplayMap(m, head)
	peak := 0.0
	for i, x := range d.Data {
		if !head[i] && x != 0 {
			t.Fatalf("DisplayMap leaves %v outside the head at %d", x, i)
		}
		peak = math.Max(peak, float64(x))
	}
	if math.Abs(peak-100) > 1e-3 {
		t.Errorf("DisplayMap peak %v, want 100", peak)
	}
}

// The figure's strip cuts lie across the map's relevance: a map that is
// positive only in a slab 10 mm thick gives cuts inside that slab; without
// a map the strip is centred on At. The figure carries the notice band and
// the overlay colour.
func TestFigureStripFollowsTheMap(t *testing.T) {
	v := headPhantom(t, [3]int{80, 96, 80}, [3]float64{2, 2, 2})
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	slab := newVolume(t, v.Dims, v.Affine, func(i, j, k int) float32 {
		z := v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})[2]
		if z >= 20 && z <= 30 && v.At(i, j, k) > 500 {
			return 1
		}
		return 0
	})
	om, err := NewOverlayMap(s, slab, DisplayUnits)
	if err != nil {
		t.Fatal(err)
	}
	spec := FigureSpec{Plane: Axial, Overlay: om, Style: OverlayStyle{Opacity: 0.7}, Case: "Case 01", Model: "Model: test", Verdict: "In distribution", Headline: "0.82"}
	for _, c := range s.stripCuts(spec) {
		if c[2] < 19 || c[2] > 31 {
			t.Errorf("cut at z = %.1f mm, outside the relevant slab 20-30 mm", c[2])
		}
	}
	noMap := spec
	noMap.Overlay, noMap.At = nil, [3]float64{0, 0, -10}
	cuts := s.stripCuts(noMap)
	if mid := cuts[len(cuts)/2][2]; math.Abs(mid+10) > 2 {
		t.Errorf("without a map the strip is centred at z = %.1f, want -10", mid)
	}
	img, err := Figure(s, spec)
	if err != nil {
		t.Fatal(err)
	}
	if got := img.RGBAAt(2, 2); got != figChalk {
		t.Errorf("top-left pixel %v, want the notice band %v", got, figChalk)
	}
	coloured := 0
	for i := 0; i+3 < len(img.Pix); i += 4 {
		c := color.RGBA{img.Pix[i], img.Pix[i+1], img.Pix[i+2], 255}
		if c.R > c.B+60 && c.R > 120 && c != figOOD && c != figChalk {
			coloured++
		}
	}
	if coloured < 200 {
		t.Errorf("only %d overlay-coloured pixels in the figure", coloured)
	}
}
