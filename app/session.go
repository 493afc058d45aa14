package app

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"

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
	input *viewer.Scene // the model input on its grid (inputScene), once shown
	// tplView is the scan in its model's template space (templateView), once shown.
	tplView *viewer.TemplateView

	result     *inference.Result // the score, once applied on the UI thread
	card       *inference.Card
	unprepared *inference.NotPreparedError // why the model could not take the scan, if so

	maps       map[overlay.Method]*shownMap // relevance maps computed for this case, by method
	relevance  *overlay.Map                 // the map shown now, on the model grid
	overlayVol *volume.Volume               // the map shown now, on the displayed grid
	peak       [3]int                       // its strongest voxel there
	// showAnyway is set when the reader asked to see the probability and
	// map of an out-of-distribution scan.
	showAnyway bool

	headOnce sync.Once
	head     []bool // the head mask of the shown grid (background tasks share it)
}

// headMask is the displayed scan's head mask, computed once.
func (oc *openCase) headMask() []bool {
	oc.headOnce.Do(func() { oc.head = oc.scene.HeadMask() })
	return oc.head
}

// selectCase opens case i: it cancels whatever was running for the previous
// case and shows case i as soon as its scan is loaded (at once when it was
// prefetched), then its score and map.
func (u *UI) selectCase(i int) {
	if i < 0 || i >= len(u.cases) {
		return
	}
	u.tasks.cancel(taskLoad, taskScore, taskRelevance)
	u.cur = i
	u.open = nil
	c := u.cases[i]
	u.chosen = time.Now()
	u.casesPanel.refresh()
	u.refreshIdentity()
	u.evidence.clear()
	u.fit.clear()
	u.head.clear()
	u.say("")
	u.read.caseSelected()
	j := u.store.job(c)
	select {
	case <-j.loaded:
		if j.loadErr == nil {
			u.showCase(j)
			return
		}
	default:
	}
	u.scan.clear("Loading " + u.shownCode(i) + "…")
	u.tasks.start(taskLoad, "Loading "+u.shownCode(i), func(ctx context.Context, progress progressFunc) (func(), error) {
		j.watch(progress)
		defer j.watch(nil)
		select {
		case <-j.loaded:
		case <-ctx.Done():
			return nil, ctx.Err()
		}
		if j.loadErr != nil {
			return nil, j.loadErr
		}
		return func() { u.showCase(j) }, nil
	}, func(err error) {
		u.store.forget(c)
		var choose *errChooseSeries
		if errors.As(err, &choose) {
			u.scan.showMessage(u.shownCode(i) + " holds several series: choose one.")
			u.chooseSeries(i, choose.series)
			return
		}
		u.scan.showMessage("Could not open " + u.shownCode(i) + ".")
		u.fail(err)
		u.evidence.unavailable("No scan loaded.")
		u.fit.unavailable("No scan loaded.")
		u.head.unavailable("No scan loaded.")
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

// showCase puts a loaded case on screen and shows (or waits for) its score.
func (u *UI) showCase(j *caseJob) {
	oc := j.oc
	u.open = oc
	u.refreshIdentity()
	u.scan.show(oc.scene)
	u.timing("scan")
	if len(oc.vol.Warnings) > 0 {
		u.say("Note: " + strings.Join(oc.vol.Warnings, "; "))
	}
	u.startEvidence(j)
}
