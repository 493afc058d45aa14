package app

import (
	"fmt"
	"image"
	"math"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/driver/desktop"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/viewer"
)

// planeView is one plane of the Scan panel. The slice image, rendered by
// viewer at its own square-millimetre pixels, is scaled to fit (times the
// zoom) without interpolation and moved by the pan; the crosshair, the
// orientation letters and the plane title are drawn on top as canvas objects.
//
// Mouse: click sets the crosshair, the wheel steps slices (Ctrl+wheel
// zooms), drag changes window/level, Shift+drag or middle-drag pans.
type planeView struct {
	widget.BaseWidget
	p     *scanPanel
	plane viewer.Plane
	large bool

	frame    viewer.Frame
	hasFrame bool
	rgba     *image.RGBA

	zoom float32
	pan  fyne.Position

	bg      *canvas.Rectangle
	img     *canvas.Image
	cross   [4]*canvas.Line      // left, right, top and bottom arms, with a gap at the centre
	letters [4]*canvas.Text      // left, right, top, bottom
	backs   [5]*canvas.Rectangle // dark backings behind the letters and the title
	title   *canvas.Text
	msg     *canvas.Text
	enlarge *widget.Button
	layer   *fyne.Container

	panning bool
}

func newPlaneView(p *scanPanel, pl viewer.Plane) *planeView {
	v := &planeView{p: p, plane: pl, zoom: 1}
	v.bg = canvas.NewRectangle(colImageField)
	v.img = canvas.NewImageFromImage(nil)
	v.img.ScaleMode = canvas.ImageScalePixels
	v.img.FillMode = canvas.ImageFillStretch
	objs := []fyne.CanvasObject{v.bg, v.img}
	for i := range v.cross {
		v.cross[i] = canvas.NewLine(colCrosshair)
		v.cross[i].StrokeWidth = 1
		objs = append(objs, v.cross[i])
	}
	for i := range v.backs {
		v.backs[i] = canvas.NewRectangle(colBacking)
		v.backs[i].CornerRadius = 3
		objs = append(objs, v.backs[i])
	}
	for i := range v.letters {
		t := canvas.NewText("", colLetter)
		t.TextStyle = fyne.TextStyle{Bold: true}
		t.TextSize = 16
		v.letters[i] = t
		objs = append(objs, t)
	}
	v.title = canvas.NewText(titleCase(pl.String()), colText)
	v.title.TextSize = 13
	v.msg = canvas.NewText("", colMuted)
	v.msg.Alignment = fyne.TextAlignCenter
	v.enlarge = widget.NewButtonWithIcon("", theme.ViewFullScreenIcon(), func() { p.makeLarge(pl) })
	v.enlarge.Importance = widget.LowImportance
	objs = append(objs, v.title, v.msg, v.enlarge)
	v.layer = container.NewWithoutLayout(objs...)
	v.ExtendBaseWidget(v)
	return v
}

// CreateRenderer clips the layers to the view.
func (v *planeView) CreateRenderer() fyne.WidgetRenderer {
	return &planeRenderer{v: v, clip: container.NewClip(v.layer)}
}

type planeRenderer struct {
	v    *planeView
	clip *container.Clip
}

func (r *planeRenderer) Layout(s fyne.Size) {
	r.clip.Resize(s)
	r.v.layer.Resize(s)
	r.v.layoutContent()
}
func (r *planeRenderer) MinSize() fyne.Size           { return fyne.NewSize(120, 120) }
func (r *planeRenderer) Refresh()                     { r.v.layoutContent(); r.clip.Refresh() }
func (r *planeRenderer) Objects() []fyne.CanvasObject { return []fyne.CanvasObject{r.clip} }
func (r *planeRenderer) Destroy()                     {}

