package app

import (
	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/dialog"
	"fyne.io/fyne/v2/widget"
)

// showOpenMenu offers a file or a folder (a DICOM series, or several scans).
func (u *UI) showOpenMenu() {
	if u.meeting {
		u.say("Opening files shows folder and file names: switch Meeting mode off first, or drop files on the window.")
		return
	}
	m := fyne.NewMenu("",
		fyne.NewMenuItem("Scan file (NIfTI or DICOM)…", u.openFileDialog),
		fyne.NewMenuItem("Folder (DICOM series)…", u.openFolderDialog),
	)
	pos := fyne.CurrentApp().Driver().AbsolutePositionForObject(u.openBtn)
	widget.ShowPopUpMenuAtPosition(m, u.win.Canvas(), pos.Add(fyne.NewPos(0, u.openBtn.Size().Height)))
}

func (u *UI) openFileDialog() {
	d := dialog.NewFileOpen(func(r fyne.URIReadCloser, err error) {
		if err != nil {
			u.fail(err)
			return
		}
		if r == nil {
			return
		}
		p := r.URI().Path()
		r.Close()
		u.addPaths([]string{p}, true)
	}, u.win)
	d.Resize(fyne.NewSize(900, 640))
	d.Show()
}

func (u *UI) openFolderDialog() {
	d := dialog.NewFolderOpen(func(l fyne.ListableURI, err error) {
		if err != nil {
			u.fail(err)
			return
		}
		if l == nil {
			return
		}
		u.addPaths([]string{l.Path()}, true)
	}, u.win)
	d.Resize(fyne.NewSize(900, 640))
	d.Show()
}

// dropped opens files and folders dropped on the window, one case each.
func (u *UI) dropped(_ fyne.Position, uris []fyne.URI) {
	var paths []string
	for _, x := range uris {
		if x.Scheme() == "file" {
			paths = append(paths, x.Path())
		}
	}
	if len(paths) == 0 {
		u.say("Only local files and folders can be opened.")
		return
	}
	u.addPaths(paths, true)
}
