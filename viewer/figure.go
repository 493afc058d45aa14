package viewer

import (
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"math"
	"strings"

	"brightfold/internal/notice"
)

// FigureSpec describes a reading figure: a strip of parallel slices across
// the part of the scan where the relevance map is strongest, beside a
// column that says what the figure holds (case code, model, fit-check
// verdict, probability or the word that it is withheld, the map's method)
// with a small locator of the cuts and the colour bar; the notice runs
// across the top. The window's export and the command line's overlay.png
// are both this figure.
type FigureSpec struct {
	Plane      Plane      // the strip's plane (axial by default)
	At         [3]float64 // RAS mm point used when there is no map (the strip is centred on it)
	Convention Convention
	Window     Window // zero: the scene's DefaultWindow
	Interp     Interp
	Overlay    *OverlayMap // nil: scan only
	Style      OverlayStyle
	Slices     int // slices in the strip (default 5)

	Case     string   // case code; no identifiers
	Model    string   // model name and version
	Verdict  string   // fit-check verdict in words
	OOD      bool     // the verdict is out-of-distribution (drawn in the warning colour)
	Headline string   // the probability as shown ("0.82", "Withheld")
	Lines    []string // further lines under the headline (what it is of, method, coverage)
}

// figure colours (our own): a dark field, chalk band for the notice, and
// the verdict colours of the window.
var (
	figBG      = color.RGBA{R: 18, G: 22, B: 27, A: 255}
	figText    = color.RGBA{R: 228, G: 231, B: 234, A: 255}
	figMuted   = color.RGBA{R: 154, G: 166, B: 177, A: 255}
	figChalk   = color.RGBA{R: 236, G: 225, B: 198, A: 255}
	figInk     = color.RGBA{R: 42, G: 34, B: 20, A: 255}
	figOOD     = color.RGBA{R: 216, G: 58, B: 30, A: 255}
	figInDist  = color.RGBA{R: 43, G: 110, B: 96, A: 255}
	figCutLine = color.RGBA{R: 127, G: 224, B: 207, A: 220}
)

// figure layout in pixels.
const (
	figMargin = 16
	figGap    = 10
	figPanelH = 320
	figSideW  = 380
)

// Figure renders the reading figure.
func Figure(s *Scene, spec FigureSpec) (*image.RGBA, error) {
	if spec.Window == (Window{}) {
		spec.Window = s.DefaultWindow()
	}
	if spec.Slices <= 0 {
		spec.Slices = 5
	}
	cuts := s.stripCuts(spec)
	panels, captions, err := s.stripPanels(spec, cuts)
	if err != nil {
		return nil, err
	}
	stripW := figGap * (len(panels) - 1)
	for _, p := range panels {
		stripW += p.Rect.Dx()
	}
	locator, err := s.locator(spec, cuts)
	if err != nil {
		return nil, err
	}
	var bar *image.RGBA
	if spec.Overlay != nil {
		if bar, err = OverlayColorBar(spec.Overlay, spec.Style, figSideW-40, 1, figBG); err != nil {
			return nil, err
		}
	}
	width := 2*figMargin + stripW + figGap*2 + figSideW
	note := Wrap(notice.Full, width-2*figMargin, 2)
	bandH := len(note)*LineHeight(2) + 2*figGap
	side := s.sideColumn(spec, locator, bar)
	bodyH := max(figPanelH+2*LineHeight(1)+figGap, side.Rect.Dy())
	img := image.NewRGBA(image.Rect(0, 0, width, bandH+bodyH+2*figMargin))
	draw.Draw(img, img.Bounds(), image.NewUniform(figBG), image.Point{}, draw.Src)
	draw.Draw(img, image.Rect(0, 0, width, bandH), image.NewUniform(figChalk), image.Point{}, draw.Src)
	y := figGap
	for _, l := range note {
		DrawText(img, image.Pt(figMargin, y), l, figInk, 2)
		y += LineHeight(2)
	}
	top := bandH + figMargin
	x := figMargin
	for i, p := range panels {
		draw.Draw(img, p.Rect.Add(image.Pt(x, top)), p, image.Point{}, draw.Src)
		for k, c := range captions[i] {
			DrawText(img, image.Pt(x, top+p.Rect.Dy()+4+k*LineHeight(1)), c, figText, 1)
		}
		x += p.Rect.Dx() + figGap
	}
	draw.Draw(img, side.Rect.Add(image.Pt(x+figGap, top)), side, image.Point{}, draw.Src)
	return img, nil
}

