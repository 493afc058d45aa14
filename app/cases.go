package app

import (
	"fmt"
	"path/filepath"
	"strings"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
)

// Case is one entry of the Cases panel: a scan to load and the code that
// names it on screen.
type Case struct {
	Code   string   // shown always, and alone in Meeting mode: "HMRU-0001", "SCAN-01"
	Paths  []string // files or folders to load (never shown in Meeting mode)
	Series string   // DICOM SeriesInstanceUID when the paths hold several series
	Note   string   // a non-identifying description, e.g. "demo variant: T2-like contrast"
	// MeetingCode names the case in Meeting mode when a reading session
	// gives one; empty means "Case NN" from the list's order.
	MeetingCode string
}

// casesPanel lists the cases.
type casesPanel struct {
	u     *UI
	root  fyne.CanvasObject
	list  *widget.List
	note  *widget.Label
	quiet bool // true while the list is selected programmatically
}

func newCasesPanel(u *UI) *casesPanel {
	p := &casesPanel{u: u}
	p.list = widget.NewList(
		func() int { return len(u.cases) },
		func() fyne.CanvasObject {
			code := widget.NewLabelWithStyle("HMRU-0000", fyne.TextAlignLeading, fyne.TextStyle{Bold: true, Monospace: true})
			sub := widget.NewLabel("")
			sub.Truncation = fyne.TextTruncateEllipsis
			sub.SizeName = "helperText"
			verdict := widget.NewLabel("")
			verdict.Truncation = fyne.TextTruncateEllipsis
			verdict.SizeName = "helperText"
			return container.NewVBox(code, sub, verdict)
		},
		func(id widget.ListItemID, o fyne.CanvasObject) {
			if id >= len(u.cases) {
				return
			}
			c := u.cases[id]
			box := o.(*fyne.Container)
			box.Objects[0].(*widget.Label).SetText(u.shownCode(id))
			box.Objects[1].(*widget.Label).SetText(u.clean(u.caseSubtitle(c)))
			box.Objects[2].(*widget.Label).SetText(u.caseVerdict(c))
		})
	p.list.OnSelected = func(id widget.ListItemID) {
		if !p.quiet {
			u.selectCase(id)
		}
		// The list took the keyboard focus with the click; give it back
		// to the window so that the shortcuts work at once.
		u.refocus()
	}
	p.note = widget.NewLabel("")
	p.note.Wrapping = fyne.TextWrapWord
	p.root = container.NewBorder(nil, p.note, nil, nil, p.list)
	return p
}

// setNote shows a line under the list (cohort progress, hints).
func (p *casesPanel) setNote(s string) { p.note.SetText(p.u.clean(s)) }

// refresh redraws the list and its selection.
func (p *casesPanel) refresh() {
	p.list.Refresh()
	p.quiet = true
	if p.u.cur >= 0 {
		p.list.Select(p.u.cur)
	} else {
		p.list.UnselectAll()
	}
	p.quiet = false
}

// caseSubtitle is the second line of a case row: the note, or for a scan
// the user opened, outside Meeting mode, its file or folder name.
func (u *UI) caseSubtitle(c Case) string {
	if c.Note != "" || u.meeting || len(c.Paths) == 0 {
		return c.Note
	}
	name := filepath.Base(c.Paths[0])
	if len(c.Paths) > 1 {
		name += fmt.Sprintf(" (+%d)", len(c.Paths)-1)
	}
	return name
}

// addPaths adds user scans as cases, one per path (a folder is one case),
// and opens the first new one when open is set.
func (u *UI) addPaths(paths []string, open bool) {
	first := len(u.cases)
	for _, p := range paths {
		u.cases = append(u.cases, Case{Code: u.nextScanCode(), Paths: []string{p}})
	}
	u.casesPanel.refresh()
	if open && len(u.cases) > first {
		u.selectCase(first)
	}
}

// nextScanCode numbers user-opened scans SCAN-01, SCAN-02, ...
func (u *UI) nextScanCode() string {
	n := 1
	for _, c := range u.cases {
		if len(c.Code) > 5 && c.Code[:5] == "SCAN-" {
			n++
		}
	}
	return fmt.Sprintf("SCAN-%02d", n)
}

// stepCase opens the next (d = 1) or previous (d = -1) case.
func (u *UI) stepCase(d int) {
	if len(u.cases) == 0 {
		return
	}
	i := u.cur + d
	if u.cur < 0 {
		i = 0
	}
	i = (i + len(u.cases)) % len(u.cases)
	u.selectCase(i)
}

// caseVerdict is a scored case's verdict for its row in the list: "in
// distribution · 0.82", or "OUT OF DISTRIBUTION" without a probability.
// Unscored cases have none. A reading session that hides the model's
// output during an unaided read sets hideScores.
func (u *UI) caseVerdict(c Case) string {
	j := u.store.jobs[caseKey(c)]
	if j == nil {
		return ""
	}
	select {
	case <-j.scored:
	default:
		return ""
	}
	if j.result == nil {
		return ""
	}
	if inference.Withheld(j.result) {
		return "out of distribution"
	}
	if u.hideScores {
		return "in distribution"
	}
	return "in distribution · " + inference.FormatProbability(j.result.Prediction.Probability)
}

// joinNonEmpty joins the non-empty parts with sep.
func joinNonEmpty(sep string, parts ...string) string {
	var out []string
	for _, p := range parts {
		if p != "" {
			out = append(out, p)
		}
	}
	return strings.Join(out, sep)
}
