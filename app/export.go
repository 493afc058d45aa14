package app

import (
	"fmt"
	"image"
	"image/draw"
	"image/png"
	"io"
	"os"
	"path/filepath"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/dialog"
	"fyne.io/fyne/v2/storage"

	"brightfold/internal/atomicfile"
)

// exportImage is the current view as shown: the notice banner across the
// top, then the Scan panel with the reading column (Fit check, Evidence)
// beside it, cut from the rendered window so that the file shows exactly what
// the screen shows (and, in Meeting mode, hides what the screen hides).
func (u *UI) exportImage() (image.Image, error) {
	c := u.win.Canvas()
	full, err := opaque(c.Capture())
	if err != nil {
		return nil, fmt.Errorf("export: %w", err)
	}
	k := float32(full.Bounds().Dx()) / c.Size().Width
	rect := func(objs ...fyne.CanvasObject) image.Rectangle {
		var r image.Rectangle
		for _, o := range objs {
			p := fyne.CurrentApp().Driver().AbsolutePositionForObject(o)
			s := o.Size()
			q := image.Rect(int(p.X*k), int(p.Y*k), int((p.X+s.Width)*k+0.5), int((p.Y+s.Height)*k+0.5))
			r = r.Union(q)
		}
		return r.Intersect(full.Bounds())
	}
	banner := rect(u.bannerBox)
	body := rect(u.scanSection, u.column)
	if banner.Empty() || body.Empty() {
		return nil, fmt.Errorf("export: the view is not laid out yet")
	}
	w := max(banner.Dx(), body.Dx())
	out := image.NewRGBA(image.Rect(0, 0, w, banner.Dy()+body.Dy()))
	draw.Draw(out, out.Bounds(), image.NewUniform(colInk), image.Point{}, draw.Src)
	draw.Draw(out, image.Rect(0, 0, banner.Dx(), banner.Dy()), full, banner.Min, draw.Src)
	draw.Draw(out, image.Rect(0, banner.Dy(), body.Dx(), banner.Dy()+body.Dy()), full, body.Min, draw.Src)
	return out, nil
}

// exportName is the suggested file name: the case code and the large plane.
func (u *UI) exportName() string {
	code := "brightfold"
	if u.cur >= 0 && u.cur < len(u.cases) {
		code = u.cases[u.cur].Code
	}
	return fmt.Sprintf("%s-%s.png", code, u.scan.order[0])
}

// exportView saves the current view as PNG. Outside Meeting mode a save
// dialog asks where; in Meeting mode (where a file dialog would show folder
// names) it goes to the export folder and only the file name is shown.
func (u *UI) exportView() {
	img, err := u.exportImage()
	if err != nil {
		u.fail(err)
		return
	}
	write := func(w io.Writer) error { return png.Encode(w, img) }
	if u.meeting {
		dir, err := exportDir()
		if err != nil {
			u.fail(err)
			return
		}
		name := uniqueName(dir, u.exportName())
		if err := atomicfile.Write(filepath.Join(dir, name), write); err != nil {
			u.fail(err)
			return
		}
		u.say("Exported " + name + " to the Brightfold export folder.")
		return
	}
	d := dialog.NewFileSave(func(wc fyne.URIWriteCloser, err error) {
		if err != nil {
			u.fail(err)
			return
		}
		if wc == nil {
			return
		}
		path := wc.URI().Path()
		wc.Close()
		if err := atomicfile.Write(path, write); err != nil {
			u.fail(err)
			return
		}
		u.say("Exported " + path)
	}, u.win)
	d.SetFileName(u.exportName())
	if dir, err := exportDir(); err == nil {
		if l, err := storage.ListerForURI(storage.NewFileURI(dir)); err == nil {
			d.SetLocation(l)
		}
	}
	d.Resize(fyne.NewSize(900, 640))
	d.Show()
}

// exportFolderName is the export folder's name in the home folder.
const exportFolderName = "Brightfold exports"

// exportDir is the folder for exported views: ~/Brightfold exports.
func exportDir() (string, error) {
	home, err := os.UserHomeDir()
	if err != nil {
		return "", fmt.Errorf("export: no home folder: %w", err)
	}
	dir := filepath.Join(home, exportFolderName)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", fmt.Errorf("export: %w", err)
	}
	return dir, nil
}

// uniqueName returns name, or name with a number added, that is not yet in dir.
func uniqueName(dir, name string) string {
	ext := filepath.Ext(name)
	stem := name[:len(name)-len(ext)]
	for i := 1; ; i++ {
		if _, err := os.Stat(filepath.Join(dir, name)); os.IsNotExist(err) {
			return name
		}
		name = fmt.Sprintf("%s-%d%s", stem, i+1, ext)
	}
}
