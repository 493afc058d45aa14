package viewer

import (
	"image"
	"image/color"
	"math"
	"testing"

	"brightfold/internal/volume"
)

// overlayFixture is a 1-slice scan of constant value 50 (grey 127 under
// window C 50.5 W 101 (0..100)) and an overlay holding vals along i.
func overlayFixture(t *testing.T, vals []float32) (*Scene, *OverlayMap, Frame) {
	t.Helper()
	a := volume.Identity()
	v := newVolume(t, [3]int{len(vals), 1, 1}, a, func(i, j, k int) float32 { return 50 })
	m := newVolume(t, v.Dims, a, func(i, j, k int) float32 { return vals[i] })
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	om, err := NewOverlayMap(s, m, "a.u.")
	if err != nil {
		t.Fatal(err)
	}
	// Neurological axial: pixel x shows voxel i = x.
	return s, om, s.Frame(Axial, s.Center(), Neurological, 0)
}

func greyWindow() Window { return Window{Center: 50.5, Width: 101} }

func TestOverlayThresholdPositiveOnly(t *testing.T) {
	nan := float32(math.NaN())
	vals := []float32{-3, -1, 0, 0.5, 1, 1.5, 2, 4, nan, float32(math.Inf(1))}
	s, om, f := overlayFixture(t, vals)
	grey := greyWindow().Gray(50)
	img, err := s.Render(f, Layers{Window: greyWindow(), Overlay: om,
		Style: OverlayStyle{Opacity: 1, Threshold: Threshold{Value: 1}, Range: 2}})
	if err != nil {
		t.Fatal(err)
	}
	cm := Ember()
	for x, v := range vals {
		got := img.RGBAAt(x, 0)
		// Positive only: drawn when v > threshold (strictly) and finite;
		// colour entry round(min(1, v/Range)·255).
		shown := v > 1 && !math.IsInf(float64(v), 0)
		want := color.RGBA{R: grey, G: grey, B: grey, A: 255}
		if shown {
			want = cm.Entry(int(math.Min(1, float64(v)/2)*255 + 0.5))
		}
		if got != want {
			t.Errorf("value %v: pixel %v, want %v (shown %v)", v, got, want, shown)
		}
	}
}

func TestOverlayThresholdSigned(t *testing.T) {
	vals := []float32{-3, -1.5, -1, -0.2, 0, 0.2, 1, 1.5, 3}
	s, om, f := overlayFixture(t, vals)
	if !om.HasNegative() || om.MaxAbs() != 3 {
		t.Fatalf("map stats: negative %v max %v", om.HasNegative(), om.MaxAbs())
	}
	img, err := s.Render(f, Layers{Window: greyWindow(), Overlay: om,
		Style: OverlayStyle{Opacity: 1, Threshold: Threshold{Value: 1}, Signed: true}})
	if err != nil {
		t.Fatal(err)
	}
	cm := Tide()
	mid := cm.Len() / 2
	grey := greyWindow().Gray(50)
	for x, v := range vals {
		got := img.RGBAAt(x, 0)
		shown := math.Abs(float64(v)) > 1 // |v| above the threshold, either sign
		want := color.RGBA{R: grey, G: grey, B: grey, A: 255}
		if shown {
			// Range 0 means the map's max |value| (3); mirrored entries for ±v,
			// opacity growing with the distance k from the neutral centre.
			k := int(math.Min(1, math.Abs(float64(v))/3)*float64(mid) + 0.5)
			a := 256 * k / mid
			if v < 0 {
				k = -k
			}
			c := cm.Entry(mid + k)
			mix := func(ch uint8) uint8 { return uint8((int(grey)*(256-a) + int(ch)*a) >> 8) }
			want = color.RGBA{R: mix(c.R), G: mix(c.G), B: mix(c.B), A: 255}
		}
		if got != want {
			t.Errorf("value %v: pixel %v, want %v (shown %v)", v, got, want, shown)
		}
	}
	// Symmetry: -1.5 and 1.5 get colours of equal lightness and different hue.
	l, r := img.RGBAAt(1, 0), img.RGBAAt(7, 0)
	if math.Abs(lightness8(l)-lightness8(r)) > 0.75 || l == r {
		t.Errorf("±1.5: %v (L* %.2f) and %v (L* %.2f)", l, lightness8(l), r, lightness8(r))
	}
}

func TestOverlayPercentileThreshold(t *testing.T) {
	// Magnitudes 1..100 plus zeros (left out of the distribution): the 90th
	// percentile by type 7 is 90 + 0.1·(91 - 90) = 90.1, so 91..100 show.
	vals := make([]float32, 0, 130)
	for i := 1; i <= 100; i++ {
		vals = append(vals, float32(i))
	}
	vals = append(vals, make([]float32, 30)...)
	s, om, f := overlayFixture(t, vals)
	thr := om.Resolve(Threshold{Value: 90, Percentile: true})
	if math.Abs(thr-90.1) > 1e-9 {
		t.Fatalf("90th percentile of |v|: %v, want 90.1", thr)
	}
	if got := om.VisibleShare(thr); got != 10 {
		t.Errorf("visible share %v %%, want 10", got)
	}
	img, err := s.Render(f, Layers{Window: greyWindow(), Overlay: om,
		Style: OverlayStyle{Opacity: 1, Threshold: Threshold{Value: 90, Percentile: true}}})
	if err != nil {
		t.Fatal(err)
	}
	grey := greyWindow().Gray(50)
	shown := 0
	for x := range vals {
		if c := img.RGBAAt(x, 0); c != (color.RGBA{R: grey, G: grey, B: grey, A: 255}) {
			shown++
			if vals[x] < 91 {
				t.Errorf("value %v shown below the threshold", vals[x])
			}
		}
	}
	if shown != 10 {
		t.Errorf("%d voxels shown, want 10", shown)
	}
	// An absolute threshold is a magnitude: -5 means 5.
	if om.Resolve(Threshold{Value: -5}) != 5 {
		t.Errorf("negative absolute threshold not taken as a magnitude")
	}
}

