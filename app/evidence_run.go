package app

// startEvidence scores the open case and computes its relevance map.
func (u *UI) startEvidence() {
	u.evidence.unavailable("Scoring is not available yet: the model runtime is still being built.")
	u.fit.unavailable("The fit check is not available yet: the model runtime is still being built.")
	u.startRelevance()
	u.markReady()
}

// startRelevance computes the relevance map of the chosen method.
func (u *UI) startRelevance() {
	u.tasks.cancel(taskRelevance)
	u.scan.setOverlay(nil)
	u.evidence.refreshColorBar()
	key, _ := methodByLabel(u.evidence.method.Selected)
	if key == "none" {
		u.evidence.ovState.SetText("No relevance map (method: none).")
		return
	}
	u.evidence.ovState.SetText("Relevance maps are not available yet: the relevance package is still being built.")
}
