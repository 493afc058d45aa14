package app

import (
	"errors"
	"fmt"
	"path/filepath"

	"brightfold/viewer"
)

// templateReady reports whether the open case can be shown in its model's
// template space: the model folder aligns to a template and the scan was
// aligned to it.
func (oc *openCase) templateReady() bool {
	if oc == nil || oc.card == nil || oc.result == nil || oc.result.Prepared == nil || oc.result.Prepared.Alignment == nil {
		return false
	}
	tpl, _ := oc.card.AlignmentTemplate()
	return tpl != nil
}

// templateView is the case's scan aligned to the model's template with the
// template's outline (viewer.NewTemplateView), made once.
func (oc *openCase) templateView() (*viewer.TemplateView, error) {
	if oc.tplView != nil {
		return oc.tplView, nil
	}
	if !oc.templateReady() {
		return nil, errors.New("no template view: the model folder has no alignment template, or the scan was not aligned to it")
	}
	tpl, mask := oc.card.AlignmentTemplate()
	tv, err := viewer.NewTemplateView(oc.vol, tpl, mask, oc.result.Prepared.Alignment.Transform)
	if err != nil {
		return nil, err
	}
	oc.tplView = tv
	return tv, nil
}

// showTemplate shows in the Scan panel the scan aligned to the model's
// template with the outline of the template's mask (or head) over the
// planes, or the scan again. The crosshair keeps its anatomical point
// across the switch (through the alignment). The relevance map is drawn
// over the scan only.
func (u *UI) showTemplate(on bool) {
	p, oc := u.scan, u.open
	if oc == nil || p.scene == nil {
		p.setTemplate(nil)
		return
	}
	at := p.at
	if !on {
		if p.tpl != nil {
			at = p.tpl.ToScan.Apply(at)
		}
		p.setTemplate(nil)
		p.showScene(oc.scene, at)
		u.evidence.refreshOverlayState()
		return
	}
	tv, err := oc.templateView()
	if err != nil {
		p.setTemplate(nil)
		u.fail(err)
		return
	}
	if p.input {
		p.setInput(false)
	}
	p.setTemplate(tv)
	p.showScene(tv.Scene, tv.FromScan.Apply(at))
	u.evidence.refreshOverlayState()
	al := oc.card.Preprocessing.Alignment
	u.say(fmt.Sprintf("Showing the scan aligned to the model's template (%s, %s) with the template's %s outline; the relevance map is drawn over the scan only.",
		al.Method, filepath.Base(al.Template), map[bool]string{true: "mask", false: "head"}[al.Mask != ""]))
}

// setTemplate records the template view shown (nil: none) and shows it in
// its check box without acting on it.
func (p *scanPanel) setTemplate(tv *viewer.TemplateView) {
	p.tpl = tv
	p.quietSel = true
	p.tplCk.SetChecked(tv != nil)
	p.quietSel = false
}

// refreshTemplateCheck enables the Template check box only when the open
// case can be shown in template space.
func (p *scanPanel) refreshTemplateCheck() {
	if p.u.open.templateReady() {
		p.tplCk.Enable()
	} else {
		p.tplCk.Disable()
	}
}
