package viewer

import (
	"errors"
	"fmt"
	"image"
	"image/color"

	"brightfold/internal/register"
	"brightfold/internal/volume"
)

// Outline is a mask on a scene's grid whose edge is drawn over the planes:
// the template's head (or brain) outline over a scan aligned to it.
type Outline struct {
	inside []float32 // 1 inside, 0 outside, on the scene's grid
	Color  color.RGBA
}

// TemplateView is a scan shown in its model's template space: the scan
// resampled onto the template grid through the alignment (template RAS →
// scan RAS, as register.Convention), and the outline of the template's mask
// on the same grid.
type TemplateView struct {
	Scene   *Scene
	Outline *Outline
	// ToScan maps a RAS point of the view (the template's world) to the
	// scan's world; FromScan maps back.
	ToScan, FromScan volume.Affine
}

// NewTemplateView resamples scan onto the template's grid through
// templateToScan (register.Apply) and outlines mask, or, when the model
// folder has no mask, the template's head (Scene.HeadMask of the template:
// everything but the air reaching the border). Both are reoriented to the
// closest canonical RAS grid, as every scene is shown.
func NewTemplateView(scan, template, mask *volume.Volume, templateToScan volume.Affine) (*TemplateView, error) {
	if scan == nil || template == nil {
		return nil, errors.New("viewer: template view needs the scan and the template")
	}
	aligned, err := register.Apply(scan, template, templateToScan)
	if err != nil {
		return nil, fmt.Errorf("template view: %w", err)
	}
	inside, err := templateInside(template, mask)
	if err != nil {
		return nil, err
	}
	aligned.Meta.Format = "aligned to the template"
	shown, err := volume.Reorient(aligned)
	if err != nil {
		return nil, fmt.Errorf("template view: %w", err)
	}
	shownMask, err := volume.Reorient(inside)
	if err != nil {
		return nil, fmt.Errorf("template view: %w", err)
	}
	s, err := NewScene(shown)
	if err != nil {
		return nil, fmt.Errorf("template view: %w", err)
	}
	if shownMask.Dims != shown.Dims {
		return nil, fmt.Errorf("template view: mask grid %v, template grid %v", shownMask.Dims, shown.Dims)
	}
	back, err := templateToScan.Inverse()
	if err != nil {
		return nil, fmt.Errorf("template view: alignment: %w", err)
	}
	o := &Outline{inside: shownMask.Data, Color: color.RGBA{R: 0x4f, G: 0xe0, B: 0xd0, A: 0xff}}
	return &TemplateView{Scene: s, Outline: o, ToScan: templateToScan, FromScan: back}, nil
}

// templateInside is the template-grid volume that is 1 inside the mask (a
// mask file's voxels above zero, which must share the template's grid) or
// the template's head, and 0 elsewhere.
func templateInside(template, mask *volume.Volume) (*volume.Volume, error) {
	in := *template
	in.Data = make([]float32, len(template.Data))
	if mask != nil {
		if mask.Dims != template.Dims {
			return nil, fmt.Errorf("template view: mask grid %v differs from the template's %v", mask.Dims, template.Dims)
		}
		for i, x := range mask.Data {
			if x > 0 {
				in.Data[i] = 1
			}
		}
		return &in, nil
	}
	s, err := NewScene(template)
	if err != nil {
		return nil, fmt.Errorf("template view: %w", err)
	}
	for i, h := range s.HeadMask() {
		if h {
			in.Data[i] = 1
		}
	}
	return &in, nil
}

// drawOutline paints, in dst (the frame's image), the pixels inside the
// outline's mask that have a 4-neighbour outside it (or outside the
// volume): a one-pixel contour of the mask's cut by the plane, at the
// frame's own pixels (the mask sampled at the nearest voxel).
func drawOutline(dst *image.RGBA, f Frame, o *Outline) {
	w, h := f.Width, f.Height
	smp := f.sampler(Nearest)
	in := make([]bool, w*h)
	row := make([]float32, w)
	for y := 0; y < h; y++ {
		smp.row(o.inside, y, row)
		for x, v := range row {
			in[y*w+x] = v > 0.5
		}
	}
	b := dst.Bounds()
	at := func(x, y int) bool { return x >= 0 && y >= 0 && x < w && y < h && in[y*w+x] }
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			if in[y*w+x] && !(at(x-1, y) && at(x+1, y) && at(x, y-1) && at(x, y+1)) {
				dst.SetRGBA(b.Min.X+x, b.Min.Y+y, o.Color)
			}
		}
	}
}

// OutlineEdges is the outline's contour in frame f as drawOutline draws
// it: true where a pixel is painted.
func OutlineEdges(f Frame, o *Outline) []bool {
	img := image.NewRGBA(image.Rect(0, 0, f.Width, f.Height))
	drawOutline(img, f, o)
	out := make([]bool, f.Width*f.Height)
	for i := range out {
		out[i] = img.Pix[4*i+3] != 0
	}
	return out
}
