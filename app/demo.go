package app

// startDemo opens the demo cohort, generating it first if needed.
func (u *UI) startDemo() {
	u.casesPanel.setNote("The demo cohort is not available yet: the phantom package is still being built. Open a scan with Open… or drop one on the window.")
	u.markReady()
}
