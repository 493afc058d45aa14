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
	"brightfold/viewer"
)

// Relevance methods offered in the Evidence panel, with the one sentence
// that says what each is.
var methods = []struct{ Key, Label, About string }{
	{"lrp", "LRP", "Layer-wise relevance propagation (Bach et al. 2015): the positive-class score redistributed backwards, layer by layer, onto the voxels."},
	{"ig", "Integrated gradients", "Integrated gradients (Sundararajan et al. 2017): gradients averaged along a path from a baseline scan to this one, times the difference."},
	{"gradinput", "Gradient × input", "Gradient × input: how much each voxel's value, changed slightly, moves the positive-class score."},
	{"occlusion", "Occlusion", "Occlusion (Zeiler & Fergus 2014): how much the score drops when a patch of the scan is hidden."},
	{"none", "None", "No relevance map."},
}

func methodByLabel(label string) (key, about string) {
	for _, m := range methods {
		if m.Label == label {
			return m.Key, m.About
		}
	}
	return "none", ""
}

// evidencePanel is the "Evidence" panel: the model, its calibrated
// probability, and the relevance map controls.
type evidencePanel struct {
	u    *UI
	root fyne.CanvasObject

	model       *widget.Label
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
	export      *widget.Button
	quiet       bool
}

func newEvidencePanel(u *UI) *evidencePanel {
	p := &evidencePanel{u: u}
	p.model = widget.NewLabel("")
	p.model.Wrapping = fyne.TextWrapWord
	p.prob = canvas.NewText("—", colText)
	p.prob.TextSize = 34
	p.prob.TextStyle = fyne.TextStyle{Bold: true}
	p.probCaption = widget.NewLabel("")
	p.probCaption.Wrapping = fyne.TextWrapWord
	p.status = widget.NewLabel("")
	p.status.Wrapping = fyne.TextWrapWord

	labels := make([]string, len(methods))
	for i, m := range methods {
		labels[i] = m.Label
	}
	p.about = widget.NewLabel("")
	p.about.Wrapping = fyne.TextWrapWord
	p.method = widget.NewSelect(labels, func(label string) {
		_, about := methodByLabel(label)
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
	p.export = widget.NewButtonWithIcon("Export view as PNG", theme.DocumentSaveIcon(), u.exportView)

	form := container.New(&labelledRows{},
		widget.NewLabel("Opacity"), p.opacity, p.opacityVal,
		widget.NewLabel("Threshold"), p.threshold, p.thrVal)
	p.root = container.NewVBox(
		p.model,
		p.prob, p.probCaption, p.status,
		widget.NewSeparator(),
		container.NewBorder(nil, nil, widget.NewLabel("Relevance map"), nil, p.method),
		p.about,
		form,
		p.colorBar, p.ovState,
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
	p.colorBar.Image = nil
	p.colorBar.Refresh()
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
}

// showPrediction shows the model and its calibrated probability; an
// out-of-distribution verdict greys the number and says not to rely on it.
func (p *evidencePanel) showPrediction(card *inference.Card, pr inference.Prediction, ood bool) {
	p.model.SetText(fmt.Sprintf("Model: %s %s · %s", card.Name, card.Version, firstSentence(card.TrainingData)))
	p.prob.Text = fmt.Sprintf("%.2f", pr.Probability)
	p.prob.Color = colText
	if ood {
		p.prob.Color = colMuted
	}
	p.prob.Refresh()
	p.probCaption.SetText(fmt.Sprintf("Probability of %q, calibrated by temperature scaling (T = %.2f; %.2f before calibration). Most probable class: %s.",
		card.PositiveClass, pr.Temperature, pr.Uncalibrated, pr.Label))
	if ood {
		p.status.SetText("Out of distribution: the fit check says this scan is unlike the training scans, so this probability should not be relied on.")
		p.status.Importance = widget.DangerImportance
	} else {
		p.status.SetText("A research score, not a diagnosis.")
		p.status.Importance = widget.MediumImportance
	}
	p.status.Refresh()
}

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

// styleChanged applies the opacity and threshold sliders.
func (p *evidencePanel) styleChanged() {
	p.styleLabels()
	if p.quiet {
		return
	}
	st := p.u.scan.style
	st.Opacity = p.opacity.Value / 100
	st.Threshold = viewer.Threshold{Value: p.threshold.Value, Percentile: true}
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
		p.ovState.SetText("Overlay hidden (press O to show it).")
	default:
		thr := sp.overlay.Resolve(sp.style.Threshold)
		p.ovState.SetText(fmt.Sprintf("Overlay shown: %.1f %% of the map's non-zero voxels pass the threshold.", sp.overlay.VisibleShare(thr)))
	}
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
