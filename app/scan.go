package app

import (
	"fmt"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/layout"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
	"brightfold/viewer"
)

// scanPanel shows the three planes of the open scan: one large and two
// small, sharing one crosshair (a RAS point kept on a voxel centre) and one
// window. Any small plane can be swapped into the large slot.
type scanPanel struct {
	u    *UI
	root fyne.CanvasObject

	views [3]*planeView   // indexed by viewer.Plane
	order [3]viewer.Plane // order[0] is the large plane
	grid  *fyne.Container

	scene   *viewer.Scene
	at      [3]float64 // crosshair, RAS mm, on a voxel centre
	win     viewer.Window
	presets []viewer.Preset
	interp  viewer.Interp
	conv    viewer.Convention

	overlay *viewer.OverlayMap   // relevance map on the scan grid, nil when none
	input   bool                 // the planes show the model input, not the scan
	inputCk *widget.Check        // "Model input": show the model input
	tpl     *viewer.TemplateView // the scan in its template's space, while shown
	tplCk   *widget.Check        // "Template": show it
	// scanAt is the crosshair on the scan when the model input was shown,
	// inputAt where it went on the model grid.
	scanAt, inputAt [3]float64
	style           viewer.OverlayStyle
	showOv          bool

	preset   *safeSelect
	convSel  *safeSelect
	smooth   *widget.Check
	ovCheck  *widget.Check
	wlLabel  *widget.Label
	readout  *widget.Label
	pointer  *widget.Label
	dragSel  *safeSelect
	quietSel bool
}

func newScanPanel(u *UI) *scanPanel {
	p := &scanPanel{u: u, order: [3]viewer.Plane{viewer.Axial, viewer.Coronal, viewer.Sagittal}, showOv: true}
	p.style = viewer.OverlayStyle{Opacity: 0.6, Threshold: viewer.Threshold{Value: 90, Percentile: true}}
	for _, pl := range viewer.Planes() {
		p.views[pl] = newPlaneView(p, pl)
	}
	p.grid = container.New(&triLayout{})
	p.arrange()

	p.preset = newSafeSelect(nil, func(label string) {
		u.refocus()
		if p.quietSel {
			return
		}
		for _, pr := range p.presets {
			if pr.Label == label {
				p.setWindow(pr.Window)
			}
		}
	})
	p.preset.PlaceHolder = "Window"
	p.convSel = newSafeSelect([]string{convRadiological, convNeurological}, func(s string) {
		u.refocus()
		if p.quietSel {
			return
		}
		p.conv = viewer.Radiological
		if s == convNeurological {
			p.conv = viewer.Neurological
		}
		p.renderAll()
	})
	p.convSel.SetSelectedIndex(0)
	p.smooth = widget.NewCheck("Smooth", func(on bool) {
		u.refocus()
		p.interp = viewer.Nearest
		if on {
			p.interp = viewer.Linear
		}
		p.renderAll()
	})
	p.ovCheck = widget.NewCheck("Overlay (O)", func(on bool) {
		u.refocus()
		p.showOv = on
		p.renderAll()
		u.evidence.refreshOverlayState()
	})
	p.ovCheck.Checked = true
	reset := widget.NewButton("Reset view", p.resetView)
	p.inputCk = widget.NewCheck("Model input", func(on bool) {
		u.refocus()
		if p.quietSel {
			return
		}
		u.showModelInput(on)
	})
	p.setInput(false)
	p.tplCk = widget.NewCheck("Template", func(on bool) {
		u.refocus()
		if p.quietSel {
			return
		}
		u.showTemplate(on)
	})
	p.tplCk.Disable()
	p.dragSel = newSafeSelect([]string{dragWL, dragPan}, func(string) { u.refocus() })
	p.dragSel.SetSelectedIndex(0)
	p.wlLabel, p.readout, p.pointer = readoutLabel(), readoutLabel(), readoutLabel()
	// The preset choice takes the room the other tools leave, so its
	// labels are not cut.
	tools := container.NewBorder(nil, nil, nil, container.NewHBox(p.dragSel, p.convSel, p.smooth, p.ovCheck, reset), p.preset)
	// Three named lines under the planes; the model-input switch sits at
	// the end of the Window line, whose text gives way, so the tool row
	// stays within a 1280-pixel window.
	info := container.New(layout.NewFormLayout(),
		readoutName("Window"), container.NewBorder(nil, nil, nil, container.NewHBox(p.tplCk, p.inputCk), p.wlLabel),
		readoutName("Crosshair"), p.readout, readoutName("Pointer"), p.pointer)
	p.root = container.NewBorder(tools, info, nil, nil, p.grid)
	p.clear("No case open.")
	return p
}

