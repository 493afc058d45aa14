package app

import (
	"strings"

	"fyne.io/fyne/v2"
)

// wrapWords breaks s into lines no wider than room at the given text size,
// at spaces; a word wider than room stands on its own line.
func wrapWords(s string, room, size float32, style fyne.TextStyle) []string {
	var lines []string
	cur := ""
	for _, w := range strings.Fields(s) {
		next := w
		if cur != "" {
			next = cur + " " + w
		}
		if cur != "" && fyne.MeasureText(next, size, style).Width > room {
			lines = append(lines, cur)
			next = w
		}
		cur = next
	}
	return append(lines, cur)
}

// widthLayout lays its objects over its whole area and reports a change of
// width (the Cases panel's rows wrap to it).
type widthLayout struct {
	width   float32
	changed func(float32)
}

// Layout implements fyne.Layout.
func (l *widthLayout) Layout(objs []fyne.CanvasObject, size fyne.Size) {
	for _, o := range objs {
		o.Resize(size)
		o.Move(fyne.NewPos(0, 0))
	}
	if size.Width != l.width {
		l.width = size.Width
		l.changed(size.Width)
	}
}

// MinSize implements fyne.Layout.
func (l *widthLayout) MinSize(objs []fyne.CanvasObject) fyne.Size {
	var m fyne.Size
	for _, o := range objs {
		m = m.Max(o.MinSize())
	}
	return m
}
