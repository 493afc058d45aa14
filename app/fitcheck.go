package app

import (
	"image/color"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
)

// fitPanel is the "Fit check" panel: whether the scan is the kind of scan
// the model knows. The verdict block carries its sentence (the fit score is
// in the header);
// the causes of a failure follow, each with the checks that saw it, then
// the passing checks.
type fitPanel struct {
	u        *UI
	root     fyne.CanvasObject
	block    *canvas.Rectangle
	headline *canvas.Text
	sentence *widget.Label
	causes   *fyne.Container // one row per cause of a failure
	passing  *widget.Label   // "n checks pass", above their rows
	checks   *fyne.Container // the passing checks
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
	p.causes = container.NewVBox()
	p.passing = widget.NewLabel("")
	p.passing.TextStyle = fyne.TextStyle{Bold: true}
	p.passing.Hide()
	p.checks = container.NewVBox()
	// The verdict's words are in the reading column's header; here the
	// block carries the sentence in the verdict's colour, then the rows.
	head := container.NewStack(p.block, container.NewPadded(p.sentence))
	p.root = container.NewVBox(head, p.causes, p.passing, p.checks)
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
	p.empty()
	p.u.reflow()
}

// unavailable says why no verdict can be given.
func (p *fitPanel) unavailable(why string) {
	p.setBlock(colPending, "No verdict", why)
	p.empty()
	p.u.reflow()
}

// empty removes the causes and checks of a previous case.
func (p *fitPanel) empty() {
	p.causes.Objects = nil
	p.causes.Refresh()
	p.passing.Hide()
	p.checks.Objects = nil
	p.checks.Refresh()
}

// showCancelled says the checks were stopped.
func (p *fitPanel) showCancelled() {
	p.unavailable("The fit check was cancelled. Reopen the case to run it again.")
}

// showChecks fills the panel from a result: the verdict, then each cause
// of a failure (inference.GroupCauses, most severe first) with the checks
// that saw it, then the passing checks.
func (p *fitPanel) showChecks(r *inference.Result) {
	ood := r.Verdict == fitcheck.OutOfDistribution
	causes := r.Causes
	if causes == nil {
		causes = inference.GroupCauses(r.Checks)
	}
	if ood {
		p.setBlock(colOOD, verdictOOD, inference.Plural(inference.CountCauses(causes), "cause", "causes")+
			": this scan is unlike the scans the model was trained on. Do not rely on its probability.")
	} else {
		p.setBlock(colInDist, verdictIn, "Every required check passes: the scan resembles the model's training scans. This does not make the probability a diagnosis.")
	}
	byName := map[string]fitcheck.Check{}
	for _, c := range r.Checks {
		byName[c.Name] = c
	}
	var rows []fyne.CanvasObject
	for _, c := range causes {
		rows = append(rows, p.causeRow(c, byName))
	}
	p.causes.Objects = rows
	p.causes.Refresh()
	rows = nil
	for _, c := range r.Checks {
		if c.Pass {
			rows = append(rows, p.row(c))
		}
	}
	p.checks.Objects = rows
	p.checks.Refresh()
	if len(rows) > 0 {
		p.passing.SetText(inference.Plural(len(rows), "check passes", "checks pass"))
		p.passing.Show()
	} else {
		p.passing.Hide()
	}
	p.u.reflow()
}

// causeRow draws one cause: a mark, its title (advisory when no required
// check saw it), its explanation, then the checks that saw it with their
// values against the training limits.
func (p *fitPanel) causeRow(c inference.Cause, byName map[string]fitcheck.Check) fyne.CanvasObject {
	markCol, mark := colOOD, "FAIL"
	if !c.Required {
		markCol, mark = colMuted, "note"
	}
	chip := canvas.NewText(mark, markCol)
	chip.TextStyle = fyne.TextStyle{Bold: true, Monospace: true}
	segs := []widget.RichTextSegment{
		&widget.TextSegment{Text: inference.CauseTitle(c), Style: widget.RichTextStyle{TextStyle: fyne.TextStyle{Bold: true}}},
		&widget.TextSegment{Text: p.u.clean(c.Explanation), Style: widget.RichTextStyleParagraph},
	}
	for _, line := range inference.CauseChecks(c, byName) {
		segs = append(segs, &widget.TextSegment{Text: "•  " + line, Style: widget.RichTextStyle{ColorName: theme.ColorNamePlaceHolder}})
	}
	body := widget.NewRichText(segs...)
	body.Wrapping = fyne.TextWrapWord
	return container.NewVBox(
		container.NewBorder(nil, nil, container.NewVBox(container.NewPadded(chip)), nil, body),
		widget.NewSeparator())
}

// row draws one passing check: a mark, then the name, the value with its
// limit, and the sentence, all wrapping to the column's width.
func (p *fitPanel) row(c fitcheck.Check) fyne.CanvasObject {
	chip := canvas.NewText("pass", colInDist)
	chip.TextStyle = fyne.TextStyle{Bold: true, Monospace: true}
	detail := inference.CheckDetail(c)
	if !c.Required {
		detail = joinNonEmpty(" · ", detail, "advisory")
	}
	head := widget.NewRichText(
		&widget.TextSegment{Text: inference.CheckTitle(c.Name), Style: widget.RichTextStyle{Inline: true, TextStyle: fyne.TextStyle{Bold: true}}},
		&widget.TextSegment{Text: "   " + detail, Style: widget.RichTextStyle{Inline: true, ColorName: theme.ColorNamePlaceHolder}},
	)
	head.Wrapping = fyne.TextWrapWord
	sent := widget.NewLabel(p.u.clean(c.Explanation))
	sent.Wrapping = fyne.TextWrapWord
	return container.NewVBox(
		container.NewBorder(nil, nil, container.NewVBox(container.NewPadded(chip)), nil, container.NewVBox(head, sent)),
		widget.NewSeparator())
}