// slicePosition is the crosshair's world coordinate across plane pl, with
// the letter of its direction: "S 12.5 mm" for an axial slice 12.5 mm above
// the origin, "P 3.0 mm" for a coronal one behind it.
func slicePosition(pl viewer.Plane, at [3]float64) string {
	axis := map[viewer.Plane]int{viewer.Sagittal: 0, viewer.Coronal: 1, viewer.Axial: 2}[pl]
	x := at[axis]
	letter := "RAS"[axis : axis+1]
	if x < 0 {
		letter = "LPI"[axis : axis+1]
	}
	return fmt.Sprintf("%s %.1f mm", letter, math.Abs(x))
}

func titleCase(s string) string {
	if s == "" {
		return s
	}
	return string(s[0]-'a'+'A') + s[1:]
}

// setMessage clears the image and shows a line of text instead.
func (v *planeView) setMessage(msg string) {
	v.hasFrame = false
	v.img.Image = nil
	v.img.Refresh()
	v.msg.Text = msg
	v.layoutContent()
}

// resetZoom fits the plane to the view.
func (v *planeView) resetZoom() {
	v.zoom, v.pan = 1, fyne.Position{}
	if v.hasFrame {
		v.title.Text = v.titleText()
	}
	v.layoutContent()
}

// render draws the plane through the crosshair with the given layers.
func (v *planeView) render(l viewer.Layers) {
	s := v.p.scene
	f := s.Frame(v.plane, v.p.at, v.p.conv, 0)
	if v.rgba == nil || v.rgba.Rect.Dx() != f.Width || v.rgba.Rect.Dy() != f.Height {
		v.rgba = image.NewRGBA(image.Rect(0, 0, f.Width, f.Height))
	}
	if err := s.RenderInto(v.rgba, f, l); err != nil {
		v.setMessage(v.p.u.clean(err.Error()))
		return
	}
	v.frame, v.hasFrame = f, true
	v.msg.Text = ""
	lt := f.Letters()
	for i, s := range []string{lt.Left, lt.Right, lt.Top, lt.Bottom} {
		v.letters[i].Text = s
	}
	v.title.Text = v.titleText()
	v.img.Image = v.rgba
	v.img.Refresh()
	v.layoutContent()
}

// titleText names the plane, its slice by the voxel index the readout uses
// ("k = 104 of 0–159"), where it cuts in millimetres, and the zoom when
// it is not 1.
func (v *planeView) titleText() string {
	f := v.frame
	axis := "ijk"[f.SliceAxis() : f.SliceAxis()+1]
	t := fmt.Sprintf("%s  %s = %d of 0–%d  ·  %s", titleCase(v.plane.String()), axis, f.Slice, v.p.scene.SliceCount(v.plane)-1, slicePosition(v.plane, v.p.at))
	if v.zoom < 0.99 || v.zoom > 1.01 {
		t += fmt.Sprintf("  ·  zoom ×%.2g", v.zoom)
	}
	return t
}

// geometry returns the scale (view units per image pixel) and the image's
// top-left position in the view.
func (v *planeView) geometry() (scale float32, origin fyne.Position) {
	size := v.Size()
	fw, fh := float32(v.frame.Width), float32(v.frame.Height)
	if fw == 0 || fh == 0 || size.Width == 0 || size.Height == 0 {
		return 1, fyne.Position{}
	}
	scale = float32(math.Min(float64(size.Width/fw), float64(size.Height/fh))) * v.zoom
	origin = fyne.NewPos((size.Width-fw*scale)/2+v.pan.X, (size.Height-fh*scale)/2+v.pan.Y)
	return scale, origin
}

// toImage maps a view position to a continuous image pixel position.
func (v *planeView) toImage(pos fyne.Position) (x, y float64) {
	scale, o := v.geometry()
	return float64((pos.X - o.X) / scale), float64((pos.Y - o.Y) / scale)
}

