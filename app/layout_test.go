package app

import (
	"fmt"
	"strings"
	"testing"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/container"
	"fyne.io/fyne/v2/test"
	"fyne.io/fyne/v2/theme"
	"fyne.io/fyne/v2/widget"
)

// cutText is a text the window shows cut: its widget's whole text and
// what is rendered of it.
type cutText struct{ whole, shown string }

// cutTexts walks the rendered window and returns every text drawn shorter
// than its widget holds: a rendered line ending in an ellipsis that the
// widget's own text does not end in (Fyne's TextTruncateEllipsis, which
// every Select uses), or a line whose drawn extent leaves the window or
// the scroll area around it.
func (h *harness) cutTexts() []cutText {
	var out []cutText
	type rect struct{ x0, y0, x1, y1 float32 }
	var walk func(o fyne.CanvasObject, whole string, at fyne.Position, clip rect)
	walk = func(o fyne.CanvasObject, whole string, at fyne.Position, clip rect) {
		if o == nil || !o.Visible() {
			return
		}
		at = at.Add(o.Position())
		switch x := o.(type) {
		case *widget.Label:
			whole = x.Text
		case *widget.Select:
			whole = x.Selected
			out = append(out, optionsCut(x)...)
		case *safeSelect:
			whole = x.Selected
			out = append(out, optionsCut(&x.Select)...)
		case *widget.Check:
			whole = x.Text
		case *widget.Button:
			whole = x.Text
		case *container.Scroll:
			s := x.Size()
			clip = rect{max(clip.x0, at.X), max(clip.y0, at.Y), min(clip.x1, at.X+s.Width), min(clip.y1, at.Y+s.Height)}
		case *canvas.Text:
			m := fyne.MeasureText(x.Text, x.TextSize, x.TextStyle)
			x0 := at.X
			switch x.Alignment {
			case fyne.TextAlignCenter:
				x0 += (x.Size().Width - m.Width) / 2
			case fyne.TextAlignTrailing:
				x0 += x.Size().Width - m.Width
			}
			visible := at.Y < clip.y1 && at.Y+m.Height > clip.y0
			ellipsis := strings.HasSuffix(x.Text, "…") && !strings.HasSuffix(whole, "…")
			if ellipsis || (visible && x.Text != "" && (x0 < clip.x0-1 || x0+m.Width > clip.x1+1)) {
				out = append(out, cutText{whole, x.Text})
			}
		}
		switch x := o.(type) {
		case *fyne.Container:
			for _, c := range x.Objects {
				walk(c, whole, at, clip)
			}
		case fyne.Widget:
			for _, c := range test.WidgetRenderer(x).Objects() {
				walk(c, whole, at, clip)
			}
		}
	}
	c := h.w.Canvas()
	win := rect{0, 0, c.Size().Width, c.Size().Height}
	walk(c.Content(), "", fyne.Position{}, win)
	for _, o := range c.Overlays().List() {
		walk(o, "", fyne.Position{}, win)
	}
	return out
}

// optionsCut lists the choices of a drop-down that would be cut when
// chosen: wider than the room Fyne's select renderer leaves its label (the
// width less the icon, the inner padding and three paddings, select.go's
// Layout in Fyne 2.7).
func optionsCut(s *widget.Select) []cutText {
	th := s.Theme()
	pad, inner := th.Size(theme.SizeNamePadding), th.Size(theme.SizeNameInnerPadding)
	room := s.Size().Width - th.Size(theme.SizeNameInlineIcon) - inner - 3*pad
	var out []cutText
	for _, o := range s.Options {
		if fyne.MeasureText(o, th.Size(theme.SizeNameText), fyne.TextStyle{}).Width > room {
			out = append(out, cutText{o, "(a choice of a drop-down " + fmt.Sprint(s.Size().Width) + " px wide)"})
		}
	}
	return out
}

// At the window size a 1280×800 screen gives (fitWindow), no text is cut:
// every drop-down's choice, label, check box and button shows its whole
// text, for an in-distribution demo case and the CT-like one, with and
// without Meeting mode.
func TestNoTextCutAt1280x800(t *testing.T) {
	h := startDemo(t, Options{})
	h.w.Resize(fitWindow(fyne.NewSize(1280, 800)))
	check := func(what string) {
		t.Helper()
		h.settle()
		for _, c := range h.cutTexts() {
			t.Errorf("%s: %q is shown as %q", what, c.whole, c.shown)
		}
		// No panel is squeezed below the width its content needs (the
		// desktop driver then takes the room from the Scan panel's tools).
		for name, o := range map[string]fyne.CanvasObject{"Scan": h.u.scanSection, "reading column": h.u.column, "Cases": h.u.casesPanel.root} {
			if o.Size().Width+0.5 < o.MinSize().Width {
				t.Errorf("%s: the %s panel is %.0f px wide, its content needs %.0f", what, name, o.Size().Width, o.MinSize().Width)
			}
		}
	}
	h.u.selectCase(0)
	check("first demo case")
	h.u.setMeeting(true)
	check("first demo case in Meeting mode")
	h.u.setMeeting(false)
	h.openShifted("CT-like")
	check("CT-like case")
	h.u.showAnyway()
	check("CT-like case, probability shown")
}
