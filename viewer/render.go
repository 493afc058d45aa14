package viewer

import (
	"fmt"
	"image"
	"image/color"
	"math"
)

// Layers says what Render draws: the scan through a window, and optionally
// an overlay map blended over it.
type Layers struct {
	Window  Window
	Interp  Interp
	Overlay *OverlayMap // nil: scan only
	Style   OverlayStyle
	Outline *Outline // nil: none; else its edge drawn over everything
}

// Render draws frame f of the scene: window/level grey scan, overlay blended
// at its opacity where it passes the threshold, black outside the volume.
func (s *Scene) Render(f Frame, l Layers) (*image.RGBA, error) {
	img := image.NewRGBA(image.Rect(0, 0, f.Width, f.Height))
	if err := s.RenderInto(img, f, l); err != nil {
		return nil, err
	}
	return img, nil
}

// RenderInto is Render into an existing image of exactly the frame's size
// (its bounds may start anywhere), so that a screen can redraw without
// allocating.
func (s *Scene) RenderInto(dst *image.RGBA, f Frame, l Layers) error {
	b := dst.Bounds()
	if b.Dx() != f.Width || b.Dy() != f.Height {
		return fmt.Errorf("viewer: render target %dx%d, frame %dx%d", b.Dx(), b.Dy(), f.Width, f.Height)
	}
	if f.dims != s.vol.Dims {
		return fmt.Errorf("viewer: frame for grid %v used on a scene of grid %v", f.dims, s.vol.Dims)
	}
	var paint overlayPaint
	if l.Overlay != nil {
		if len(l.Overlay.data) != len(s.vol.Data) {
			return fmt.Errorf("viewer: overlay has %d voxels, scan %d", len(l.Overlay.data), len(s.vol.Data))
		}
		var err error
		if paint, err = l.Style.resolve(l.Overlay); err != nil {
			return err
		}
	}
	smp := f.sampler(l.Interp)
	lut := l.Window.lut8()
	base := make([]float32, f.Width)
	var ov []float32
	if l.Overlay != nil {
		ov = make([]float32, f.Width)
	}
	for y := 0; y < f.Height; y++ {
		smp.row(s.vol.Data, y, base)
		px := dst.Pix[(b.Min.Y+y-dst.Rect.Min.Y)*dst.Stride+(b.Min.X-dst.Rect.Min.X)*4:]
		for x, v := range base {
			g := lut.gray(v)
			px[4*x], px[4*x+1], px[4*x+2], px[4*x+3] = g, g, g, 255
		}
		if ov == nil {
			continue
		}
		smp.row(l.Overlay.data, y, ov)
		blendRow(px, ov, &paint)
	}
	if l.Outline != nil {
		if len(l.Outline.inside) != len(s.vol.Data) {
			return fmt.Errorf("viewer: outline has %d voxels, scan %d", len(l.Outline.inside), len(s.vol.Data))
		}
		drawOutline(dst, f, l.Outline)
	}
	return nil
}

// blendRow mixes the overlay colour into the grey pixels px (RGBA) where ov
// passes. It is overlayPaint.entry unrolled for speed; overlay_test.go
// checks the two agree.
func blendRow(px []uint8, ov []float32, p *overlayPaint) {
	a := p.alpha
	if a == 0 {
		return
	}
	table := p.cm.table
	put := func(x, i, a int) {
		c := table[i]
		b := 256 - a
		q := px[4*x : 4*x+3 : 4*x+3]
		q[0] = uint8((int(q[0])*b + int(c.R)*a) >> 8)
		q[1] = uint8((int(q[1])*b + int(c.G)*a) >> 8)
		q[2] = uint8((int(q[2])*b + int(c.B)*a) >> 8)
	}
	thr, inf := p.thr, math.MaxFloat32
	if p.signed {
		mid := p.mid
		scale := float64(mid) / p.rng
		for x, v := range ov {
			f := float64(v)
			m := f
			if m < 0 {
				m = -m
			}
			if !(m > thr) || m > inf {
				continue
			}
			k := mid
			if m < p.rng {
				k = int(m*scale + 0.5)
			}
			ka := a * k / mid // fade towards the neutral centre
			if f < 0 {
				k = -k
			}
			put(x, mid+k, ka)
		}
		return
	}
	last := int(p.last)
	scale := p.last / p.rng
	for x, v := range ov {
		f := float64(v)
		if !(f > thr) || f <= 0 || f > inf {
			continue
		}
		i := last
		if f < p.rng {
			i = int(f*scale + 0.5)
		}
		put(x, i, a)
	}
}