func TestOverlayOpacityBlend(t *testing.T) {
	s, om, f := overlayFixture(t, []float32{0, 2})
	img, err := s.Render(f, Layers{Window: greyWindow(), Overlay: om, Style: OverlayStyle{Opacity: 0.5}})
	if err != nil {
		t.Fatal(err)
	}
	g := int(greyWindow().Gray(50))
	c := Ember().Entry(255)
	// Our blend: out = (grey·(256 - a) + colour·a) / 256 with a = 128.
	want := color.RGBA{R: uint8((g*128 + int(c.R)*128) >> 8), G: uint8((g*128 + int(c.G)*128) >> 8), B: uint8((g*128 + int(c.B)*128) >> 8), A: 255}
	if got := img.RGBAAt(1, 0); got != want {
		t.Errorf("half opacity: %v, want %v", got, want)
	}
	img, _ = s.Render(f, Layers{Window: greyWindow(), Overlay: om, Style: OverlayStyle{Opacity: 0}})
	if got := img.RGBAAt(1, 0); got.R != uint8(g) || got.G != uint8(g) {
		t.Errorf("zero opacity changed the scan: %v", got)
	}
}

func TestOverlayRefusals(t *testing.T) {
	s, om, f := overlayFixture(t, []float32{1, 2, 3})
	if _, err := s.Render(f, Layers{Overlay: om, Style: OverlayStyle{Colormap: Tide()}}); err == nil {
		t.Errorf("diverging map accepted for positive-only display")
	}
	if _, err := s.Render(f, Layers{Overlay: om, Style: OverlayStyle{Colormap: Ember(), Signed: true}}); err == nil {
		t.Errorf("sequential map accepted for signed display")
	}
	other := newVolume(t, [3]int{3, 2, 1}, volume.Identity(), code)
	if _, err := NewOverlayMap(s, other, ""); err == nil {
		t.Errorf("overlay on another grid accepted")
	}
	shifted := newVolume(t, [3]int{3, 1, 1}, volume.Diag([3]float64{1, 1, 1}, [3]float64{0.5, 0, 0}), code)
	if _, err := NewOverlayMap(s, shifted, ""); err == nil {
		t.Errorf("overlay with another affine accepted")
	}
	if err := s.RenderInto(image.NewRGBA(image.Rect(0, 0, 2, 2)), f, Layers{}); err == nil {
		t.Errorf("wrong-size target accepted")
	}
}

func TestRenderMatchesWindowedSample(t *testing.T) {
	// Without an overlay, every pixel is the window's grey of the sampled value.
	v := headPhantom(t, [3]int{20, 24, 18}, [3]float64{8, 8, 8})
	s, _ := NewScene(v)
	w := s.DefaultWindow()
	for _, pl := range Planes() {
		for _, interp := range []Interp{Nearest, Linear} {
			f := s.Frame(pl, s.Center(), Radiological, 3)
			img, err := s.Render(f, Layers{Window: w, Interp: interp})
			if err != nil {
				t.Fatal(err)
			}
			vals := s.Sample(f, interp)
			for y := 0; y < f.Height; y++ {
				for x := 0; x < f.Width; x++ {
					g := w.Gray(float64(vals.At(x, y)))
					if c := img.RGBAAt(x, y); c != (color.RGBA{R: g, G: g, B: g, A: 255}) {
						t.Fatalf("%v %v (%d,%d): %v, want grey %d", pl, interp, x, y, c, g)
					}
				}
			}
		}
	}
}

func TestBlendRowMatchesEntry(t *testing.T) {
	// blendRow is entry() unrolled; both must pick the same colours.
	vals := lcg(4000, 3)
	for i := range vals {
		vals[i] = (vals[i] - 0.5) * 6
	}
	vals[5], vals[6], vals[7] = float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))
	vals[8], vals[9] = 0, 3 // exactly the range end
	_, om, _ := overlayFixture(t, vals)
	for _, st := range []OverlayStyle{
		{Opacity: 0.7, Threshold: Threshold{Value: 0.4}, Signed: true, Range: 3},
		{Opacity: 1, Threshold: Threshold{Value: 60, Percentile: true}, Signed: true},
		{Opacity: 0.3, Threshold: Threshold{Value: 1}, Range: 2.5},
		{Opacity: 0.5},
	} {
		p, err := st.resolve(om)
		if err != nil {
			t.Fatal(err)
		}
		px := make([]uint8, 4*len(vals))
		for i := range px {
			px[i] = 100
		}
		blendRow(px, vals, &p)
		for x, v := range vals {
			want := [3]uint8{100, 100, 100}
			if i, ok := p.entry(v); ok {
				c := p.cm.Entry(i)
				a := p.alphaFor(i)
				want = [3]uint8{uint8((100*(256-a) + int(c.R)*a) >> 8), uint8((100*(256-a) + int(c.G)*a) >> 8), uint8((100*(256-a) + int(c.B)*a) >> 8)}
			}
			if got := [3]uint8{px[4*x], px[4*x+1], px[4*x+2]}; got != want {
				t.Fatalf("%+v value %v: %v, want %v", st, v, got, want)
			}
		}
	}
}