// readoutLabel is a value line under the planes: caption-size text in the
// proportional font, so that a readout of a 1 mm scan with its relevance
// fits a 1280-pixel window whole; it ends in an ellipsis rather than
// spilling if a narrower window cuts it.
func readoutLabel() *widget.Label {
	l := widget.NewLabel("")
	l.SizeName = theme.SizeNameCaptionText
	l.Truncation = fyne.TextTruncateEllipsis
	return l
}

// readoutName names a value line under the planes.
func readoutName(s string) *widget.Label {
	l := widget.NewLabelWithStyle(s, fyne.TextAlignLeading, fyne.TextStyle{Bold: true})
	l.SizeName = theme.SizeNameCaptionText
	return l
}

// mouseHint stands in the pointer line while the mouse is off the planes.
const mouseHint = "Click: crosshair · wheel: slices · drag: window/level · Shift+drag: pan · Ctrl+wheel: zoom · H: all keys"

// The mouse-drag modes of the planes.
const (
	dragWL  = "Drag: W/L"
	dragPan = "Drag: pan"
)

// The left-right display conventions (axial and coronal planes).
const (
	convRadiological = "Radiological"
	convNeurological = "Neurological"
)

// dragPans reports whether a plain drag pans (instead of changing the window).
func (p *scanPanel) dragPans() bool { return p.dragSel.Selected == dragPan }

// arrange places the planes into the slots of the layout in p.order.
func (p *scanPanel) arrange() {
	objs := make([]fyne.CanvasObject, 3)
	for i, pl := range p.order {
		objs[i] = p.views[pl]
		p.views[pl].large = i == 0
	}
	p.grid.Objects = objs
	p.grid.Refresh()
}

// makeLarge swaps plane pl into the large slot.
func (p *scanPanel) makeLarge(pl viewer.Plane) {
	for i, q := range p.order {
		if q == pl {
			p.order[0], p.order[i] = p.order[i], p.order[0]
		}
	}
	p.arrange()
	for _, v := range p.views {
		v.layoutContent()
	}
}

// cyclePlanes brings the next plane into the large slot.
func (p *scanPanel) cyclePlanes() { p.makeLarge(p.order[1]) }

// clear removes the scan and shows msg in every plane.
func (p *scanPanel) clear(msg string) {
	p.scene = nil
	p.overlay = nil
	p.setInput(false)
	p.setTemplate(nil)
	p.tplCk.Disable()
	for _, v := range p.views {
		v.setMessage(msg)
	}
	p.presets = nil
	p.preset.Options = nil
	p.preset.ClearSelected()
	p.wlLabel.SetText("")
	p.readout.SetText("")
	p.pointer.SetText(mouseHint)
}

// showMessage replaces the planes with a message (load failed, cancelled).
func (p *scanPanel) showMessage(msg string) { p.clear(msg) }

// show puts a case's scan on screen: crosshair at the centre, its default
// window, the scan (not the model input) shown.
func (p *scanPanel) show(s *viewer.Scene) {
	p.overlay = nil
	p.setInput(false)
	p.setTemplate(nil)
	p.refreshTemplateCheck()
	p.showScene(s, s.Center())
}

// setInput records whether the model input is shown, and shows it in its
// check box without acting on it.
func (p *scanPanel) setInput(on bool) {
	p.input = on
	p.quietSel = true
	p.inputCk.SetChecked(on)
	p.quietSel = false
}

