package app

import (
	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/widget"
)

// readPanel is the "My read" panel, where the reader's own impression will
// be recorded. Recording is not built yet; the panel says so.
type readPanel struct {
	root fyne.CanvasObject
}

func newReadPanel() *readPanel {
	l := widget.NewLabel("Recording your own read (unaided, then aided) is not built yet.")
	l.Wrapping = fyne.TextWrapWord
	l.Importance = widget.LowImportance
	return &readPanel{root: l}
}
