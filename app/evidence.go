package app

import (
	"fmt"
	"sort"
	"strings"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"

	"brightfold/inference"
	"brightfold/overlay"
	"brightfold/viewer"
)

// methodNone is the picker's choice for no map.
const methodNone = "None"

// methodLabels are the relevance picker's choices: every method of the
// overlay package, then none.
func methodLabels() []string {
	var out []string
	for _, m := range overlay.Methods() {
		out = append(out, m.Title())
	}
	return append(out, methodNone)
}

// methodByLabel returns the method with the given title and its sentence.
func methodByLabel(label string) (overlay.Method, string, bool) {
	for _, m := range overlay.Methods() {
		if m.Title() == label {
			return m, m.About() + " (" + m.Reference() + ")", true
		}
	}
	return "", "No relevance map.", false
}

// evidencePanel is the "Evidence" panel: the model, its calibrated
// probability, and the relevance map controls.
type evidencePanel struct {
	u    *UI
	root fyne.CanvasObject

	model       *widget.Label
	training    *widget.Label
	prob        *canvas.Text
	probCaption *widget.Label
	status      *widget.Label
	method      *widget.Select
	about       *widget.Label
	opacity     *widget.Slider
	opacityVal  *widget.Label
	threshold   *widget.Slider
	thrVal      *widget.Label
	colorBar    *canvas.Image
	ovState     *widget.Label
	signed      *widget.Check
	peak        *widget.Button
	export      *widget.Button
	mapInfo     string // what the shown map is, with its own check
	quiet       bool
}

func newEvidencePanel(u *UI) *evidencePanel {
	p := &evidencePanel{u: u}
	p.model = widget.NewLabel("")
	p.model.Wrapping = fyne.TextWrapWord
	p.model.TextStyle = fyne.TextStyle{Bold: true}
	p.training = widget.NewLabel("")
	p.training.Wrapping = fyne.TextWrapWord
	p.training.Importance = widget.LowImportance
	p.training.SizeName = theme.SizeNameCaptionText
	p.prob = canvas.NewText("—", colText)
	p.prob.TextSize = 34
	p.prob.TextStyle = fyne.TextStyle{Bold: true}
	p.probCaption = widget.NewLabel("")
	p.probCaption.Wrapping = fyne.TextWrapWord
	p.status = widget.NewLabel("")
	p.status.Wrapping = fyne.TextWrapWord

	labels := methodLabels()
	p.about = widget.NewLabel("")
	p.about.Wrapping = fyne.TextWrapWord
	p.method = widget.NewSelect(labels, func(label string) {
		_, about, _ := methodByLabel(label)
		p.about.SetText(about)
		if !p.quiet {
			u.startRelevance()
		}
	})
	p.quiet = true
	p.method.SetSelected("LRP")
	p.quiet = false

	p.opacityVal = widget.NewLabel("")
	p.opacity = widget.NewSlider(0, 100)
	p.opacity.Step = 5
	p.opacity.OnChanged = func(v float64) { p.styleChanged() }
	p.thrVal = widget.NewLabel("")
	p.threshold = widget.NewSlider(0, 99)
	p.threshold.Step = 1
	p.threshold.OnChanged = func(v float64) { p.styleChanged() }
	p.quiet = true
	p.opacity.SetValue(60)
	p.threshold.SetValue(90)
	p.quiet = false
	p.colorBar = canvas.NewImageFromImage(nil)
	p.colorBar.FillMode = canvas.ImageFillContain
	p.colorBar.SetMinSize(fyne.NewSize(280, 56))
	p.ovState = widget.NewLabel("")
	p.ovState.Wrapping = fyne.TextWrapWord
	p.signed = widget.NewCheck("Show negative relevance too", func(bool) { p.styleChanged() })
	p.peak = widget.NewButtonWithIcon("Go to the strongest relevance", theme.ZoomFitIcon(), u.goToPeak)
	p.peak.Disable()
	p.export = widget.NewButtonWithIcon("Export view as PNG", theme.DocumentSaveIcon(), u.exportView)

	form := container.New(&labelledRows{},
		widget.NewLabel("Opacity"), p.opacity, p.opacityVal,
		widget.NewLabel("Threshold"), p.threshold, p.thrVal)
	p.root = container.NewVBox(
		p.model, p.training,
		p.prob, p.probCaption, p.status,
		widget.NewSeparator(),
		container.NewBorder(nil, nil, widget.NewLabel("Relevance map"), nil, p.method),
		p.about,
		form, p.signed,
		p.colorBar, p.ovState, p.peak,
		p.export,
	)
	p.clear()
	return p
}