// showScene puts a scene on screen with the crosshair on its voxel nearest
// the RAS point at and the scene's default window; the overlay is kept.
func (p *scanPanel) showScene(s *viewer.Scene, at [3]float64) {
	p.scene = s
	p.at = s.Snap(at)
	p.presets = s.Presets()
	labels := make([]string, len(p.presets))
	for i, pr := range p.presets {
		labels[i] = pr.Label
	}
	p.preset.Options = labels
	p.win = s.DefaultWindow()
	p.selectPresetFor(p.win)
	for _, v := range p.views {
		v.resetZoom()
	}
	p.renderAll()
}

// selectPresetFor shows the preset whose window is w, if any.
func (p *scanPanel) selectPresetFor(w viewer.Window) {
	p.quietSel = true
	defer func() { p.quietSel = false }()
	for _, pr := range p.presets {
		if pr.Window == w {
			p.preset.SetSelected(pr.Label)
			return
		}
	}
	p.preset.ClearSelected()
}

// setWindow changes the window of all planes.
func (p *scanPanel) setWindow(w viewer.Window) {
	p.win = w
	p.selectPresetFor(w)
	p.renderAll()
}

// setOverlay sets (or with nil removes) the relevance map drawn over the scan.
func (p *scanPanel) setOverlay(o *viewer.OverlayMap) {
	p.overlay = o
	p.renderAll()
}

// setStyle changes how the overlay is drawn.
func (p *scanPanel) setStyle(st viewer.OverlayStyle) {
	p.style = st
	if p.overlay != nil && p.showOv {
		p.renderAll()
	}
}

// toggleOverlay flips the overlay's visibility (key O).
func (p *scanPanel) toggleOverlay() { p.ovCheck.SetChecked(!p.ovCheck.Checked) }

// layers is what the planes draw now.
func (p *scanPanel) layers() viewer.Layers {
	l := viewer.Layers{Window: p.win, Interp: p.interp}
	if o := p.visibleOverlay(); o != nil {
		l.Overlay, l.Style = o, p.style
	}
	if p.tpl != nil {
		l.Outline = p.tpl.Outline
	}
	return l
}

// renderAll redraws the three planes and the readout.
func (p *scanPanel) renderAll() {
	if p.scene == nil {
		return
	}
	l := p.layers()
	for _, v := range p.views {
		v.render(l)
	}
	p.wlLabel.SetText(p.windowText())
	p.refreshReadout()
}

// windowText is the window as a reader reads it: centre and width in the
// scan's units, and for a DICOM scan the VOI LUT function that applies it
// (PS3.3 C.11.2.1.2); other formats have no such function to name.
func (p *scanPanel) windowText() string {
	w := p.win.String()
	if u := p.valueUnits(); u != "" {
		w += " " + u
	}
	if p.scene != nil && p.scene.Volume().Meta.Format == "dicom" {
		w += fmt.Sprintf(" (%s, DICOM VOI function)", p.win.Function)
	}
	return w
}

// valueUnits names the scan's voxel values: Hounsfield units for CT, else
// the scanner's arbitrary units.
func (p *scanPanel) valueUnits() string {
	if p.scene == nil {
		return ""
	}
	if p.input {
		return "(model input)"
	}
	if p.scene.Volume().Meta.Modality == "CT" {
		return "HU"
	}
	return "(scanner units)"
}

// refreshReadout describes the voxel under the crosshair.
func (p *scanPanel) refreshReadout() {
	if p.scene == nil {
		return
	}
	v := p.views[p.order[0]]
	f := v.frame
	x, y := f.WorldToPixel(p.at)
	r := p.scene.ReadoutAt(f, x, y, p.visibleOverlay())
	p.readout.SetText(p.readoutText(r))
}

func (p *scanPanel) visibleOverlay() *viewer.OverlayMap {
	if p.showOv && !p.input && p.tpl == nil && !p.u.read.blinds() {
		return p.overlay
	}
	return nil
}

