package app

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/ortlib"
	"brightfold/internal/volume"
	"brightfold/overlay"
	"brightfold/viewer"
)

// model is the scoring session, made once on first use and shared by every
// case. Its methods may be called from any goroutine.
type model struct {
	path string // model folder folder or zip; empty for the embedded demo model folder

	mu      sync.Mutex
	session *inference.Session
	err     error
	tried   bool
	ex      *overlay.Explainer
	exErr   error
}

// errNoModelFolder says there is no model to run (a build whose assets lack the
// demo model folder).
var errNoModelFolder = errors.New("no model folder: this build has no embedded demo model; start Brightfold with --model MODEL")

// missing reports whether scoring failed for want of a model folder.
func (m *model) missing() bool {
	m.mu.Lock()
	defer m.mu.Unlock()
	return errors.Is(m.err, errNoModelFolder)
}

// get returns the session, loading the library and the model folder the first time.
func (m *model) get() (*inference.Session, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.tried {
		return m.session, m.err
	}
	m.tried = true
	m.session, m.err = m.open()
	return m.session, m.err
}

func (m *model) open() (*inference.Session, error) {
	var b *inference.ModelFolder
	var err error
	if m.path == "" {
		if b, err = inference.LoadModelFolderFS(assets.DemoModelFolder()); err == nil {
			b.Source = assets.DemoModelFolderName
		}
	} else {
		b, err = inference.LoadModelFolder(m.path)
	}
	if err != nil {
		return nil, err
	}
	lib, err := ortlib.Find("")
	if err != nil {
		return nil, err
	}
	if err := inference.InitRuntime(lib); err != nil {
		return nil, err
	}
	return inference.NewSession(b, inference.SessionOptions{})
}

// close frees the session.
func (m *model) close() {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.session != nil {
		m.session.Close()
		m.session = nil
	}
}

// startEvidence shows the open case's score, waiting for its job off the
// UI thread when it is still running, then its relevance map.
func (u *UI) startEvidence(j *caseJob) {
	oc := u.open
	select {
	case <-j.scored:
		u.applyScore(j, oc)
		return
	default:
	}
	u.evidence.status.SetText("Scoring…")
	u.tasks.start(taskScore, "Scoring "+u.shownCode(u.cur), func(ctx context.Context, progress progressFunc) (func(), error) {
		j.watch(progress)
		defer j.watch(nil)
		select {
		case <-j.scored:
		case <-ctx.Done():
			return nil, ctx.Err()
		}
		return func() { u.applyScore(j, oc) }, nil
	}, nil)
}

// applyScore puts a finished job's score on screen (UI thread).
func (u *UI) applyScore(j *caseJob, oc *openCase) {
	if u.open != oc {
		return
	}
	if j.scoreErr != nil {
		u.store.forget(oc.c)
		why := u.clean(j.scoreErr.Error())
		u.evidence.unavailable("No probability: " + why)
		u.fit.unavailable("No verdict: " + why)
		u.head.unavailable("No verdict: " + why)
		u.evidence.ovState.SetText("No relevance map without a score.")
		u.markReady()
		return
	}
	oc.result, oc.card, oc.unprepared = j.result, j.card, j.unprepared
	u.timing("score")
	u.casesPanel.list.Refresh()
	if oc.unprepared != nil {
		u.showUnprepared(oc)
	} else {
		u.showScore(oc)
	}
	if !u.tasks.busy(taskRelevance) {
		u.prefetchNext()
	}
}

// prefetchNext loads and scores the case after the open one in the
// background, so that stepping to it shows it at once.
func (u *UI) prefetchNext() {
	if len(u.cases) < 2 || u.cur < 0 {
		return
	}
	u.store.job(u.cases[(u.cur+1)%len(u.cases)])
	// The open case stays the most recently used.
	u.store.job(u.cases[u.cur])
}

// withheld reports whether the open case's probability and map are kept
// back: an out-of-distribution verdict the reader has not asked to see past.
func (u *UI) withheld(oc *openCase) bool {
	return oc != nil && oc.result != nil && inference.Withheld(oc.result) && !oc.showAnyway
}