// Crosshair is the position of a RAS point in one frame.
type Crosshair struct {
	World  [3]float64 // the point, RAS mm
	Voxel  [3]int     // the voxel nearest to it
	Inside bool       // the point lies within the volume
	X, Y   float64    // continuous pixel position of its projection on the frame
}

// Crosshair locates the RAS point at in frame f.
func (s *Scene) Crosshair(f Frame, at [3]float64) Crosshair {
	ijk, in := s.NearestVoxel(at)
	x, y := f.WorldToPixel(at)
	return Crosshair{World: at, Voxel: ijk, Inside: in, X: x, Y: y}
}

// String formats the crosshair for a status line.
func (c Crosshair) String() string {
	return fmt.Sprintf("voxel (%d, %d, %d)  RAS (%.1f, %.1f, %.1f) mm", c.Voxel[0], c.Voxel[1], c.Voxel[2], c.World[0], c.World[1], c.World[2])
}

// DrawCrosshair draws horizontal and vertical lines through the continuous
// pixel position (x, y) of dst, leaving a gap of gap pixels on each side of
// the centre so that the voxel under it stays visible.
func DrawCrosshair(dst *image.RGBA, x, y float64, c color.RGBA, gap int) {
	b := dst.Bounds()
	cx, cy := b.Min.X+int(math.Floor(x)), b.Min.Y+int(math.Floor(y))
	for px := b.Min.X; px < b.Max.X; px++ {
		if px < cx-gap || px > cx+gap {
			blendPixel(dst, px, cy, c)
		}
	}
	for py := b.Min.Y; py < b.Max.Y; py++ {
		if py < cy-gap || py > cy+gap {
			blendPixel(dst, cx, py, c)
		}
	}
}

// blendPixel mixes c over pixel (x, y) by c's alpha; outside the image it does nothing.
func blendPixel(dst *image.RGBA, x, y int, c color.RGBA) {
	if !(image.Point{X: x, Y: y}.In(dst.Bounds())) {
		return
	}
	i := dst.PixOffset(x, y)
	a := int(c.A)
	q := dst.Pix[i : i+4 : i+4]
	q[0] = uint8((int(q[0])*(255-a) + int(c.R)*a) / 255)
	q[1] = uint8((int(q[1])*(255-a) + int(c.G)*a) / 255)
	q[2] = uint8((int(q[2])*(255-a) + int(c.B)*a) / 255)
	q[3] = 255
}

// Readout describes the voxel under an image pixel.
type Readout struct {
	Inside     bool       // the pixel lies on a voxel of the volume
	Voxel      [3]int     // voxel index (i, j, k)
	World      [3]float64 // RAS mm of that voxel's centre
	Value      float32    // the scan's value there
	HasOverlay bool       // an overlay map was given
	Overlay    float32    // its value there
}

// ReadoutAt describes the voxel shown at continuous pixel position (x, y) of
// frame f (nearest voxel, whatever the interpolation used for display);
// overlay may be nil.
func (s *Scene) ReadoutAt(f Frame, x, y float64, overlay *OverlayMap) Readout {
	ijk, in := f.VoxelAt(x, y)
	r := Readout{Inside: in, Voxel: ijk}
	r.World = s.VoxelToWorld([3]float64{float64(ijk[0]), float64(ijk[1]), float64(ijk[2])})
	i := s.vol.Index(ijk[0], ijk[1], ijk[2])
	r.Value = s.vol.Data[i]
	if overlay != nil && len(overlay.data) == len(s.vol.Data) {
		r.HasOverlay, r.Overlay = true, overlay.data[i]
	}
	return r
}

// String formats the readout for a status line.
func (r Readout) String() string {
	if !r.Inside {
		return "outside the volume"
	}
	s := fmt.Sprintf("voxel (%d, %d, %d)  RAS (%.1f, %.1f, %.1f) mm  value %s",
		r.Voxel[0], r.Voxel[1], r.Voxel[2], r.World[0], r.World[1], r.World[2], formatNumber(float64(r.Value)))
	if r.HasOverlay {
		s += "  overlay " + formatNumber(float64(r.Overlay))
	}
	return s
}