// clear resets the panel for a case being loaded.
func (p *evidencePanel) clear() {
	p.prob.Text = "—"
	p.prob.Color = colMuted
	p.prob.Refresh()
	p.probCaption.SetText("")
	p.status.SetText("Waiting for the scan…")
	p.status.Importance = widget.MediumImportance
	p.model.SetText("")
	p.training.SetText("")
	p.colorBar.Image = nil
	p.colorBar.Refresh()
	p.mapInfo = ""
	p.peak.Disable()
	p.ovState.SetText("")
	p.refreshOverlayState()
	p.styleLabels()
}

// unavailable says why there is no probability.
func (p *evidencePanel) unavailable(why string) {
	p.prob.Text = "—"
	p.prob.Color = colMuted
	p.prob.Refresh()
	p.probCaption.SetText("")
	p.status.Importance = widget.MediumImportance
	p.status.SetText(p.u.clean(why))
	p.u.reflow()
}

// showPrediction shows the model and its calibrated probability; an
// out-of-distribution verdict greys the number and says not to rely on it.
func (p *evidencePanel) showPrediction(card *inference.Card, pr inference.Prediction, ood bool) {
	p.model.SetText(fmt.Sprintf("Model: %s, version %s", card.Name, card.Version))
	p.training.SetText(firstSentence(card.TrainingData))
	p.prob.Text = inference.FormatProbability(pr.Probability)
	p.prob.Color = colText
	if ood {
		p.prob.Color = colMuted
	}
	p.prob.Refresh()
	p.probCaption.SetText(fmt.Sprintf("Probability of %s, calibrated by temperature scaling (T = %.2f; %s before calibration). Most probable class: %s.",
		className(card.PositiveClass), pr.Temperature, inference.FormatProbability(pr.Uncalibrated), className(pr.Label)))
	if ood {
		p.status.SetText("Out of distribution: the fit check says this scan is unlike the training scans, so this probability should not be relied on.")
		p.status.Importance = widget.DangerImportance
	} else {
		p.status.SetText("A research score, not a diagnosis.")
		p.status.Importance = widget.MediumImportance
	}
	p.status.Refresh()
	p.u.reflow()
}

// className shows a class key ("atrophy_pattern") as words.
func className(s string) string { return "\u201c" + strings.ReplaceAll(s, "_", " ") + "\u201d" }

// firstSentence returns s up to its first full stop.
func firstSentence(s string) string {
	if i := strings.Index(s, ". "); i >= 0 {
		return s[:i+1]
	}
	return s
}

// showCancelled says scoring was stopped.
func (p *evidencePanel) showCancelled() {
	p.unavailable("Scoring was cancelled. Reopen the case to score it again.")
}

// relevanceCancelled says the map was stopped.
func (p *evidencePanel) relevanceCancelled() {
	p.ovState.SetText("Relevance map cancelled. Pick a method to compute it again.")
}

// selectedMethod is the picked relevance method; false for none.
func (p *evidencePanel) selectedMethod() (overlay.Method, bool) {
	m, _, ok := methodByLabel(p.method.Selected)
	return m, ok
}

// showRelevance describes a computed map and its own check.
func (p *evidencePanel) showRelevance(m *overlay.Map, om *viewer.OverlayMap) {
	text := fmt.Sprintf("%s map of the %s logit, %s.", m.Method.Title(), className(m.Class), inference.Plural(m.Passes, "model pass", "model passes"))
	// The method's own check (LRP conservation, integrated-gradients
	// completeness), as the score JSON reports it.
	for _, k := range sortedKeys(m.Checks) {
		if strings.HasSuffix(k, "_error") {
			text += fmt.Sprintf(" Its own check: %s %.2g.", strings.ReplaceAll(k, "_", " "), m.Checks[k])
		}
	}
	if om.HasNegative() && !p.signed.Checked {
		text += " Negative values (evidence against the class) are hidden."
	}
	p.mapInfo = text
	p.peak.Enable()
	p.refreshColorBar()
	p.refreshOverlayState()
}

