package app

import (
	"flag"
	"image"
	"image/draw"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"testing"

	"fyne.io/fyne/v2"
)

var updateGolden = flag.Bool("update-golden", false, "rewrite the golden images in testdata/")

// capture returns the part of the test canvas covered by obj.
func (h *harness) capture(obj fyne.CanvasObject) *image.RGBA {
	h.t.Helper()
	c := h.w.Canvas()
	full, err := opaque(c.Capture())
	if err != nil {
		h.t.Fatal(err)
	}
	k := float32(full.Bounds().Dx()) / c.Size().Width
	p := fyne.CurrentApp().Driver().AbsolutePositionForObject(obj)
	s := obj.Size()
	r := image.Rect(int(p.X*k), int(p.Y*k), int((p.X+s.Width)*k), int((p.Y+s.Height)*k)).Intersect(full.Bounds())
	out := image.NewRGBA(image.Rect(0, 0, r.Dx(), r.Dy()))
	draw.Draw(out, out.Bounds(), full, r.Min, draw.Src)
	return out
}

// assertGolden compares img with testdata/NAME within a tolerance: at most
// 0.5 % of the pixels may differ by more than 48 levels in a channel, and
// the mean absolute difference must stay under 2 levels. On failure the
// image is written to testdata/failed/NAME.
func assertGolden(t *testing.T, name string, img *image.RGBA) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *updateGolden {
		writePNG(t, path, img)
		return
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatalf("golden image: %v (run go test -run %s -update-golden)", err, t.Name())
	}
	defer f.Close()
	want, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if want.Bounds().Size() != img.Bounds().Size() {
		writePNG(t, filepath.Join("testdata", "failed", name), img)
		t.Fatalf("%s: size %v, golden %v", name, img.Bounds().Size(), want.Bounds().Size())
	}
	var far, n int
	var sum float64
	wb := want.Bounds()
	for y := 0; y < img.Rect.Dy(); y++ {
		for x := 0; x < img.Rect.Dx(); x++ {
			i := img.PixOffset(x, y)
			r, g, b, _ := want.At(wb.Min.X+x, wb.Min.Y+y).RGBA()
			d := []float64{
				math.Abs(float64(img.Pix[i]) - float64(r>>8)),
				math.Abs(float64(img.Pix[i+1]) - float64(g>>8)),
				math.Abs(float64(img.Pix[i+2]) - float64(b>>8)),
			}
			m := math.Max(d[0], math.Max(d[1], d[2]))
			if m > 48 {
				far++
			}
			sum += (d[0] + d[1] + d[2]) / 3
			n++
		}
	}
	share, mean := float64(far)/float64(n), sum/float64(n)
	if share > 0.005 || mean > 2 {
		writePNG(t, filepath.Join("testdata", "failed", name), img)
		t.Errorf("%s differs from its golden image: %.2f %% of pixels far off, mean difference %.2f levels (new image in testdata/failed)", name, 100*share, mean)
	}
}

func writePNG(t *testing.T, path string, img image.Image) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := png.Encode(f, img); err != nil {
		t.Fatal(err)
	}
}

// The Scan panel of a real scan (nibabel's anatomical.nii) rendered by the
// test driver matches its committed image: planes, letters, crosshair,
// titles, controls and readout.
func TestScanPanelGolden(t *testing.T) {
	h := newHarness(t, Options{Meeting: true, Model: filepath.Join(t.TempDir(), "no-model")})
	h.open(anatomical(t))
	assertGolden(t, "scan-anatomical.png", h.capture(h.u.scanSection))

	// The coronal plane swapped into the large slot, zoomed in twice.
	h.u.typedKey(keyEvent("2"))
	h.u.typedRune('+')
	h.u.typedRune('+')
	assertGolden(t, "scan-anatomical-coronal-zoom.png", h.capture(h.u.scanSection))
}
