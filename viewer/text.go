package viewer

import (
	"image"
	"image/color"
	"image/draw"
	"strings"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"
)

// Text is drawn with the 7×13 fixed bitmap font of golang.org/x/image
// (basicfont.Face7x13, from the public-domain X11 misc-fixed font), enlarged
// by a whole-number scale so that it stays crisp. Characters the font lacks
// are drawn as '?'.
const (
	glyphWidth  = 7
	glyphHeight = 13
)

// TextSize returns the width and height in pixels of one line of text at scale.
func TextSize(s string, scale int) (w, h int) {
	scale = max(scale, 1)
	return len([]rune(s)) * glyphWidth * scale, glyphHeight * scale
}

// LineHeight is the height of one line of text at scale, with spacing.
func LineHeight(scale int) int { return (glyphHeight + 3) * max(scale, 1) }

// textMask renders s into an alpha mask at scale.
func textMask(s string, scale int) *image.Alpha {
	scale = max(scale, 1)
	face := basicfont.Face7x13
	s = strings.Map(func(r rune) rune {
		if _, _, _, _, ok := face.Glyph(fixed.Point26_6{}, r); !ok {
			return '?'
		}
		return r
	}, s)
	w, _ := TextSize(s, 1)
	small := image.NewAlpha(image.Rect(0, 0, max(w, 1), glyphHeight))
	d := font.Drawer{Dst: small, Src: image.Opaque, Face: face, Dot: fixed.P(0, face.Ascent)}
	d.DrawString(s)
	squareDots(small, s)
	if scale == 1 {
		return small
	}
	big := image.NewAlpha(image.Rect(0, 0, small.Rect.Dx()*scale, glyphHeight*scale))
	for y := 0; y < big.Rect.Dy(); y++ {
		for x := 0; x < big.Rect.Dx(); x++ {
			big.Pix[y*big.Stride+x] = small.Pix[(y/scale)*small.Stride+x/scale]
		}
	}
	return big
}

// squareDots redraws each full stop of s in mask m as a 2×2 square on the
// baseline: the font's stop is a small plus sign, which enlarged reads like
// a comma (and "0.5" like "0,5").
func squareDots(m *image.Alpha, s string) {
	for n, r := range []rune(s) {
		if r != '.' {
			continue
		}
		x0 := n * glyphWidth
		for y := 0; y < glyphHeight; y++ {
			for x := x0; x < x0+glyphWidth; x++ {
				m.Pix[y*m.Stride+x] = 0
			}
		}
		for y := 9; y <= 10; y++ {
			for x := x0 + 2; x <= x0+3; x++ {
				m.Pix[y*m.Stride+x] = 0xff
			}
		}
	}
}

// DrawText draws one line of text with its top-left corner at pt.
func DrawText(dst draw.Image, pt image.Point, s string, c color.Color, scale int) {
	m := textMask(s, scale)
	r := image.Rectangle{Min: pt, Max: pt.Add(m.Rect.Size())}
	draw.DrawMask(dst, r, image.NewUniform(c), image.Point{}, m, image.Point{}, draw.Over)
}

// DrawTextHalo draws text with a one-pixel (times scale) dark outline, legible
// over any image content.
func DrawTextHalo(dst draw.Image, pt image.Point, s string, c color.Color, scale int) {
	m := textMask(s, scale)
	halo := image.NewUniform(color.RGBA{A: 220})
	step := max(scale, 1)
	for _, d := range []image.Point{{-1, 0}, {1, 0}, {0, -1}, {0, 1}, {-1, -1}, {1, 1}, {-1, 1}, {1, -1}} {
		q := pt.Add(d.Mul(step))
		draw.DrawMask(dst, image.Rectangle{Min: q, Max: q.Add(m.Rect.Size())}, halo, image.Point{}, m, image.Point{}, draw.Over)
	}
	draw.DrawMask(dst, image.Rectangle{Min: pt, Max: pt.Add(m.Rect.Size())}, image.NewUniform(c), image.Point{}, m, image.Point{}, draw.Over)
}

// Wrap breaks s into lines no wider than width pixels at scale, at spaces
// (a word longer than a line is cut).
func Wrap(s string, width, scale int) []string {
	perLine := max(width/(glyphWidth*max(scale, 1)), 1)
	var lines []string
	line := ""
	for _, word := range strings.Fields(s) {
		for len([]rune(word)) > perLine {
			if line != "" {
				lines, line = append(lines, line), ""
			}
			r := []rune(word)
			lines, word = append(lines, string(r[:perLine])), string(r[perLine:])
		}
		switch {
		case line == "":
			line = word
		case len([]rune(line))+1+len([]rune(word)) <= perLine:
			line += " " + word
		default:
			lines, line = append(lines, line), word
		}
	}
	if line != "" {
		lines = append(lines, line)
	}
	return lines
}

// DrawLetters stamps a frame's orientation letters at the middle of each
// edge of img (which shows that frame), with a halo, at text scale.
func DrawLetters(img draw.Image, l Letters, scale int) {
	b := img.Bounds()
	w, h := TextSize("M", scale)
	pad := 3 * max(scale, 1)
	midX, midY := (b.Min.X+b.Max.X-w)/2, (b.Min.Y+b.Max.Y-h)/2
	white := color.RGBA{R: 255, G: 255, B: 255, A: 255}
	DrawTextHalo(img, image.Pt(b.Min.X+pad, midY), l.Left, white, scale)
	DrawTextHalo(img, image.Pt(b.Max.X-pad-w, midY), l.Right, white, scale)
	DrawTextHalo(img, image.Pt(midX, b.Min.Y+pad), l.Top, white, scale)
	DrawTextHalo(img, image.Pt(midX, b.Max.Y-pad-h), l.Bottom, white, scale)
}
