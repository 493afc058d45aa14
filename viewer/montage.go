package viewer

import (
	"fmt"
	"image"
	"image/color"
	"image/draw"

	"brightfold/internal/notice"
)

// MontageSpec describes a report figure: the three planes through one point,
// side by side at one physical scale, optionally with an overlay and its
// colour bar, title lines above and the notice below.
type MontageSpec struct {
	At          [3]float64 // RAS mm point the three planes pass through
	Convention  Convention
	Window      Window // zero: the scene's DefaultWindow
	Interp      Interp
	Overlay     *OverlayMap // nil: scan only, no colour bar
	Style       OverlayStyle
	Title       []string // lines above the planes; the caller leaves identifiers out in Meeting mode
	PanelHeight int      // height in pixels of the tallest plane (default 320)
	Crosshair   bool     // mark the point in each plane
}

// palette holds the montage colours (our own choice).
type palette struct{ background, text, cross, band color.RGBA }

func montagePalette() palette {
	return palette{
		background: color.RGBA{R: 14, G: 16, B: 20, A: 255},
		text:       color.RGBA{R: 236, G: 238, B: 242, A: 255},
		cross:      color.RGBA{R: 90, G: 210, B: 255, A: 170},
		band:       color.RGBA{R: 70, G: 46, B: 8, A: 255},
	}
}

// montage layout in pixels.
const (
	montageMargin = 16
	montageGap    = 12
	montageMinW   = 720
	textScale     = 2
)

// Montage renders the figure described by spec. The notice (notice.Full) is
// always printed at the bottom, wrapped, at twice the font's size.
func Montage(s *Scene, spec MontageSpec) (image.Image, error) {
	pal := montagePalette()
	if spec.Window == (Window{}) {
		spec.Window = s.DefaultWindow()
	}
	panels, captions, err := s.montagePanels(spec)
	if err != nil {
		return nil, err
	}
	width := 2*montageMargin + 2*montageGap
	height := 0
	for _, p := range panels {
		width += p.Rect.Dx()
		height = max(height, p.Rect.Dy())
	}
	width = max(width, montageMinW)
	inner := width - 2*montageMargin
	var bar *image.RGBA
	if spec.Overlay != nil {
		if bar, err = OverlayColorBar(spec.Overlay, spec.Style, min(inner-160, 512), textScale, pal.background); err != nil {
			return nil, err
		}
	}
	var title []string
	for _, t := range spec.Title {
		title = append(title, Wrap(t, inner, textScale)...)
	}
	infoText := fmt.Sprintf("Window %s (%s), %s display.", spec.Window, spec.Window.Function, spec.Convention)
	if ob := s.Obliquity(); ob > 0.5 {
		infoText += fmt.Sprintf(" Planes follow the voxel grid, tilted %.1f deg from the RAS axes.", ob)
	}
	info := Wrap(infoText, inner, textScale)
	note := Wrap(notice.Full, inner, textScale)
	lh := LineHeight(textScale)

	total := montageMargin + len(title)*lh + montageGap + height + 2*lh + montageGap + len(info)*lh + montageGap
	if bar != nil {
		total += bar.Rect.Dy() + montageGap
	}
	total += len(note)*lh + 2*montageGap
	img := image.NewRGBA(image.Rect(0, 0, width, total))
	draw.Draw(img, img.Bounds(), image.NewUniform(pal.background), image.Point{}, draw.Src)

	y := montageMargin
	for _, t := range title {
		DrawText(img, image.Pt(montageMargin, y), t, pal.text, textScale)
		y += lh
	}
	y += montageGap
	x := montageMargin + (inner-sumWidths(panels)-2*montageGap)/2
	sc := captionScale(panels, captions)
	for i, p := range panels {
		draw.Draw(img, p.Rect.Add(image.Pt(x, y)), p, image.Point{}, draw.Src)
		for k, c := range captions[i] {
			DrawText(img, image.Pt(x, y+height+k*LineHeight(sc)+4), c, pal.text, sc)
		}
		x += p.Rect.Dx() + montageGap
	}
	y += height + 2*lh + montageGap
	for _, t := range info {
		DrawText(img, image.Pt(montageMargin, y), t, pal.text, textScale)
		y += lh
	}
	y += montageGap
	if bar != nil {
		draw.Draw(img, bar.Rect.Add(image.Pt((width-bar.Rect.Dx())/2, y)), bar, image.Point{}, draw.Src)
		y += bar.Rect.Dy() + montageGap
	}
	draw.Draw(img, image.Rect(0, y, width, total), image.NewUniform(pal.band), image.Point{}, draw.Src)
	y += montageGap
	for _, t := range note {
		DrawText(img, image.Pt(montageMargin, y), t, pal.text, textScale)
		y += lh
	}
	return img, nil
}