// layoutContent positions the image, crosshair, letters and labels.
func (v *planeView) layoutContent() {
	size := v.Size()
	v.bg.Move(fyne.Position{})
	v.bg.Resize(size)
	v.title.Move(fyne.NewPos(8, 6))
	v.title.Refresh()
	back(v.backs[4], v.title)
	bs := v.enlarge.MinSize()
	v.enlarge.Resize(bs)
	v.enlarge.Move(fyne.NewPos(size.Width-bs.Width-4, size.Height-bs.Height-2)) // clear of the title
	if v.large {
		v.enlarge.Hide()
	} else {
		v.enlarge.Show()
	}
	// A message wider than the view is set smaller rather than cut.
	v.msg.TextSize = theme.TextSize()
	if ms := v.msg.MinSize(); ms.Width > size.Width-16 && ms.Width > 0 {
		v.msg.TextSize = max32(8, v.msg.TextSize*(size.Width-16)/ms.Width)
	}
	ms := v.msg.MinSize()
	v.msg.Move(fyne.NewPos((size.Width-ms.Width)/2, (size.Height-ms.Height)/2))
	v.msg.Refresh()
	if !v.hasFrame {
		v.img.Hide()
		for _, l := range v.cross {
			l.Hide()
		}
		for i, t := range v.letters {
			t.Hide()
			v.backs[i].Hide()
		}
		return
	}
	scale, o := v.geometry()
	iw, ih := float32(v.frame.Width)*scale, float32(v.frame.Height)*scale
	v.img.Move(o)
	v.img.Resize(fyne.NewSize(iw, ih))
	v.img.Show()
	v.placeCrosshair(scale, o, iw, ih)
	v.placeLetters(o, iw, ih, size)
}

// crosshairPos is where the crosshair is in the view.
func (v *planeView) crosshairPos() fyne.Position {
	scale, o := v.geometry()
	px, py := v.frame.WorldToPixel(v.p.at)
	return fyne.NewPos(o.X+float32(px)*scale, o.Y+float32(py)*scale)
}

// placeCrosshair draws the crosshair arms through the voxel centre, leaving
// that voxel (and a few view units around it) uncovered.
func (v *planeView) placeCrosshair(scale float32, o fyne.Position, iw, ih float32) {
	c := v.crosshairPos()
	cx, cy := c.X, c.Y
	gap := scale/2 + 6
	segs := [4][2]fyne.Position{
		{fyne.NewPos(o.X, cy), fyne.NewPos(cx-gap, cy)},
		{fyne.NewPos(cx+gap, cy), fyne.NewPos(o.X+iw, cy)},
		{fyne.NewPos(cx, o.Y), fyne.NewPos(cx, cy-gap)},
		{fyne.NewPos(cx, cy+gap), fyne.NewPos(cx, o.Y+ih)},
	}
	for i, l := range v.cross {
		l.Position1, l.Position2 = segs[i][0], segs[i][1]
		l.Show()
		l.Refresh()
	}
}

// placeLetters puts the orientation letters at the middle of each edge of
// the visible part of the image.
func (v *planeView) placeLetters(o fyne.Position, iw, ih float32, size fyne.Size) {
	left, top := max32(o.X, 0), max32(o.Y, 0)
	right, bottom := min32(o.X+iw, size.Width), min32(o.Y+ih, size.Height)
	midX, midY := (left+right)/2, (top+bottom)/2
	m := float32(6)
	for i, t := range v.letters {
		t.Show()
		ts := t.MinSize()
		var pos fyne.Position
		switch i {
		case 0:
			pos = fyne.NewPos(left+m, midY-ts.Height/2)
		case 1:
			pos = fyne.NewPos(right-ts.Width-m, midY-ts.Height/2)
		case 2:
			pos = fyne.NewPos(midX-ts.Width/2, top+m+18)
		case 3:
			pos = fyne.NewPos(midX-ts.Width/2, bottom-ts.Height-m)
		}
		t.Move(pos)
		t.Refresh()
		back(v.backs[i], t)
	}
}

// back puts a dark backing behind a text so that it reads on bright tissue.
func back(r *canvas.Rectangle, t *canvas.Text) {
	s := t.MinSize()
	r.Move(t.Position().Subtract(fyne.NewPos(3, 1)))
	r.Resize(s.Add(fyne.NewSize(6, 2)))
	r.Show()
	r.Refresh()
}

func max32(a, b float32) float32 {
	if a > b {
		return a
	}
	return b
}

