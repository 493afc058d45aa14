package app

import (
	"fmt"

	"brightfold/internal/volume"
	"brightfold/viewer"
)

// showModelInput shows in the Scan panel the model-grid tensor the model
// reads (preprocess.Prepared.GridVolume, what `brightfold prepare` writes),
// or the scan again. The tensor keeps its own affine in the scan's RAS
// world, so the crosshair stays on the same point across the switch. The
// relevance map is drawn over the scan only.
func (u *UI) showModelInput(on bool) {
	p, oc := u.scan, u.open
	if oc == nil || p.scene == nil {
		p.setInput(false)
		return
	}
	at := p.at
	if p.tpl != nil { // leaving the template view: back to the scan's world
		at = p.tpl.ToScan.Apply(at)
		p.setTemplate(nil)
	}
	if !on {
		if p.input && at == p.inputAt {
			at = p.scanAt // not moved on the model grid: back where it was
		}
		p.setInput(false)
		p.showScene(oc.scene, at)
		u.evidence.refreshOverlayState()
		return
	}
	s, err := oc.inputScene()
	if err != nil {
		p.setInput(false)
		u.fail(err)
		return
	}
	p.setInput(true)
	p.showScene(s, at)
	p.scanAt, p.inputAt = at, p.at
	g := s.Volume().Dims
	u.say(fmt.Sprintf("Showing the model input: the scan as the model reads it, a %d×%d×%d grid (the relevance map is drawn over the scan only).", g[0], g[1], g[2]))
}

// inputScene is the scene of the case's model input, made once.
func (oc *openCase) inputScene() (*viewer.Scene, error) {
	if oc.input != nil {
		return oc.input, nil
	}
	if oc.result == nil || oc.result.Prepared == nil {
		return nil, fmt.Errorf("no model input: the scan has not been prepared for the model")
	}
	v := oc.result.Prepared.GridVolume()
	v.Meta.Format = "model input"
	shown, err := volume.Reorient(v)
	if err != nil {
		return nil, fmt.Errorf("model input: %w", err)
	}
	s, err := viewer.NewScene(shown)
	if err != nil {
		return nil, fmt.Errorf("model input: %w", err)
	}
	oc.input = s
	return s, nil
}