// captionScale is the text scale at which every caption fits under its panel.
func captionScale(panels []*image.RGBA, captions [][]string) int {
	for i, p := range panels {
		for _, c := range captions[i] {
			if w, _ := TextSize(c, textScale); w > p.Rect.Dx()+montageGap/2 {
				return 1
			}
		}
	}
	return textScale
}

func sumWidths(ps []*image.RGBA) int {
	n := 0
	for _, p := range ps {
		n += p.Rect.Dx()
	}
	return n
}

// montagePanels renders the three planes at a shared pixel size, with their
// letters and crosshair, and their caption lines.
func (s *Scene) montagePanels(spec MontageSpec) ([]*image.RGBA, [][]string, error) {
	ph := spec.PanelHeight
	if ph <= 0 {
		ph = 320
	}
	ph = min(ph, MaxSide)
	ext := func(w int) float64 {
		a := s.world[w].voxel
		return float64(s.vol.Dims[a]) * s.spacing[a]
	}
	pixelMM := max(ext(1), ext(2)) / float64(ph)
	var panels []*image.RGBA
	var captions [][]string
	cross := montagePalette().cross
	for _, pl := range Planes() {
		f := s.Frame(pl, spec.At, spec.Convention, pixelMM)
		img, err := s.Render(f, Layers{Window: spec.Window, Interp: spec.Interp, Overlay: spec.Overlay, Style: spec.Style})
		if err != nil {
			return nil, nil, err
		}
		ch := s.Crosshair(f, spec.At)
		if spec.Crosshair {
			DrawCrosshair(img, ch.X, ch.Y, cross, 6)
		}
		DrawLetters(img, f.Letters(), textScale)
		panels = append(panels, img)
		captions = append(captions, planeCaption(s, f, spec.At))
	}
	return panels, captions, nil
}

// planeCaption names the plane and where it cuts, e.g. "Axial k=40" and "S 12.0 mm".
func planeCaption(s *Scene, f Frame, at [3]float64) []string {
	name := map[Plane]string{Axial: "Axial", Coronal: "Coronal", Sagittal: "Sagittal"}[f.Plane]
	w := f.Plane.layout().slice
	p := s.VoxelToWorld(indexFloat(s.sliceCentre(f, at)))
	letter := [3]string{"R", "A", "S"}[w]
	v := p[w]
	if v < 0 {
		letter, v = [3]string{"L", "P", "I"}[w], -v
	}
	ijk := "ijk"[f.SliceAxis() : f.SliceAxis()+1]
	return []string{
		fmt.Sprintf("%s %s=%d", name, ijk, f.Slice),
		fmt.Sprintf("%s %.1f mm", letter, v),
	}
}

// sliceCentre is the voxel nearest to at, moved onto the frame's slice.
func (s *Scene) sliceCentre(f Frame, at [3]float64) [3]int {
	ijk, _ := s.NearestVoxel(at)
	ijk[f.SliceAxis()] = f.Slice
	return ijk
}

func indexFloat(ijk [3]int) [3]float64 {
	return [3]float64{float64(ijk[0]), float64(ijk[1]), float64(ijk[2])}
}