// showScore fills the header, Evidence and Fit check from a result.
func (u *UI) showScore(oc *openCase) {
	r := oc.result
	u.head.show(oc, u.withheld(oc))
	u.evidence.showPrediction(oc.card, r.Prediction, inference.Withheld(r))
	u.showChecks(r)
	u.scan.refreshTemplateCheck()
	u.startRelevance()
}

// showUnprepared shows a scan that could not be prepared for the model: the
// checks that need no model, an out-of-distribution verdict, no probability.
func (u *UI) showUnprepared(oc *openCase) {
	u.head.show(oc, true)
	u.evidence.unavailable("No probability: " + oc.unprepared.Error())
	u.evidence.model.SetText(fmt.Sprintf("Model: %s, version %s", oc.card.Name, oc.card.Version))
	u.showChecks(oc.result)
	u.evidence.ovState.SetText("No relevance map: the model never saw this scan.")
	u.markReady()
}

// showAnyway reveals the probability and map of an out-of-distribution
// scan at the reader's request, marked as unreliable.
func (u *UI) showAnyway() {
	oc := u.open
	if oc == nil || oc.result == nil || oc.unprepared != nil {
		return
	}
	oc.showAnyway = true
	u.head.show(oc, false)
	u.startRelevance()
}

// showChecks fills the Fit check panel from a result.
func (u *UI) showChecks(r *inference.Result) { u.fit.showChecks(r) }

// startRelevance shows the relevance map of the chosen method for the open
// case: from the case's cache when it was computed before, else computed
// off the UI thread once the case has been scored (the map explains the
// model input that scoring prepared). Methods that take more than a few
// seconds run only when asked (the Compute button).
func (u *UI) startRelevance() {
	u.startRelevanceAsked(false)
}

// startRelevanceAsked is startRelevance; asked says the reader pressed
// Compute, which runs a slow method too.
func (u *UI) startRelevanceAsked(asked bool) {
	u.tasks.cancel(taskRelevance)
	u.scan.setOverlay(nil)
	u.evidence.refreshColorBar()
	u.evidence.compute.Hide()
	method, ok := u.evidence.selectedMethod()
	oc := u.open
	switch {
	case !ok:
		u.evidence.ovState.SetText("No relevance map (method: none).")
		u.markReady()
		return
	case oc == nil:
		return
	case oc.result == nil:
		u.evidence.ovState.SetText("The relevance map follows the score.")
		return
	case oc.result.Prepared == nil:
		u.evidence.ovState.SetText("No relevance map: the scan could not be prepared for the model.")
		u.markReady()
		return
	case u.withheld(oc):
		u.evidence.ovState.SetText("No relevance map while the fit check fails: the map would explain a probability that should not be relied on. Use \u201cShow anyway\u201d above to see both.")
		u.markReady()
		return
	}
	if sm := oc.maps[method]; sm != nil {
		u.applyMap(oc, sm)
		return
	}
	if !asked && onRequest(method, u.estimate(method)) {
		u.evidence.ovState.SetText(fmt.Sprintf("%s takes about %s here: it runs when you press Compute.", method.Title(), roundDuration(u.estimate(method))))
		u.evidence.compute.SetText("Compute " + method.Title() + " (≈ " + roundDuration(u.estimate(method)) + ")")
		u.evidence.compute.Show()
		u.markReady()
		return
	}
	u.evidence.ovState.SetText("Computing the " + method.Title() + " map…")
	prepared := oc.result.Prepared
	u.tasks.start(taskRelevance, method.Title()+" map for "+u.shownCode(u.cur), func(ctx context.Context, progress progressFunc) (func(), error) {
		t0 := time.Now()
		sm, err := u.computeMap(ctx, oc, prepared, method, progress)
		if err != nil {
			return nil, err
		}
		sm.elapsed = time.Since(t0)
		return func() {
			u.timed[method] = sm.elapsed
			u.evidence.refreshMethodLabels()
			if oc.maps == nil {
				oc.maps = map[overlay.Method]*shownMap{}
			}
			oc.maps[method] = sm
			if u.open != oc {
				return
			}
			u.applyMap(oc, sm)
		}, nil
	}, func(err error) {
		u.evidence.ovState.SetText(u.clean("No relevance map: " + err.Error()))
		u.markReady()
	})
}

