package app

import (
	"image/color"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
)

// fitPanel is the "Fit check" panel: whether the scan is the kind of scan
// the model knows. An out-of-distribution verdict fills a vermilion block
// with large words; each check follows with its value, limit and sentence.
type fitPanel struct {
	u        *UI
	root     fyne.CanvasObject
	block    *canvas.Rectangle
	headline *canvas.Text
	sentence *widget.Label
	checks   *fyne.Container
}

// Verdict words on screen.
const (
	verdictOOD = "OUT OF DISTRIBUTION"
	verdictIn  = "In distribution"
)

func newFitPanel(u *UI) *fitPanel {
	p := &fitPanel{u: u}
	p.block = canvas.NewRectangle(colPending)
	p.block.CornerRadius = 4
	p.headline = canvas.NewText("", colText)
	p.headline.TextStyle = fyne.TextStyle{Bold: true}
	p.headline.TextSize = 26
	p.sentence = widget.NewLabel("")
	p.sentence.Wrapping = fyne.TextWrapWord
	p.checks = container.NewVBox()
	// The verdict's words are in the reading column's header; here the
	// block carries the sentence in the verdict's colour, then the rows.
	head := container.NewStack(p.block, container.NewPadded(p.sentence))
	p.root = container.NewVBox(head, p.checks)
	p.clear()
	return p
}

// setBlock colours the verdict block and sets its words.
func (p *fitPanel) setBlock(c color.Color, headline, sentence string) {
	p.block.FillColor = c
	p.block.Refresh()
	p.headline.Text = headline
	p.headline.Refresh()
	p.sentence.SetText(p.u.clean(sentence))
}

// clear shows that the checks have not run for the open case.
func (p *fitPanel) clear() {
	p.setBlock(colPending, "Checking…", "The fit check runs once the scan is loaded.")
	p.checks.Objects = nil
	p.checks.Refresh()
	p.u.reflow()
}

// unavailable says why no verdict can be given.
func (p *fitPanel) unavailable(why string) {
	p.setBlock(colPending, "No verdict", why)
	p.checks.Objects = nil
	p.checks.Refresh()
	p.u.reflow()
}

// showCancelled says the checks were stopped.
func (p *fitPanel) showCancelled() {
	p.unavailable("The fit check was cancelled. Reopen the case to run it again.")
}

// checkRow is one fit check as shown.
type checkRow struct {
	Name, Detail, Sentence string
	Pass, Required         bool
}

// showChecks fills the panel with a verdict and its checks.
func (p *fitPanel) showChecks(ood bool, rows []checkRow) {
	if ood {
		failed := 0
		for _, r := range rows {
			if !r.Pass {
				failed++
			}
		}
		p.setBlock(colOOD, verdictOOD, inference.Plural(failed, "check fails", "checks fail")+
			": this scan is unlike the scans the model was trained on. Do not rely on its probability.")
	} else {
		p.setBlock(colInDist, verdictIn, "Every check passes: the scan resembles the model's training scans. This does not make the probability a diagnosis.")
	}
	var objs []fyne.CanvasObject
	for _, r := range rows {
		objs = append(objs, p.row(r))
	}
	p.checks.Objects = objs
	p.checks.Refresh()
	p.u.reflow()
}

// row draws one check: a coloured mark, then the name, the value with its
// limit, and the sentence, all wrapping to the column's width.
func (p *fitPanel) row(r checkRow) fyne.CanvasObject {
	markCol, mark := colInDist, "pass"
	if !r.Pass {
		markCol, mark = colOOD, "FAIL"
	}
	chip := canvas.NewText(mark, markCol)
	chip.TextStyle = fyne.TextStyle{Bold: true, Monospace: true}
	head := widget.NewRichText(
		&widget.TextSegment{Text: r.Name, Style: widget.RichTextStyle{Inline: true, TextStyle: fyne.TextStyle{Bold: true}}},
		&widget.TextSegment{Text: "   " + checkDetail(r), Style: widget.RichTextStyle{Inline: true, ColorName: theme.ColorNamePlaceHolder}},
	)
	head.Wrapping = fyne.TextWrapWord
	sent := widget.NewLabel(p.u.clean(r.Sentence))
	sent.Wrapping = fyne.TextWrapWord
	return container.NewVBox(
		container.NewBorder(nil, nil, container.NewVBox(container.NewPadded(chip)), nil, container.NewVBox(head, sent)),
		widget.NewSeparator())
}

// checkDetail is the value with its units and the limit, marked advisory
// when the check does not decide the verdict.
func checkDetail(r checkRow) string {
	if !r.Required {
		return joinNonEmpty(" · ", r.Detail, "advisory")
	}
	return r.Detail
}