func sortedKeys(m map[string]float64) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// styleChanged applies the opacity and threshold sliders.
func (p *evidencePanel) styleChanged() {
	p.styleLabels()
	if p.quiet {
		return
	}
	st := p.u.scan.style
	st.Opacity = p.opacity.Value / 100
	st.Threshold = viewer.Threshold{Value: p.threshold.Value, Percentile: true}
	st.Signed = p.signed.Checked
	p.u.scan.setStyle(st)
	p.refreshColorBar()
	p.refreshOverlayState()
}

func (p *evidencePanel) styleLabels() {
	p.opacityVal.SetText(fmt.Sprintf("%3.0f %%", p.opacity.Value))
	p.thrVal.SetText(fmt.Sprintf("top %.0f %%", 100-p.threshold.Value))
}

// refreshColorBar draws the colour bar of the current overlay and style.
func (p *evidencePanel) refreshColorBar() {
	o := p.u.scan.overlay
	if o == nil {
		p.colorBar.Image = nil
		p.colorBar.Refresh()
		return
	}
	img, err := viewer.OverlayColorBar(o, p.u.scan.style, 280, 1, rgba(colInk))
	if err != nil {
		p.ovState.SetText(p.u.clean(err.Error()))
		return
	}
	p.colorBar.Image = img
	p.colorBar.Refresh()
}

// refreshOverlayState says whether a map is shown.
func (p *evidencePanel) refreshOverlayState() {
	sp := p.u.scan
	if sp == nil {
		return
	}
	switch {
	case sp.overlay == nil:
		if p.u.open != nil && p.ovState.Text == "" {
			p.ovState.SetText("No relevance map yet.")
		}
	case !sp.showOv:
		p.ovState.SetText(p.mapInfo + " Overlay hidden (press O to show it).")
	default:
		thr := sp.overlay.Resolve(sp.style.Threshold)
		p.ovState.SetText(fmt.Sprintf("%s Shown: the %.1f %% of non-zero voxels above %.3g.", p.mapInfo, sp.overlay.VisibleShare(thr), thr))
	}
	p.u.reflow()
}

// labelledRows lays out rows of (label, control, value) with the control
// taking the remaining width.
type labelledRows struct{}

// MinSize sums the rows.
func (labelledRows) MinSize(objs []fyne.CanvasObject) fyne.Size {
	var w, h float32
	for i := 0; i+2 < len(objs); i += 3 {
		rw := objs[i].MinSize().Width + objs[i+1].MinSize().Width + objs[i+2].MinSize().Width + 8
		rh := max32(objs[i].MinSize().Height, max32(objs[i+1].MinSize().Height, objs[i+2].MinSize().Height))
		w = max32(w, rw)
		h += rh
	}
	return fyne.NewSize(w, h)
}

// Layout places each row.
func (labelledRows) Layout(objs []fyne.CanvasObject, size fyne.Size) {
	var labelW, valW float32
	for i := 0; i+2 < len(objs); i += 3 {
		labelW = max32(labelW, objs[i].MinSize().Width)
		valW = max32(valW, objs[i+2].MinSize().Width)
	}
	var y float32
	for i := 0; i+2 < len(objs); i += 3 {
		rh := max32(objs[i].MinSize().Height, max32(objs[i+1].MinSize().Height, objs[i+2].MinSize().Height))
		objs[i].Move(fyne.NewPos(0, y))
		objs[i].Resize(fyne.NewSize(labelW, rh))
		objs[i+1].Move(fyne.NewPos(labelW+4, y))
		objs[i+1].Resize(fyne.NewSize(size.Width-labelW-valW-8, rh))
		objs[i+2].Move(fyne.NewPos(size.Width-valW, y))
		objs[i+2].Resize(fyne.NewSize(valW, rh))
		y += rh
	}
}