// computeMap computes a map and carries it onto the displayed grid, off the
// UI thread.
func (u *UI) computeMap(ctx context.Context, oc *openCase, prepared *preprocess.Prepared, method overlay.Method, progress progressFunc) (*shownMap, error) {
	progress(-1, "preparing")
	ex, err := u.model.explainer()
	if err != nil {
		return nil, err
	}
	opt := overlay.Options{Progress: func(done, total int) {
		progress(float64(done)/float64(max(total, 1)), fmt.Sprintf("%d of %d model passes", done, total))
	}}
	// Integrated gradients from a blurred copy of the scan: on the demo
	// cohort it localises the pattern five times better than from an
	// all-zero scan (docs/evaluation.md) and shows less speckle.
	opt.Baseline = overlay.BaselineBlur
	m, err := ex.Compute(ctx, method, prepared.Tensor, opt)
	if err != nil {
		return nil, err
	}
	progress(-1, "carrying the map onto the scan")
	onScan, err := m.ToScan(prepared.Transform)
	if err != nil {
		return nil, err
	}
	// The planes show the scan reoriented to closest-canonical RAS; the
	// same reorientation of the map puts it on the same grid.
	shown, err := volume.Reorient(onScan)
	if err != nil {
		return nil, err
	}
	// Shown inside the head only, in per cent of its strongest voxel there.
	disp := viewer.DisplayMap(shown, oc.headMask())
	om, err := viewer.NewOverlayMap(oc.scene, disp, viewer.DisplayUnits)
	if err != nil {
		return nil, err
	}
	return &shownMap{m: m, vol: disp, om: om, peak: overlay.Peak(disp)}, nil
}

// applyMap draws a computed map over the open case.
// The next case is prefetched once the map is drawn, so that the two do
// not share the processor.
func (u *UI) applyMap(oc *openCase, sm *shownMap) {
	oc.relevance, oc.overlayVol, oc.peak = sm.m, sm.vol, sm.peak
	u.scan.setOverlay(sm.om)
	u.evidence.showRelevance(sm.m, sm.om)
	u.timing("map")
	u.markReady()
	u.prefetchNext()
}

// slowMap is the estimated time above which a method runs only when asked.
const slowMap = 4 * time.Second

// onRequest reports whether a method runs only when asked: the
// many-pass methods (integrated gradients, occlusion) unless measured
// faster than slowMap here. LRP and gradient × input take one backward
// pass and always run.
func onRequest(m overlay.Method, estimate time.Duration) bool {
	switch m {
	case overlay.LRP, overlay.GradientInput:
		return false
	}
	return estimate > slowMap
}

// estimate is how long a method's map takes here: the last time it was
// measured in this session, or a prior from its number of model passes
// relative to LRP (one forward and one backward pass).
func (u *UI) estimate(m overlay.Method) time.Duration {
	if d, ok := u.timed[m]; ok {
		return d
	}
	base, ok := u.timed[overlay.LRP]
	if !ok {
		base = 2 * time.Second
	}
	switch m {
	case overlay.IntegratedGradients:
		return 32 * base // its default of 64 path steps, batched: a prior until measured
	case overlay.Occlusion:
		return 40 * base
	}
	return base
}

// roundDuration prints a duration to a reader: "2 s", "1 min".
func roundDuration(d time.Duration) string {
	if d < 90*time.Second {
		return fmt.Sprintf("%.0f s", math.Max(1, d.Seconds()))
	}
	return fmt.Sprintf("%.0f min", d.Minutes())
}

// explainer returns the relevance maps' explainer for the model, made once.
func (m *model) explainer() (*overlay.Explainer, error) {
	s, err := m.get()
	if err != nil {
		return nil, err
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.ex == nil && m.exErr == nil {
		m.ex, m.exErr = overlay.New(s.ModelFolder(), s)
	}
	return m.ex, m.exErr
}
