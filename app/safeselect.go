package app

import (
	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/widget"
)

// safeSelect is a drop-down choice that opens its menu only when the window
// toolkit knows which canvas it is on. Fyne's Select opens its menu on the
// canvas its cache returns for it, and that cache forgets objects that were
// not redrawn for a minute: a click then would build the menu on no canvas
// and may end the program (a nil pointer dereference inside the toolkit;
// the suspected cause of a crash seen once, not reproduced). Here such a
// click is ignored; the next redraw makes the choice usable again.
type safeSelect struct {
	widget.Select
}

func newSafeSelect(options []string, changed func(string)) *safeSelect {
	s := &safeSelect{}
	s.Options, s.OnChanged = options, changed
	// Fyne sizes a select by its placeholder, not by its choices: with the
	// longest choice as placeholder a fixed list of choices is never cut.
	for _, o := range options {
		if len([]rune(o)) > len([]rune(s.PlaceHolder)) {
			s.PlaceHolder = o
		}
	}
	s.ExtendBaseWidget(s)
	return s
}

// onCanvas reports whether the toolkit can place the menu.
func (s *safeSelect) onCanvas() bool {
	return fyne.CurrentApp().Driver().CanvasForObject(s) != nil
}

// Tapped opens the menu when it can be placed.
func (s *safeSelect) Tapped(ev *fyne.PointEvent) {
	if !s.onCanvas() {
		s.Refresh()
		return
	}
	s.Select.Tapped(ev)
}

// TypedKey opens the menu (space, up, down) when it can be placed.
func (s *safeSelect) TypedKey(ev *fyne.KeyEvent) {
	if !s.onCanvas() {
		return
	}
	s.Select.TypedKey(ev)
}