// stripCuts chooses the strip's slices: evenly spaced between the 10th and
// 90th percentiles of the map's positive relevance along the slice axis (the
// region with the most relevance), or ±20 mm around At without a map.
func (s *Scene) stripCuts(spec FigureSpec) [][3]float64 {
	if spec.Slices <= 0 {
		spec.Slices = 5
	}
	f := s.Frame(spec.Plane, spec.At, spec.Convention, 0)
	axis := f.SliceAxis()
	n := s.vol.Dims[axis]
	centre, _ := s.NearestVoxel(spec.At)
	lo, hi := centre[axis]-int(20/s.spacing[axis]), centre[axis]+int(20/s.spacing[axis])
	if spec.Overlay != nil {
		mass := make([]float64, n)
		total := 0.0
		d := s.vol.Dims
		for k := 0; k < d[2]; k++ {
			for j := 0; j < d[1]; j++ {
				for i := 0; i < d[0]; i++ {
					x := float64(spec.Overlay.data[s.vol.Index(i, j, k)])
					if x > 0 && !math.IsInf(x, 0) {
						mass[[3]int{i, j, k}[axis]] += x
						total += x
					}
				}
			}
		}
		if total > 0 {
			acc := 0.0
			lo, hi = -1, -1
			for i, m := range mass {
				acc += m
				if lo < 0 && acc >= 0.1*total {
					lo = i
				}
				if hi < 0 && acc >= 0.9*total {
					hi = i
				}
			}
		}
	}
	lo, hi = clampInt(lo, 0, n-1), clampInt(hi, 0, n-1)
	cuts := make([][3]float64, spec.Slices)
	for c := range cuts {
		idx := centre
		t := 0.5
		if spec.Slices > 1 {
			t = float64(c) / float64(spec.Slices-1)
		}
		idx[axis] = lo + int(math.Round(t*float64(hi-lo)))
		cuts[c] = s.VoxelToWorld(indexFloat(idx))
	}
	return cuts
}

// stripPanels renders the cuts at one scale, each with its letters, and a
// caption naming where it cuts ("S 12.0 mm", "slice k=95").
func (s *Scene) stripPanels(spec FigureSpec, cuts [][3]float64) ([]*image.RGBA, [][]string, error) {
	f0 := s.Frame(spec.Plane, cuts[0], spec.Convention, 0)
	colMM, rowMM := float64(f0.Width)*f0.PixelMM, float64(f0.Height)*f0.PixelMM
	pixelMM := math.Max(rowMM/figPanelH, colMM/(figPanelH*1.25))
	var panels []*image.RGBA
	var captions [][]string
	for _, at := range cuts {
		f := s.Frame(spec.Plane, at, spec.Convention, pixelMM)
		img, err := s.Render(f, Layers{Window: spec.Window, Interp: spec.Interp, Overlay: spec.Overlay, Style: spec.Style})
		if err != nil {
			return nil, nil, err
		}
		DrawLetters(img, f.Letters(), 1)
		panels = append(panels, img)
		c := planeCaption(s, f, at)
		captions = append(captions, []string{c[1], c[0]})
	}
	return panels, captions, nil
}

