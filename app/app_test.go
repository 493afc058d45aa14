package app

import (
	"strings"
	"testing"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/test"

	"brightfold/internal/notice"
	"brightfold/viewer"
)

// The three planes of a real scan show every slice of its closest-canonical
// grid, as nibabel counts them, with the orientation letters of the
// radiological convention (patient right on the image left for axial and
// coronal; anterior on the left for sagittal: common practice).
func TestOpenScanShowsThreePlanes(t *testing.T) {
	path := anatomical(t)
	dims := canonicalShape(t, path) // python3-nibabel as_closest_canonical
	h := newHarness(t, Options{})
	h.open(path)
	sp := h.u.scan
	want := map[viewer.Plane]struct {
		slices              int
		left, right, top, b string
	}{
		viewer.Axial:    {dims[2], "R", "L", "A", "P"},
		viewer.Coronal:  {dims[1], "R", "L", "S", "I"},
		viewer.Sagittal: {dims[0], "A", "P", "S", "I"},
	}
	for pl, w := range want {
		v := sp.views[pl]
		if !v.hasFrame || v.img.Image == nil {
			t.Fatalf("%v: no image", pl)
		}
		if got := sp.scene.SliceCount(pl); got != w.slices {
			t.Errorf("%v: %d slices, nibabel's canonical shape gives %d", pl, got, w.slices)
		}
		if !strings.Contains(v.title.Text, "of 0–"+itoa(w.slices-1)) {
			t.Errorf("%v: title %q does not count %d slices", pl, v.title.Text, w.slices)
		}
		// The slice in the title is the crosshair voxel's index in the readout.
		ijk, _ := sp.scene.NearestVoxel(sp.at)
		axis := v.frame.SliceAxis()
		if want := "ijk"[axis:axis+1] + " = " + itoa(ijk[axis]) + " of"; !strings.Contains(v.title.Text, want) {
			t.Errorf("%v: title %q, crosshair voxel %v", pl, v.title.Text, ijk)
		}
		got := [4]string{v.letters[0].Text, v.letters[1].Text, v.letters[2].Text, v.letters[3].Text}
		if got != [4]string{w.left, w.right, w.top, w.b} {
			t.Errorf("%v: letters (left, right, top, bottom) %v, want %v", pl, got, [4]string{w.left, w.right, w.top, w.b})
		}
	}
	if !strings.Contains(sp.readout.Text, "voxel (") || !strings.Contains(sp.readout.Text, "(scanner units)") {
		t.Errorf("readout %q", sp.readout.Text)
	}
	if !hasText(h.texts(), notice.Full) {
		t.Error("the notice banner is not rendered")
	}
}

// Keys step slices, swap planes and toggle the overlay; the wheel scrolls
// the plane under the pointer; a click moves the crosshair; a drag changes
// window/level.
func TestKeysAndMouse(t *testing.T) {
	h := newHarness(t, Options{})
	h.open(anatomical(t))
	sp := h.u.scan
	ax := sp.views[viewer.Axial]
	slice := ax.frame.Slice

	h.u.typedKey(&fyne.KeyEvent{Name: fyne.KeyUp})
	if ax.frame.Slice != slice+1 {
		t.Errorf("Up: axial slice %d, want %d", ax.frame.Slice, slice+1)
	}
	h.u.typedKey(&fyne.KeyEvent{Name: fyne.KeyPageDown})
	if ax.frame.Slice != slice {
		t.Errorf("Page Down: axial slice %d, want %d", ax.frame.Slice, slice)
	}

	h.u.typedKey(&fyne.KeyEvent{Name: fyne.Key2})
	if sp.order[0] != viewer.Coronal || !sp.views[viewer.Coronal].large || ax.large {
		t.Errorf("key 2: large plane %v", sp.order[0])
	}
	h.u.typedKey(&fyne.KeyEvent{Name: fyne.KeyP})
	if sp.order[0] == viewer.Coronal {
		t.Error("key P did not swap planes")
	}
	h.u.typedKey(&fyne.KeyEvent{Name: fyne.Key1})

	on := sp.ovCheck.Checked
	h.u.typedKey(&fyne.KeyEvent{Name: fyne.KeyO})
	if sp.ovCheck.Checked == on || sp.showOv == on {
		t.Error("key O did not toggle the overlay")
	}

	// Wheel over the axial view.
	c := h.w.Canvas()
	centre := fyne.CurrentApp().Driver().AbsolutePositionForObject(ax).Add(fyne.NewPos(ax.Size().Width/2, ax.Size().Height/2))
	slice = ax.frame.Slice
	test.Scroll(c, centre, 0, 10)
	if ax.frame.Slice != slice+1 {
		t.Errorf("wheel up: axial slice %d, want %d", ax.frame.Slice, slice+1)
	}

	// A click left of the centre moves the crosshair towards the patient's
	// right (radiological convention), keeping the axial slice.
	before := sp.at
	slice = ax.frame.Slice
	test.TapAt(ax, fyne.NewPos(ax.Size().Width/2-40, ax.Size().Height/2))
	if !(sp.at[0] > before[0]) || ax.frame.Slice != slice {
		t.Errorf("click: crosshair %v from %v (R should grow), slice %d from %d", sp.at, before, ax.frame.Slice, slice)
	}

	// Dragging right widens the window.
	w0 := sp.win
	test.Drag(c, centre, 30, 0)
	if !(sp.win.Width > w0.Width) || sp.win.Center != w0.Center {
		t.Errorf("drag right: window %v from %v", sp.win, w0)
	}
	if !strings.Contains(sp.wlLabel.Text, sp.win.String()) {
		t.Errorf("window label %q", sp.wlLabel.Text)
	}

	// + zooms about the crosshair, which stays where it is on screen.
	c0, z0 := ax.crosshairPos(), ax.zoom
	h.u.typedRune('+')
	if c1 := ax.crosshairPos(); ax.zoom <= z0 || abs32(c1.X-c0.X) > 0.5 || abs32(c1.Y-c0.Y) > 0.5 {
		t.Errorf("zoom %v -> %v moved the crosshair from %v to %v", z0, ax.zoom, c0, c1)
	}

	// In pan mode a drag moves the image and leaves the window alone.
	sp.dragSel.SetSelected(dragPan)
	w1, pan0 := sp.win, ax.pan
	test.Drag(c, centre, 25, -10)
	if sp.win != w1 || ax.pan == pan0 {
		t.Errorf("pan drag: window %v (was %v), pan %v (was %v)", sp.win, w1, ax.pan, pan0)
	}
	h.u.typedKey(keyEvent("R"))
	if ax.zoom != 1 || ax.pan != (fyne.Position{}) {
		t.Errorf("R: zoom %v pan %v", ax.zoom, ax.pan)
	}
}

func abs32(x float32) float32 {
	if x < 0 {
		return -x
	}
	return x
}

func hasText(texts []string, s string) bool {
	for _, t := range texts {
		if strings.Contains(t, s) {
			return true
		}
	}
	return false
}

func itoa(n int) string {
	if n == 0 {
		return "0"
	}
	var b []byte
	for ; n > 0; n /= 10 {
		b = append([]byte{byte('0' + n%10)}, b...)
	}
	return string(b)
}