// readoutText describes a voxel with units: its index (as in the plane
// titles), its RAS position in millimetres, the scan's value in its units
// and, with a map shown, where the voxel's relevance ranks in the map.
func (p *scanPanel) readoutText(r viewer.Readout) string {
	if !r.Inside {
		return "outside the volume"
	}
	s := fmt.Sprintf("voxel (%d, %d, %d) · RAS (%.1f, %.1f, %.1f) mm · %s %s",
		r.Voxel[0], r.Voxel[1], r.Voxel[2], r.World[0], r.World[1], r.World[2], inference.FormatValue(float64(r.Value)), p.valueUnits())
	if r.HasOverlay {
		if top := p.overlay.TopShare(float64(r.Overlay)); top == top {
			s += fmt.Sprintf(" · relevance in the top %s %%", inference.FormatValue(top))
		} else {
			s += " · no relevance"
		}
	}
	return s
}

// pointerAt describes the voxel under the mouse in view v.
func (p *scanPanel) pointerAt(v *planeView, x, y float64) {
	if p.scene == nil {
		return
	}
	r := p.scene.ReadoutAt(v.frame, x, y, p.visibleOverlay())
	p.pointer.SetText(p.readoutText(r))
}

// moveCrosshair puts the crosshair on the voxel nearest to the RAS point.
func (p *scanPanel) moveCrosshair(world [3]float64) {
	if p.scene == nil {
		return
	}
	p.at = p.scene.Snap(world)
	p.renderAll()
}

// stepSlice moves plane pl's slice by n (positive: superior, anterior, right).
func (p *scanPanel) stepSlice(pl viewer.Plane, n int) {
	if p.scene == nil {
		return
	}
	p.at = p.scene.StepSlice(p.at, pl, n)
	p.renderAll()
}

// dragWindow adjusts the window for a mouse drag.
func (p *scanPanel) dragWindow(dx, dy float64) {
	if p.scene == nil {
		return
	}
	p.setWindow(p.scene.DragWindow(p.win, dx, dy))
}

// resetView restores zoom, pan, crosshair and window.
func (p *scanPanel) resetView() {
	if p.scene == nil {
		return
	}
	p.at = p.scene.Snap(p.scene.Center())
	for _, v := range p.views {
		v.resetZoom()
	}
	p.setWindow(p.scene.DefaultWindow())
}

// goToPeak moves the crosshair to the relevance map's strongest voxel.
func (u *UI) goToPeak() {
	oc := u.open
	if oc == nil || oc.overlayVol == nil || u.scan.scene == nil {
		return
	}
	ijk := [3]float64{float64(oc.peak[0]), float64(oc.peak[1]), float64(oc.peak[2])}
	u.scan.moveCrosshair(oc.overlayVol.Affine.Apply(ijk))
}

// zoomLarge zooms the large plane by factor f about the crosshair (keys + and -).
func (p *scanPanel) zoomLarge(f float32) {
	v := p.views[p.order[0]]
	if !v.hasFrame {
		return
	}
	at := v.crosshairPos()
	v.zoomBy(f, &at)
}

// triLayout puts object 0 in a large slot on the left (two thirds of the
// width) and objects 1 and 2 stacked on the right.
type triLayout struct{}

// MinSize is small: the planes scale to whatever room there is.
func (triLayout) MinSize([]fyne.CanvasObject) fyne.Size { return fyne.NewSize(360, 240) }

// Layout places the three planes.
func (triLayout) Layout(objs []fyne.CanvasObject, size fyne.Size) {
	if len(objs) < 3 {
		return
	}
	gap := float32(4)
	bigW := (size.Width - gap) * 2 / 3
	smallW := size.Width - gap - bigW
	smallH := (size.Height - gap) / 2
	objs[0].Move(fyne.NewPos(0, 0))
	objs[0].Resize(fyne.NewSize(bigW, size.Height))
	objs[1].Move(fyne.NewPos(bigW+gap, 0))
	objs[1].Resize(fyne.NewSize(smallW, smallH))
	objs[2].Move(fyne.NewPos(bigW+gap, smallH+gap))
	objs[2].Resize(fyne.NewSize(smallW, smallH))
}
