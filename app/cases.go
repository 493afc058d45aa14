package app

import (
	"fmt"
	"path/filepath"
	"strings"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
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
	// width is the list's width; rowMin the height of a row whose
	// subtitle takes one line.
	width, rowMin float32
}

func newCasesPanel(u *UI) *casesPanel {
	p := &casesPanel{u: u}
	p.list = widget.NewList(
		func() int { return len(u.cases) },
		func() fyne.CanvasObject {
			code := widget.NewLabelWithStyle("HMRU-0000", fyne.TextAlignLeading, fyne.TextStyle{Bold: true, Monospace: true})
			sub := widget.NewLabel("")
			sub.Truncation = fyne.TextTruncateEllipsis
			sub.SizeName = theme.SizeNameCaptionText
			verdict := widget.NewLabel("")
			verdict.Truncation = fyne.TextTruncateEllipsis
			verdict.SizeName = theme.SizeNameCaptionText
			return container.NewVBox(code, sub, verdict)
		},
		nil)
	p.list.UpdateItem = p.updateRow
	p.rowMin = p.list.CreateItem().MinSize().Height
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
	p.root = container.New(&widthLayout{changed: p.setWidth}, container.NewBorder(nil, p.note, nil, nil, p.list))
	return p
}

// updateRow fills row id: the shown code, the subtitle wrapped at word
// boundaries to the list's width (the row is made as tall as it needs,
// fitRows), and the verdict.
func (p *casesPanel) updateRow(id widget.ListItemID, o fyne.CanvasObject) {
	u := p.u
	if id >= len(u.cases) {
		return
	}
	c := u.cases[id]
	box := o.(*fyne.Container)
	box.Objects[0].(*widget.Label).SetText(u.shownCode(id))
	box.Objects[1].(*widget.Label).SetText(strings.Join(p.subtitleLines(c), "\n"))
	box.Objects[2].(*widget.Label).SetText(u.caseVerdict(c))
}

// subtitleLines is a case's subtitle as the lines it takes in the list.
func (p *casesPanel) subtitleLines(c Case) []string {
	th := p.list.Theme()
	room := p.width - 2*th.Size(theme.SizeNameInnerPadding) - 2*th.Size(theme.SizeNamePadding) - th.Size(theme.SizeNameScrollBar)
	return wrapWords(p.u.clean(p.u.caseSubtitle(c)), room, th.Size(theme.SizeNameCaptionText), fyne.TextStyle{})
}

// setWidth is called when the panel's width changes.
func (p *casesPanel) setWidth(w float32) {
	p.width = w
	p.fitRows()
	p.list.Refresh()
}

// fitRows makes each row as tall as its subtitle's lines need.
func (p *casesPanel) fitRows() {
	if p.width <= 0 {
		return
	}
	th := p.list.Theme()
	line := fyne.MeasureText("Hg", th.Size(theme.SizeNameCaptionText), fyne.TextStyle{}).Height + th.Size(theme.SizeNameLineSpacing)
	for i, c := range p.u.cases {
		p.list.SetItemHeight(i, p.rowMin+float32(len(p.subtitleLines(c))-1)*line)
	}
}

// setNote shows a line under the list (cohort progress, hints).
func (p *casesPanel) setNote(s string) { p.note.SetText(p.u.clean(s)) }

// refresh redraws the list and its selection.
func (p *casesPanel) refresh() {
	p.fitRows()
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
