package app

import (
	"fyne.io/fyne/v2"
	"github.com/go-gl/glfw/v3.3/glfw"
)

// screenSize is the primary monitor's size in pixels, or zero when it
// cannot be read. Fyne has no call for it; its desktop driver runs on GLFW,
// which it has initialised (on this, the main, thread) by the time a window
// exists.
func screenSize() (s fyne.Size) {
	defer func() {
		if recover() != nil {
			s = fyne.Size{}
		}
	}()
	m := glfw.GetPrimaryMonitor()
	if m == nil {
		return fyne.Size{}
	}
	mode := m.GetVideoMode()
	if mode == nil {
		return fyne.Size{}
	}
	return fyne.NewSize(float32(mode.Width), float32(mode.Height))
}
