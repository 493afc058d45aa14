package app

import (
	"fmt"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/dialog"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
	"brightfold/internal/volume/dicom"
)

// seriesLine describes one DICOM series for the chooser, without identifiers.
func seriesLine(s dicom.SeriesInfo) string {
	desc := s.Description
	if desc == "" {
		desc = "(no description)"
	}
	line := fmt.Sprintf("#%d  %s  ·  %s  ·  %s %d×%d", s.Number, desc, dash(s.Modality), inference.Plural(s.Slices, "image", "images"), s.Cols, s.Rows)
	if s.Plane != "" {
		line += "  ·  " + s.Plane
	}
	if s.Problem != "" {
		line += "  ·  cannot be loaded: " + s.Problem
	}
	return line
}

// chooseSeries asks which series of case i to open.
func (u *UI) chooseSeries(i int, list []dicom.SeriesInfo) {
	if i != u.cur {
		return
	}
	var d dialog.Dialog
	lst := widget.NewList(
		func() int { return len(list) },
		func() fyne.CanvasObject { return widget.NewLabel("series") },
		func(id widget.ListItemID, o fyne.CanvasObject) {
			o.(*widget.Label).SetText(u.clean(seriesLine(list[id])))
		})
	lst.OnSelected = func(id widget.ListItemID) {
		if list[id].Problem != "" {
			u.say(u.clean(list[id].Problem))
			lst.UnselectAll()
			return
		}
		d.Hide()
		u.cases[i].Series = list[id].Key
		u.casesPanel.refresh()
		u.selectCase(i)
	}
	d = dialog.NewCustom(fmt.Sprintf("%s: choose a series", u.cases[i].Code), "Cancel", lst, u.win)
	d.Resize(fyne.NewSize(760, 420))
	d.Show()
}
