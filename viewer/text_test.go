package viewer

import (
	"image"
	"image/color"
	"math"
	"strings"
	"testing"

	"brightfold/internal/notice"
)

func TestWrap(t *testing.T) {
	for _, width := range []int{70, 200, 700, 5000} {
		for _, scale := range []int{1, 2, 3} {
			lines := Wrap(notice.Full, width, scale)
			if w, _ := TextSize("regulations.", scale); w <= width && strings.Join(lines, " ") != notice.Full {
				t.Errorf("width %d scale %d: words lost or changed: %q", width, scale, lines)
			}
			for _, l := range lines {
				if w, _ := TextSize(l, scale); w > max(width, glyphWidth*scale) {
					t.Errorf("width %d scale %d: line %q is %d px", width, scale, l, w)
				}
			}
		}
	}
	if got := Wrap("abcdefghij", 28, 1); strings.Join(got, "|") != "abcd|efgh|ij" {
		t.Errorf("long word: %q", got)
	}
}

func TestDrawTextScalesGlyphs(t *testing.T) {
	// At scale 3 each font pixel becomes a 3×3 block of the same coverage.
	one := image.NewRGBA(image.Rect(0, 0, 40, 20))
	three := image.NewRGBA(image.Rect(0, 0, 120, 60))
	white := color.RGBA{R: 255, G: 255, B: 255, A: 255}
	DrawText(one, image.Pt(0, 0), "R5", white, 1)
	DrawText(three, image.Pt(0, 0), "R5", white, 3)
	lit := 0
	for y := 0; y < 13; y++ {
		for x := 0; x < 14; x++ {
			c := one.RGBAAt(x, y)
			if c.A > 0 {
				lit++
			}
			for dy := 0; dy < 3; dy++ {
				for dx := 0; dx < 3; dx++ {
					if three.RGBAAt(3*x+dx, 3*y+dy) != c {
						t.Fatalf("pixel (%d,%d) not scaled", x, y)
					}
				}
			}
		}
	}
	if lit < 20 {
		t.Errorf("only %d pixels drawn for \"R5\"", lit)
	}
	if w, h := TextSize("R5", 3); w != 42 || h != 39 {
		t.Errorf("TextSize %d×%d", w, h)
	}
}

func TestNiceTicks(t *testing.T) {
	// Heckbert's nice numbers: steps 1, 2 or 5 × 10^k, ticks inside the range.
	cases := []struct {
		lo, hi float64
		want   []float64
	}{
		{0, 1.97, []float64{0, 0.5, 1, 1.5}},
		{-2, 2, []float64{-2, -1, 0, 1, 2}},
		{0, 0.0173, []float64{0, 0.005, 0.01, 0.015}},
		{0, 100, []float64{0, 20, 40, 60, 80, 100}},
	}
	for _, c := range cases {
		got := niceTicks(c.lo, c.hi, 5)
		if len(got) != len(c.want) {
			t.Errorf("[%v, %v]: %v, want %v", c.lo, c.hi, got, c.want)
			continue
		}
		for i := range got {
			if math.Abs(got[i]-c.want[i]) > 1e-12 {
				t.Errorf("[%v, %v]: %v, want %v", c.lo, c.hi, got, c.want)
			}
		}
	}
}

func TestColorBar(t *testing.T) {
	cm := Ember()
	bg := color.RGBA{R: 10, G: 10, B: 10, A: 255}
	bar, err := ColorBar(ColorBarSpec{Colormap: cm, Min: 0, Max: 2, Threshold: 0.5, Units: "a.u.", Length: 201, Background: bg})
	if err != nil {
		t.Fatal(err)
	}
	// Find the bar's left end: the first column of the top row that is not background.
	x0 := 0
	for bar.RGBAAt(x0, 0) == bg {
		x0++
	}
	// Above the threshold the bar shows the colour map itself at t = x/200;
	// at and below it the colours are dimmed towards the background.
	for x := 0; x <= 200; x++ {
		v := 2 * float64(x) / 200
		got := bar.RGBAAt(x0+x, 1)
		want := cm.At(v / 2)
		switch {
		case v > 0.5 && got != want && x != 50:
			t.Fatalf("bar at value %v: %v, want %v", v, got, want)
		case v < 0.5 && got != mix(want, bg, 0.7):
			t.Fatalf("hidden part at value %v: %v, want dimmed", v, got)
		}
	}
	if c := bar.RGBAAt(x0+50, 1); c != (color.RGBA{R: 255, G: 255, B: 255, A: 255}) {
		t.Errorf("threshold mark at 0.5: %v", c)
	}
	if _, err := ColorBar(ColorBarSpec{Colormap: cm, Min: 1, Max: 1}); err == nil {
		t.Errorf("empty range accepted")
	}
	if _, err := ColorBar(ColorBarSpec{Min: 0, Max: 1}); err == nil {
		t.Errorf("missing colour map accepted")
	}
}
