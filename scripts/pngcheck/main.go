// Command pngcheck checks that a screenshot of the viewer is not blank: it
// prints the image size and luminance spread, and fails when the spread is
// too small (a blank or single-colour window) or the image has an unexpected
// size. Used by scripts/screenshot-check.sh.
package main

import (
	"flag"
	"fmt"
	"image"
	_ "image/png"
	"math"
	"os"
)

func main() {
	minStd := flag.Float64("min-std", 12, "smallest acceptable standard deviation of luminance (0..255)")
	minW := flag.Int("min-width", 800, "smallest acceptable width in pixels")
	banner := flag.String("banner", "", "hex RGB colour (e.g. ece1c6) that must fill most of the top 24 pixel rows: the notice banner")
	flag.Parse()
	if flag.NArg() != 1 {
		fmt.Fprintln(os.Stderr, "usage: pngcheck [-min-std S] [-min-width W] FILE.png")
		os.Exit(2)
	}
	if err := check(flag.Arg(0), *minStd, *minW, *banner); err != nil {
		fmt.Fprintln(os.Stderr, "pngcheck:", err)
		os.Exit(1)
	}
}

func check(path string, minStd float64, minW int, banner string) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	img, _, err := image.Decode(f)
	if err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	b := img.Bounds()
	var sum, sq float64
	colours := map[[3]uint32]bool{}
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			// ITU-R BT.601 luma weights.
			l := (0.299*float64(r) + 0.587*float64(g) + 0.114*float64(bl)) / 257
			sum += l
			sq += l * l
			if len(colours) < 100000 {
				colours[[3]uint32{r >> 8, g >> 8, bl >> 8}] = true
			}
		}
	}
	n := float64(b.Dx() * b.Dy())
	if n == 0 {
		return fmt.Errorf("%s: empty image", path)
	}
	mean := sum / n
	std := math.Sqrt(math.Max(0, sq/n-mean*mean))
	fmt.Printf("%s: %dx%d, luminance mean %.1f, std %.1f, %d distinct colours\n", path, b.Dx(), b.Dy(), mean, std, len(colours))
	if b.Dx() < minW {
		return fmt.Errorf("%s: width %d below %d", path, b.Dx(), minW)
	}
	if std < minStd || len(colours) < 64 {
		return fmt.Errorf("%s: looks blank (luminance std %.1f, %d colours)", path, std, len(colours))
	}
	if banner != "" {
		return checkBanner(path, img, banner)
	}
	return nil
}

// checkBanner requires at least half of the pixels of the top 24 rows to be
// within 12 levels of the banner colour.
func checkBanner(path string, img image.Image, hex string) error {
	var want [3]int
	if _, err := fmt.Sscanf(hex, "%02x%02x%02x", &want[0], &want[1], &want[2]); err != nil {
		return fmt.Errorf("-banner %q: %w", hex, err)
	}
	b := img.Bounds()
	hit, n := 0, 0
	for y := b.Min.Y; y < b.Min.Y+24 && y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			got := [3]int{int(r >> 8), int(g >> 8), int(bl >> 8)}
			ok := true
			for i := range got {
				if d := got[i] - want[i]; d > 12 || d < -12 {
					ok = false
				}
			}
			if ok {
				hit++
			}
			n++
		}
	}
	fmt.Printf("%s: %.0f %% of the top rows in the banner colour #%s\n", path, 100*float64(hit)/float64(max(n, 1)), hex)
	if 2*hit < n {
		return fmt.Errorf("%s: the notice banner (#%s) is missing from the top of the window", path, hex)
	}
	return nil
}
