package app

import (
	"testing"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/test"

	"brightfold/overlay"
)

// The sequence of the crash in issue 17, on the test driver: an
// integrated-gradients map finishes (its measured time relabels the
// method list), then the reader clicks each method of the list. Every
// click is taken, none panics, and the case ends with the last method's
// map. (The crash came about 90 s later on the desktop driver, after the
// toolkit's one-minute render cache had expired; the test driver has no
// such expiry, so this checks the sequence, not that timing.)
func TestMethodClicksAfterIntegratedGradients(t *testing.T) {
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.open(anatomical(t))
	h.u.showAnyway() // the real scan may fail the tiny model's fit check
	h.settle()
	h.u.evidence.selectMethod(overlay.IntegratedGradients.Title())
	h.settle()
	h.u.startRelevanceAsked(true)
	h.settle()
	if h.u.open.maps[overlay.IntegratedGradients] == nil {
		t.Fatalf("no integrated-gradients map: %q", h.u.evidence.ovState.Text)
	}
	items := test.WidgetRenderer(h.u.evidence.method).Objects()
	if len(items) != len(h.u.evidence.method.Options) {
		t.Fatalf("%d radio items for %d methods", len(items), len(h.u.evidence.method.Options))
	}
	for i := len(items) - 1; i >= 0; i-- {
		func() {
			defer func() {
				if r := recover(); r != nil {
					t.Fatalf("a click on method %q panicked: %v", h.u.evidence.method.Options[i], r)
				}
			}()
			test.Tap(items[i].(fyne.Tappable))
			h.settle()
		}()
	}
	// The last click was the first method, LRP.
	if m, _ := h.u.evidence.selectedMethod(); m != overlay.LRP || h.u.open.relevance == nil || h.u.open.relevance.Method != overlay.LRP {
		t.Errorf("after the clicks: method %v, map %v (%q)", m, h.u.open.relevance != nil, h.u.evidence.ovState.Text)
	}
}
