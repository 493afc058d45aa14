package main

import (
	"os"

	"brightfold/app"
	"brightfold/internal/inputerr"
	"brightfold/internal/reading"
)

// runView opens the desktop viewer: on the given scans or folders, or with
// none on the demo cohort (generated into the user's cache folder on first
// start). --screenshot FILE saves the rendered window once the first case is
// shown with its evidence, then exits.
func runView(e *env, args []string) error {
	fs := newFlags(e, "view")
	fs.Usage = commandHelp(fs, "view [PATH...] [OPTIONS]   (the desktop viewer; research use only)")
	shot := fs.String("screenshot", "", "save the rendered window as PNG to `FILE` once ready, then exit")
	meeting := fs.Bool("meeting", false, "start in Meeting mode (identifiers, dates and paths hidden)")
	model := fs.String("model", "", "model `MODEL` (folder or .zip; default: the embedded demo model)")
	session := fs.String("session", "", "reading session `FILE` (brightfold session new): worklist and My read")
	demoDir := fs.String("demo-dir", "", "demo cohort `folder` (default: the user cache folder, brightfold/demo)")
	paths, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	for _, p := range paths {
		if _, err := os.Stat(p); err != nil {
			return inputerr.Wrap(p, err)
		}
	}
	if *session != "" {
		s, err := reading.Open(*session)
		if err != nil {
			return err
		}
		s.Close()
	}
	return app.Run(app.Options{Paths: paths, Screenshot: *shot, Meeting: *meeting, DemoDir: *demoDir, Model: *model, Session: *session})
}
