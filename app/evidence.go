package app

import (
	"fmt"
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

// methodTitles are the relevance picker's methods: every method of the
// overlay package, then none.
func methodTitles() []string {
	var out []string
	for _, m := range overlay.Methods() {
		out = append(out, m.Title())
	}
	return append(out, methodNone)
}

// methodLabels are kept for the tests' random choices.
func methodLabels() []string { return methodTitles() }

// methodSep separates a method's title from its time estimate in the picker.
const methodSep = "  ·  "

// methodByLabel returns the method whose title starts the label, and its
// sentence: what the map shows, its measured localisation on the demo
// cohort, and its paper.
func methodByLabel(label string) (overlay.Method, string, bool) {
	title, _, _ := strings.Cut(label, methodSep)
	for _, m := range overlay.Methods() {
		if m.Title() == title {
			return m, m.About() + " " + methodTrust(m) + " (" + m.Reference() + ")", true
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
	probCaption *widget.Label
	status      *widget.Label
	method      *widget.RadioGroup
	compute     *widget.Button
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
	report      *widget.Button // the one-page case report (internal/report)
	mapInfo     string         // what the shown map is, with its own check
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
	p.probCaption = widget.NewLabel("")
	p.probCaption.Wrapping = fyne.TextWrapWord
	p.status = widget.NewLabel("")
	p.status.Wrapping = fyne.TextWrapWord

	p.about = widget.NewLabel("")
	p.about.Wrapping = fyne.TextWrapWord
	p.about.SizeName = theme.SizeNameCaptionText
	// A list of choices always in view, not a drop-down: each shows its
	// time here, and there is no menu to wait for.
	p.method = widget.NewRadioGroup(methodTitles(), func(label string) {
		_, about, _ := methodByLabel(label)
		p.about.SetText(about)
		if !p.quiet {
			u.startRelevance()
		}
		u.refocus()
	})
	p.method.Required = true
	p.quiet = true
	p.method.SetSelected("LRP")
	p.quiet = false
	p.compute = widget.NewButtonWithIcon("Compute", theme.MediaPlayIcon(), func() { u.startRelevanceAsked(true) })
	p.compute.Importance = widget.HighImportance
	p.compute.Hide()

	p.opacityVal = widget.NewLabel("")
	p.opacity = widget.NewSlider(0, 100)
	p.opacity.Step = 5
	p.opacity.OnChanged = func(v float64) { p.styleChanged() }
	p.opacity.OnChangeEnded = func(float64) { u.refocus() }
	p.thrVal = widget.NewLabel("")
	// The coverage slider: the share of the map's strongest voxels drawn,
	// growing to the right as the label does.
	p.threshold = widget.NewSlider(1, 100)
	p.threshold.Step = 1
	p.threshold.OnChanged = func(v float64) { p.styleChanged() }
	p.threshold.OnChangeEnded = func(float64) { u.refocus() }
	p.quiet = true
	p.opacity.SetValue(60)
	p.threshold.SetValue(10)
	p.quiet = false
	p.colorBar = canvas.NewImageFromImage(nil)
	p.colorBar.FillMode = canvas.ImageFillContain
	p.colorBar.SetMinSize(fyne.NewSize(280, 56))
	p.ovState = widget.NewLabel("")
	p.ovState.Wrapping = fyne.TextWrapWord
	p.signed = widget.NewCheck("Negative relevance too", func(bool) { p.styleChanged(); u.refocus() })
	p.peak = widget.NewButtonWithIcon("Go to the strongest relevance", theme.ZoomFitIcon(), u.goToPeak)
	p.peak.Disable()
	p.export = widget.NewButtonWithIcon("Export view as PNG", theme.DocumentSaveIcon(), u.exportView)
	p.report = widget.NewButtonWithIcon("Case report (PDF)", theme.DocumentPrintIcon(), u.exportCaseReport)

	form := container.New(&labelledRows{},
		widget.NewLabel("Opacity"), p.opacity, p.opacityVal,
		widget.NewLabel("Shown"), p.threshold, p.thrVal)
	mapTitle := widget.NewLabelWithStyle("Relevance map", fyne.TextAlignLeading, fyne.TextStyle{Bold: true})
	p.root = container.NewVBox(
		p.model, p.training,
		p.probCaption, p.status,
		widget.NewSeparator(),
		mapTitle, p.method, p.compute,
		p.about,
		form, p.signed,
		p.colorBar, p.ovState, p.peak,
		container.NewGridWithColumns(2, p.export, p.report),
	)
	p.clear()
	return p
}

// clear resets the panel for a case being loaded.
func (p *evidencePanel) clear() {
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
	p.probCaption.SetText("")
	p.status.Importance = widget.MediumImportance
	p.status.SetText(p.u.clean(why))
	p.u.reflow()
}

// showPrediction shows the model and how its probability was calibrated;
// while the probability is withheld (out of distribution) the numbers stay
// out of this panel too.
func (p *evidencePanel) showPrediction(card *inference.Card, pr inference.Prediction, withheld bool) {
	p.model.SetText(fmt.Sprintf("Model: %s, version %s", card.Name, card.Version))
	p.training.SetText(firstSentence(card.TrainingData))
	if withheld {
		p.probCaption.SetText("")
		p.probCaption.Hide()
		p.status.SetText("Out of distribution: the fit check says this scan is unlike the training scans, so the probability should not be relied on.")
		p.status.Importance = widget.DangerImportance
	} else {
		p.probCaption.Show()
		p.probCaption.SetText(inference.CalibrationSentence(card, pr.Temperature, inference.FormatProbability(pr.Uncalibrated)) +
			fmt.Sprintf(" Most probable class: %s.", className(pr.Label)))
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
	// How much of the logit the voxels carry, with the method's own check
	// named for what it is (overlay.ShareSentence, as the CLI says it).
	text += " " + m.ShareSentence()
	if om.HasNegative() && !p.signed.Checked {
		text += " Negative values (evidence against the class) are hidden."
	}
	p.mapInfo = text
	p.peak.Enable()
	p.refreshColorBar()
	p.refreshOverlayState()
}

// styleChanged applies the opacity and threshold sliders.
func (p *evidencePanel) styleChanged() {
	p.styleLabels()
	if p.quiet {
		return
	}
	st := p.u.scan.style
	st.Opacity = p.opacity.Value / 100
	st.Threshold = viewer.Threshold{Value: 100 - p.threshold.Value, Percentile: true}
	st.Signed = p.signed.Checked
	p.u.scan.setStyle(st)
	p.refreshColorBar()
	p.refreshOverlayState()
}

func (p *evidencePanel) styleLabels() {
	p.opacityVal.SetText(fmt.Sprintf("%3.0f %%", p.opacity.Value))
	p.thrVal.SetText(fmt.Sprintf("top %.0f %%", p.threshold.Value))
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

// methodTrust says how well a method's map found the pattern on the demo
// cohort: relevance mass accuracy (the share of positive relevance inside
// the ground-truth pattern mask) on 50 pattern-positive 1 mm phantoms,
// written by `make evaluate-maps` into docs/evaluation.md (run of
// 2026-12-03, model sha256 e2c1f780…); chance is the mask's share of the
// scan, 0.45 %.
func methodTrust(m overlay.Method) string {
	switch m {
	case overlay.LRP:
		return "On 50 demo phantoms with the pattern, 5.1 % of its relevance fell inside the pattern (11 × chance)."
	case overlay.IntegratedGradients:
		return "With a blurred-scan baseline, as here, 15 % of its relevance fell inside the pattern on 50 demo phantoms (34 × chance): the best-localised method on this model."
	case overlay.GradientInput:
		return "Voxel by voxel, so it looks speckled; 3.1 % of its relevance fell inside the pattern on 50 demo phantoms (7 × chance)."
	case overlay.Occlusion:
		return "Coarse (8-voxel cubes); 3.9 % of its relevance fell inside the pattern on 50 demo phantoms (9 × chance)."
	}
	return ""
}

// refreshMethodLabels puts each method's time estimate beside its name.
func (p *evidencePanel) refreshMethodLabels() {
	sel, _ := p.selectedMethod()
	var opts []string
	selected := methodNone
	for _, m := range overlay.Methods() {
		label := m.Title() + methodSep + "≈ " + roundDuration(p.u.estimate(m))
		if onRequest(m, p.u.estimate(m)) {
			label += ", on request"
		}
		opts = append(opts, label)
		if m == sel && p.method.Selected != methodNone {
			selected = label
		}
	}
	p.method.Options = append(opts, methodNone)
	p.quiet = true
	p.method.SetSelected(selected)
	p.quiet = false
	p.method.Refresh()
}

// selectMethod picks a method by its title ("LRP", "None").
func (p *evidencePanel) selectMethod(title string) {
	for _, o := range p.method.Options {
		if t, _, _ := strings.Cut(o, methodSep); t == title {
			p.method.SetSelected(o)
			return
		}
	}
}