// locator is a small perpendicular plane through the strip's centre with a
// line at each cut, numbered as the strip.
func (s *Scene) locator(spec FigureSpec, cuts [][3]float64) (*image.RGBA, error) {
	pl := Sagittal
	if spec.Plane == Sagittal {
		pl = Coronal
	}
	mid := cuts[len(cuts)/2]
	f := s.Frame(pl, mid, spec.Convention, 0)
	pixelMM := float64(max(f.Width, f.Height)) * f.PixelMM / 150
	f = s.Frame(pl, mid, spec.Convention, pixelMM)
	img, err := s.Render(f, Layers{Window: spec.Window, Interp: spec.Interp})
	if err != nil {
		return nil, err
	}
	x0, y0 := f.WorldToPixel(cuts[0])
	x1, y1 := f.WorldToPixel(cuts[len(cuts)-1])
	horizontal := math.Abs(y1-y0) >= math.Abs(x1-x0)
	for i, c := range cuts {
		x, y := f.WorldToPixel(c)
		if horizontal {
			for px := 0; px < img.Rect.Dx(); px++ {
				blendPixel(img, px, int(y), figCutLine)
			}
			if i == 0 || i == len(cuts)-1 { // the ends only: inner numbers would overlap
				DrawTextHalo(img, image.Pt(2, int(y)-6), fmt.Sprint(i+1), figText, 1)
			}
		} else {
			for py := 0; py < img.Rect.Dy(); py++ {
				blendPixel(img, int(x), py, figCutLine)
			}
			if i == 0 || i == len(cuts)-1 {
				DrawTextHalo(img, image.Pt(int(x)+2, 2), fmt.Sprint(i+1), figText, 1)
			}
		}
	}
	DrawLetters(img, f.Letters(), 1)
	return img, nil
}

// sideColumn draws the words of the figure, the locator and the colour bar.
func (s *Scene) sideColumn(spec FigureSpec, locator, bar *image.RGBA) *image.RGBA {
	type item struct {
		text  string
		scale int
		col   color.RGBA
	}
	var head []item
	if spec.Case != "" {
		head = append(head, item{spec.Case, 2, figText})
	}
	for _, l := range Wrap(plainText(spec.Model), figSideW, 1) {
		head = append(head, item{l, 1, figMuted})
	}
	h := 0
	for _, it := range head {
		h += LineHeight(it.scale)
	}
	verdictH := LineHeight(2) + 8
	var lines []string
	for _, l := range spec.Lines {
		lines = append(lines, Wrap(plainText(l), figSideW, 1)...)
	}
	total := h + figGap + verdictH + figGap + LineHeight(4) + len(lines)*LineHeight(1) + figGap + locator.Rect.Dy() + figGap
	if bar != nil {
		total += bar.Rect.Dy() + figGap
	}
	img := image.NewRGBA(image.Rect(0, 0, figSideW, total))
	draw.Draw(img, img.Bounds(), image.NewUniform(figBG), image.Point{}, draw.Src)
	y := 0
	for _, it := range head {
		DrawText(img, image.Pt(0, y), it.text, it.col, it.scale)
		y += LineHeight(it.scale)
	}
	y += figGap
	vc := figInDist
	if spec.OOD {
		vc = figOOD
	}
	draw.Draw(img, image.Rect(0, y, figSideW, y+verdictH), image.NewUniform(vc), image.Point{}, draw.Src)
	DrawText(img, image.Pt(6, y+5), spec.Verdict, figText, 2)
	y += verdictH + figGap
	DrawText(img, image.Pt(0, y), spec.Headline, figText, 4)
	y += LineHeight(4)
	for _, l := range lines {
		DrawText(img, image.Pt(0, y), l, figText, 1)
		y += LineHeight(1)
	}
	y += figGap
	draw.Draw(img, locator.Rect.Add(image.Pt(0, y)), locator, image.Point{}, draw.Src)
	DrawText(img, image.Pt(locator.Rect.Dx()+8, y), "where slices", figMuted, 1)
	DrawText(img, image.Pt(locator.Rect.Dx()+8, y+LineHeight(1)), fmt.Sprintf("1 to %d cut", spec.Slices), figMuted, 1)
	y += locator.Rect.Dy() + figGap
	if bar != nil {
		draw.Draw(img, bar.Rect.Add(image.Pt(0, y)), bar, image.Point{}, draw.Src)
	}
	return img
}

// plainText spells the typographic signs the figure's bitmap font lacks in
// characters it has.
func plainText(s string) string {
	return strings.NewReplacer("·", "-", "≤", "<=", "≥", ">=", "×", "x", "–", "-", "—", "-", "°", " deg", "≈", "~",
		"\u201c", "\"", "\u201d", "\"", "’", "'").Replace(s)
}
