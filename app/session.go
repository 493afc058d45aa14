package app

import (
	"context"
	"errors"
	"fmt"
	"strings"

	"brightfold/inference"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
	_ "brightfold/internal/volume/formats"
	"brightfold/internal/volume/nifti"
	"brightfold/overlay"
	"brightfold/viewer"
)

// openCase is the loaded case: the scan as read and the scene it is shown from.
type openCase struct {
	c     Case
	vol   *volume.Volume
	scene *viewer.Scene

	result *inference.Result // the score, once computed
	card   *inference.Card

	relevance  *overlay.Map   // the relevance map on the model grid, once computed
	overlayVol *volume.Volume // the map on the displayed grid
	peak       [3]int         // its strongest voxel there
}

// selectCase opens case i: it cancels whatever was running for the previous
// case, clears the panels and loads the scan in the background.
func (u *UI) selectCase(i int) {
	if i < 0 || i >= len(u.cases) {
		return
	}
	u.tasks.cancel(taskLoad, taskScore, taskRelevance)
	u.cur = i
	u.open = nil
	c := u.cases[i]
	u.casesPanel.refresh()
	u.refreshIdentity()
	u.scan.clear("Loading " + c.Code + "…")
	u.evidence.clear()
	u.fit.clear()
	u.say("")
	u.read.caseSelected()
	u.tasks.start(taskLoad, "Loading "+c.Code, func(ctx context.Context, progress progressFunc) (func(), error) {
		oc, err := loadCase(ctx, c, progress)
		if err != nil {
			return nil, err
		}
		return func() { u.showCase(oc) }, nil
	}, func(err error) {
		var choose *errChooseSeries
		if errors.As(err, &choose) {
			u.scan.showMessage(c.Code + " holds several series: choose one.")
			u.chooseSeries(i, choose.series)
			return
		}
		u.scan.showMessage("Could not open " + c.Code + ".")
		u.fail(err)
		u.evidence.unavailable("No scan loaded.")
		u.fit.unavailable("No scan loaded.")
		u.markReady()
	})
}

// errChooseSeries means the case's DICOM input holds several series and the
// user has to pick one.
type errChooseSeries struct{ series []dicom.SeriesInfo }

func (e *errChooseSeries) Error() string {
	return fmt.Sprintf("the input holds %d image series; choose one", len(e.series))
}

// loadCase reads the scan and prepares it for display. It runs off the UI thread.
func loadCase(ctx context.Context, c Case, progress progressFunc) (*openCase, error) {
	if c.Series == "" && !(len(c.Paths) == 1 && nifti.IsPath(c.Paths[0])) {
		progress(-1, "listing DICOM series")
		list, err := dicom.ListSeries(c.Paths)
		if err != nil {
			return nil, err
		}
		if len(list) > 1 {
			return nil, &errChooseSeries{series: list}
		}
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	progress(-1, "reading")
	v, err := volume.Load(c.Paths, volume.LoadOptions{SeriesUID: c.Series})
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	progress(-1, "preparing the planes")
	// Closest canonical RAS without interpolation: slicing then runs along
	// memory order; the viewer shows any axis-aligned orientation correctly.
	shown, err := volume.Reorient(v)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", c.Code, err)
	}
	scene, err := viewer.NewScene(shown)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", c.Code, err)
	}
	return &openCase{c: c, vol: v, scene: scene}, nil
}

// showCase puts a loaded case on screen and starts its evidence.
func (u *UI) showCase(oc *openCase) {
	u.open = oc
	u.refreshIdentity()
	u.scan.show(oc.scene)
	if len(oc.vol.Warnings) > 0 {
		u.say("Note: " + strings.Join(oc.vol.Warnings, "; "))
	}
	u.startEvidence()
}