func min32(a, b float32) float32 {
	if a < b {
		return a
	}
	return b
}

// zoomBy multiplies the zoom by f, keeping the point under at (view
// position; nil for the centre) where it is.
func (v *planeView) zoomBy(f float32, at *fyne.Position) {
	nz := v.zoom * f
	if nz < 0.5 {
		nz = 0.5
	}
	if nz > 16 {
		nz = 16
	}
	size := v.Size()
	c := fyne.NewPos(size.Width/2, size.Height/2)
	if at != nil {
		c = *at
	}
	// The image point under c stays under c: pan' = c - centre - (c - centre - pan)·nz/z.
	k := nz / v.zoom
	cx, cy := c.X-size.Width/2, c.Y-size.Height/2
	v.pan = fyne.NewPos(cx-(cx-v.pan.X)*k, cy-(cy-v.pan.Y)*k)
	v.zoom = nz
	if v.hasFrame {
		v.title.Text = v.titleText()
	}
	v.layoutContent()
}

// Tapped sets the crosshair to the voxel under the pointer.
func (v *planeView) Tapped(ev *fyne.PointEvent) {
	// Take the keyboard back from any control, so that the keys work again.
	if c := fyne.CurrentApp().Driver().CanvasForObject(v); c != nil {
		c.Unfocus()
	}
	if !v.hasFrame {
		return
	}
	x, y := v.toImage(ev.Position)
	if !v.frame.ContainsVoxel(x, y) {
		return
	}
	v.p.moveCrosshair(v.frame.PixelToWorld(x, y))
}

// Scrolled steps slices, or zooms with Ctrl held.
func (v *planeView) Scrolled(ev *fyne.ScrollEvent) {
	if !v.hasFrame {
		return
	}
	d := ev.Scrolled.DY
	if d == 0 {
		d = ev.Scrolled.DX
	}
	if d == 0 {
		return
	}
	if modifiers()&fyne.KeyModifierControl != 0 {
		f := float32(1.15)
		if d < 0 {
			f = 1 / f
		}
		pos := ev.Position
		v.zoomBy(f, &pos)
		return
	}
	n := 1
	if d < 0 {
		n = -1
	}
	v.p.stepSlice(v.plane, n)
	// The voxel under the pointer changed with the slice: say so.
	x, y := v.toImage(ev.Position)
	v.p.pointerAt(v, x, y)
}

// MouseDown decides whether the coming drag pans or changes the window.
func (v *planeView) MouseDown(ev *desktop.MouseEvent) {
	v.panning = ev.Button == desktop.MouseButtonTertiary || ev.Modifier&fyne.KeyModifierShift != 0
}

// MouseUp ends a drag.
func (v *planeView) MouseUp(*desktop.MouseEvent) {}

// Dragged pans or changes window/level.
func (v *planeView) Dragged(ev *fyne.DragEvent) {
	if !v.hasFrame {
		return
	}
	if v.panning || v.p.dragPans() {
		v.pan = v.pan.Add(ev.Dragged)
		v.layoutContent()
		return
	}
	v.p.dragWindow(float64(ev.Dragged.DX), float64(ev.Dragged.DY))
}

// DragEnd finishes a drag.
func (v *planeView) DragEnd() { v.panning = false }

// MouseIn starts the pointer readout.
func (v *planeView) MouseIn(ev *desktop.MouseEvent) { v.MouseMoved(ev) }

// MouseMoved updates the pointer readout.
func (v *planeView) MouseMoved(ev *desktop.MouseEvent) {
	if !v.hasFrame {
		return
	}
	x, y := v.toImage(ev.Position)
	v.p.pointerAt(v, x, y)
}

// MouseOut clears the pointer readout.
func (v *planeView) MouseOut() { v.p.pointer.SetText(mouseHint) }

// modifiers returns the keyboard modifiers held now (none without a desktop driver).
func modifiers() fyne.KeyModifier {
	if d, ok := fyne.CurrentApp().Driver().(desktop.Driver); ok {
		return d.CurrentKeyModifiers()
	}
	return 0
}
