package app

import (
	"fmt"
	"image/color"
	"strings"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
)

// headPanel is the reading column's header, which never scrolls: the
// fit-check verdict with its causes, then the probability (or, when the
// fit check fails, the word that it is withheld, with a button to see it
// anyway), the model and what the probability assumes.
type headPanel struct {
	u        *UI
	root     fyne.CanvasObject
	block    *canvas.Rectangle
	verdict  *canvas.Text
	causes   *widget.Label
	prob     *canvas.Text
	probNote *widget.Label
	anyway   *widget.Button
}

// maxCauses is how many causes the header names.
const maxCauses = 3

// Words of the header.
const (
	withheldText = "Probability withheld"
	unreliable   = "unreliable"
)

func newHeadPanel(u *UI) *headPanel {
	p := &headPanel{u: u}
	p.block = canvas.NewRectangle(colPending)
	p.block.CornerRadius = 4
	p.verdict = canvas.NewText("", colText)
	p.verdict.TextStyle = fyne.TextStyle{Bold: true}
	p.verdict.TextSize = 22
	p.causes = widget.NewLabel("")
	p.causes.Wrapping = fyne.TextWrapWord
	p.prob = canvas.NewText("—", colText)
	p.prob.TextStyle = fyne.TextStyle{Bold: true}
	p.prob.TextSize = 30
	p.probNote = widget.NewLabel("")
	p.probNote.Wrapping = fyne.TextWrapWord
	p.probNote.SizeName = theme.SizeNameCaptionText
	p.anyway = widget.NewButton("Show anyway", u.showAnyway)
	p.anyway.Importance = widget.LowImportance
	p.anyway.Hide()
	verdict := container.NewStack(p.block, container.NewPadded(container.NewVBox(p.verdict, p.causes)))
	// "Show anyway" goes beside the note, not the large probability, so
	// the header fits the reading column of a 1280-pixel window.
	p.root = container.NewVBox(verdict, p.prob, container.NewBorder(nil, nil, nil, p.anyway, p.probNote))
	p.clear()
	return p
}

// clear shows that the open case has no verdict yet.
func (p *headPanel) clear() {
	p.setVerdict(colPending, "Checking…", "")
	p.setProb("—", colMuted, "")
	p.anyway.Hide()
}

// unavailable says why there is neither verdict nor probability.
func (p *headPanel) unavailable(why string) {
	p.setVerdict(colPending, "No verdict", p.u.clean(why))
	p.setProb("—", colMuted, "")
	p.anyway.Hide()
}

// setVerdict colours the verdict block and sets its words.
func (p *headPanel) setVerdict(col color.Color, headline, causes string) {
	p.block.FillColor = col
	p.block.Refresh()
	p.verdict.Text = headline
	p.verdict.Refresh()
	p.causes.SetText(causes)
	if causes == "" {
		p.causes.Hide()
	} else {
		p.causes.Show()
	}
}

// setProb sets the probability line and the note under it.
func (p *headPanel) setProb(text string, col color.Color, note string) {
	p.prob.Text = text
	p.prob.Color = col
	p.prob.Refresh()
	p.probNote.SetText(note)
}

// show fills the header from a scored case; withheld keeps the probability
// out of it (an out-of-distribution verdict the reader has not looked past).
func (p *headPanel) show(oc *openCase, withheld bool) {
	r := oc.result
	pos := inference.ClassName(oc.card.PositiveClass)
	if inference.Withheld(r) {
		p.setVerdict(colOOD, verdictOOD, headCauses(r))
	} else {
		p.setVerdict(colInDist, verdictIn, inference.FitScoreNote(r))
	}
	switch {
	case oc.unprepared != nil || r.Prepared == nil:
		p.setProb("No probability", colMuted, "The scan could not be prepared for the model, so the model was not run.")
		p.anyway.Hide()
	case withheld:
		p.setProb(withheldText, colMuted, "The scan is unlike the training scans: a probability for "+pos+" would not mean what it says.")
		p.anyway.Show()
	case inference.Withheld(r):
		p.setProb(inference.FormatProbability(r.Prediction.Probability)+"  ("+unreliable+")", colMuted,
			fmt.Sprintf("Unreliable because the fit check fails. Probability of %s as computed, shown on request. Do not rely on it: the scan is unlike the training scans.", pos))
		p.anyway.Hide()
	default:
		p.setProb(inference.FormatProbability(r.Prediction.Probability), colText,
			fmt.Sprintf("Probability of %s (%s). %s", pos, inference.CalibrationLabel(oc.card), inference.PrevalenceNote(oc.card)))
		p.anyway.Hide()
	}
	p.u.reflow()
}

// headCauses are the header's words for an out-of-distribution result: the
// first causes (inference.GroupCauses, most severe first), each with the
// checks that saw it by name, then the fit score. The header never scrolls,
// so the causes' explanations and the checks' values are in the Fit check
// panel below it.
func headCauses(r *inference.Result) string {
	causes := r.Causes
	if causes == nil {
		causes = inference.GroupCauses(r.Checks)
	}
	var lines []string
	for i, c := range causes {
		if i == maxCauses {
			lines = append(lines, moreCauses(causes[i:]))
			break
		}
		names := make([]string, len(c.Checks))
		for j, n := range c.Checks {
			names[j] = inference.CheckTitle(n)
		}
		lines = append(lines, fmt.Sprintf("%s: %s.", inference.CauseTitle(c), strings.Join(names, ", ")))
	}
	return strings.Join(append(lines, inference.FitScoreNote(r)), "\n")
}

// moreCauses is the header's last line when causes do not fit: how many
// more causes (consequence entries not counted, inference.CountCauses), or
// that only checks that may follow from the causes above are left.
func moreCauses(rest []inference.Cause) string {
	if n := inference.CountCauses(rest); n > 0 {
		return fmt.Sprintf("and %s below, under Fit check", inference.Plural(n, "more cause", "more causes"))
	}
	return "and checks that may follow from these causes below, under Fit check"
}
