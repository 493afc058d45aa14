package viewer

import (
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"math"
	"os"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/volume"
)

// blobMap is a signed test relevance map: a positive blob on the right, a
// negative one on the left-posterior side of the phantom.
func blobMap(t testing.TB, v *volume.Volume) *volume.Volume {
	return newVolume(t, v.Dims, v.Affine, func(i, j, k int) float32 {
		p := v.Affine.Apply([3]float64{float64(i), float64(j), float64(k)})
		d := (p[0]-20)*(p[0]-20) + (p[1]-10)*(p[1]-10) + (p[2]-15)*(p[2]-15)
		d2 := (p[0]+25)*(p[0]+25) + (p[1]+20)*(p[1]+20) + (p[2]-5)*(p[2]-5)
		return float32(2*math.Exp(-d/300) - 1.2*math.Exp(-d2/200))
	})
}

func TestMontage(t *testing.T) {
	v := headPhantom(t, [3]int{80, 96, 30}, [3]float64{2, 2, 5})
	s, err := NewScene(v)
	if err != nil {
		t.Fatal(err)
	}
	om, err := NewOverlayMap(s, blobMap(t, v), "relevance (a.u.)")
	if err != nil {
		t.Fatal(err)
	}
	for _, signed := range []bool{false, true} {
		img, err := Montage(s, MontageSpec{
			At: [3]float64{20, 10, 15}, Window: s.DefaultWindow(), Overlay: om,
			Style: OverlayStyle{Opacity: 0.6, Threshold: Threshold{Value: 80, Percentile: true}, Signed: signed},
			Title: []string{"HMRU-0001  T1-weighted phantom", "Relevance: integrated gradients"}, Crosshair: true,
		})
		if err != nil {
			t.Fatal(err)
		}
		checkNoticeBand(t, img.(*image.RGBA))
		// The planes share one scale: the tallest (axial, 192 mm A-P) is 320 px.
		if b := img.Bounds(); b.Dx() < montageMinW || b.Dy() < 320 {
			t.Errorf("montage %v too small", b)
		}
		if out := os.Getenv("VIEWER_LOOK"); out != "" { // for looking at by eye
			name := out + map[bool]string{false: "-positive.png", true: "-signed.png"}[signed]
			if f, err := os.Create(name); err == nil {
				png.Encode(f, img)
				f.Close()
			}
		}
	}
	// Without an overlay there is no colour bar but still the notice.
	img, err := Montage(s, MontageSpec{At: s.Center(), Window: s.DefaultWindow()})
	if err != nil {
		t.Fatal(err)
	}
	checkNoticeBand(t, img.(*image.RGBA))
}

// checkNoticeBand finds the notice band at the bottom of a montage and
// checks that it holds exactly the wrapped notice drawn at twice the font size.
func checkNoticeBand(t *testing.T, img *image.RGBA) {
	t.Helper()
	pal := montagePalette()
	b := img.Bounds()
	top := b.Max.Y - 1
	for top > 0 && img.RGBAAt(0, top-1) == pal.band {
		top--
	}
	lines := Wrap(notice.Full, b.Dx()-2*montageMargin, textScale)
	if got, want := b.Max.Y-top, len(lines)*LineHeight(textScale)+2*montageGap; got != want {
		t.Fatalf("notice band %d px high, want %d for %d lines", got, want, len(lines))
	}
	ref := image.NewRGBA(image.Rect(0, top, b.Dx(), b.Max.Y))
	draw.Draw(ref, ref.Bounds(), image.NewUniform(pal.band), image.Point{}, draw.Src)
	for i, l := range lines {
		DrawText(ref, image.Pt(montageMargin, top+montageGap+i*LineHeight(textScale)), l, pal.text, textScale)
	}
	for y := top; y < b.Max.Y; y++ {
		for x := 0; x < b.Dx(); x++ {
			if img.RGBAAt(x, y) != ref.RGBAAt(x, y) {
				t.Fatalf("notice band differs at (%d, %d)", x, y)
			}
		}
	}
	if _, h := TextSize("x", textScale); h < 24 {
		t.Errorf("notice text %d px high", h)
	}
	_ = color.RGBA{}
}
