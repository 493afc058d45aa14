package app

import (
	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/dialog"
	"fyne.io/fyne/v2/widget"

	"brightfold/viewer"
)

// keyHelp lists the keyboard and mouse controls, as the help dialog shows them.
var keyHelp = [][2]string{
	{"Up / Page Up", "next slice of the large plane (towards superior, anterior or right)"},
	{"Down / Page Down", "previous slice of the large plane"},
	{"P", "swap the next plane into the large slot"},
	{"1 / 2 / 3", "axial / coronal / sagittal in the large slot"},
	{"O", "show or hide the relevance overlay"},
	{"N / B", "next / previous case"},
	{"M", "Meeting mode on or off"},
	{"+ / -", "zoom the large plane in / out"},
	{"R", "reset zoom, pan, crosshair and window"},
	{"H or F1", "this list"},
	{"Click", "move the crosshair to the voxel"},
	{"Mouse wheel", "scroll slices of that plane (Ctrl + wheel zooms)"},
	{"Drag", "window/level: right widens the window, down raises the level"},
	{"Shift + drag, middle drag", "pan (or choose \"Drag: pan\")"},
}

// installShortcuts binds the keys of keyHelp on the window's canvas.
func (u *UI) installShortcuts() {
	c := u.win.Canvas()
	c.SetOnTypedKey(u.typedKey)
	c.SetOnTypedRune(u.typedRune)
}

// typedKey handles a key typed while no widget has the focus.
func (u *UI) typedKey(ev *fyne.KeyEvent) {
	sp := u.scan
	large := sp.order[0]
	switch ev.Name {
	case fyne.KeyUp, fyne.KeyPageUp:
		sp.stepSlice(large, 1)
	case fyne.KeyDown, fyne.KeyPageDown:
		sp.stepSlice(large, -1)
	case fyne.KeyP:
		sp.cyclePlanes()
	case fyne.Key1:
		sp.makeLarge(viewer.Axial)
	case fyne.Key2:
		sp.makeLarge(viewer.Coronal)
	case fyne.Key3:
		sp.makeLarge(viewer.Sagittal)
	case fyne.KeyO:
		sp.toggleOverlay()
	case fyne.KeyN:
		u.stepCase(1)
	case fyne.KeyB:
		u.stepCase(-1)
	case fyne.KeyM:
		u.setMeeting(!u.meeting)
	case fyne.KeyR:
		sp.resetView()
	case fyne.KeyH, fyne.KeyF1:
		u.showHelp()
	}
}

// typedRune handles + and - for zoom.
func (u *UI) typedRune(r rune) {
	switch r {
	case '+', '=':
		u.scan.zoomLarge(1.25)
	case '-':
		u.scan.zoomLarge(0.8)
	}
}

// showHelp lists the controls.
func (u *UI) showHelp() {
	grid := container.NewGridWithColumns(2)
	for _, k := range keyHelp {
		grid.Add(widget.NewLabelWithStyle(k[0], fyne.TextAlignTrailing, fyne.TextStyle{Bold: true}))
		grid.Add(widget.NewLabel(k[1]))
	}
	d := dialog.NewCustom("Keys and mouse", "Close", grid, u.win)
	d.Show()
}

// refocus gives the keyboard back to the window after a click on a list,
// choice, check or slider took it, so that the shortcuts work wherever the
// reader clicked; a text field keeps its focus.
func (u *UI) refocus() {
	c := u.win.Canvas()
	if c == nil {
		return
	}
	switch c.Focused().(type) {
	case nil, *widget.Entry, *widget.SelectEntry:
		return
	}
	c.Unfocus()
}
