package app

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/fitcheck"
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

// startEvidence scores the open case and computes its relevance map, both
// off the UI thread.
func (u *UI) startEvidence() {
	oc := u.open
	u.evidence.status.SetText("Scoring…")
	u.tasks.start(taskScore, "Scoring "+oc.c.Code, func(ctx context.Context, progress progressFunc) (func(), error) {
		progress(-1, "loading the model")
		s, err := u.model.get()
		if err != nil {
			return nil, err
		}
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		r, err := s.ScoreContext(ctx, oc.vol, func(st inference.Stage, done float64) { progress(done, string(st)) })
		card := s.ModelFolder().Card
		var np *inference.NotPreparedError
		if errors.As(err, &np) {
			// A scan the model cannot take is a result: out-of-distribution,
			// with the checks that need no model, and no probability.
			return func() { u.showUnprepared(oc, card, np) }, nil
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", oc.c.Code, err)
		}
		return func() { u.showScore(oc, card, r) }, nil
	}, func(err error) {
		why := err.Error()
		u.evidence.unavailable("No probability: " + why)
		u.fit.unavailable("No verdict: " + why)
		u.evidence.ovState.SetText("No relevance map without a score.")
		u.markReady()
	})
}

// showScore fills Evidence and Fit check from a result.
func (u *UI) showScore(oc *openCase, card *inference.Card, r *inference.Result) {
	if u.open != oc {
		return
	}
	oc.result, oc.card = r, card
	ood := r.Verdict == fitcheck.OutOfDistribution
	u.evidence.showPrediction(card, r.Prediction, ood)
	u.showChecks(r)
	u.startRelevance()
}

// showUnprepared shows a scan that could not be prepared for the model: the
// checks that need no model, an out-of-distribution verdict, no probability.
func (u *UI) showUnprepared(oc *openCase, card *inference.Card, np *inference.NotPreparedError) {
	if u.open != oc {
		return
	}
	oc.result, oc.card = np.Result, card
	u.evidence.unavailable("No probability: " + np.Error())
	u.evidence.model.SetText(fmt.Sprintf("Model: %s, version %s", card.Name, card.Version))
	u.showChecks(np.Result)
	u.evidence.ovState.SetText("No relevance map: the model never saw this scan.")
	u.markReady()
}

// showChecks fills the Fit check panel from a result.
func (u *UI) showChecks(r *inference.Result) {
	ood := r.Verdict == fitcheck.OutOfDistribution
	// Failed checks first, so that the reasons for the verdict come first.
	checks := append(r.FailedChecks(), passed(r.Checks)...)
	rows := make([]checkRow, len(checks))
	for i, c := range checks {
		rows[i] = checkRow{Name: inference.CheckTitle(c.Name), Value: inference.FormatValue(c.Value), Limit: c.Threshold,
			Sentence: c.Explanation, Pass: c.Pass, Required: c.Required}
	}
	u.fit.showChecks(ood, rows)
}

// passed returns the checks that pass, in their order.
func passed(cs []fitcheck.Check) []fitcheck.Check {
	var out []fitcheck.Check
	for _, c := range cs {
		if c.Pass {
			out = append(out, c)
		}
	}
	return out
}

// startRelevance computes the relevance map of the chosen method for the
// open case, off the UI thread, once the case has been scored (the map
// explains the model input that scoring prepared).
func (u *UI) startRelevance() {
	u.tasks.cancel(taskRelevance)
	u.scan.setOverlay(nil)
	u.evidence.refreshColorBar()
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
	}
	u.evidence.ovState.SetText("Computing the " + method.Title() + " map…")
	u.tasks.start(taskRelevance, method.Title()+" map for "+oc.c.Code, func(ctx context.Context, progress progressFunc) (func(), error) {
		progress(-1, "preparing")
		ex, err := u.model.explainer()
		if err != nil {
			return nil, err
		}
		opt := overlay.Options{Progress: func(done, total int) {
			progress(float64(done)/float64(max(total, 1)), fmt.Sprintf("%d of %d model passes", done, total))
		}}
		m, err := ex.Compute(ctx, method, oc.result.Prepared.Tensor, opt)
		if err != nil {
			return nil, err
		}
		progress(-1, "carrying the map onto the scan")
		onScan, err := m.ToScan(oc.result.Prepared.Transform)
		if err != nil {
			return nil, err
		}
		// The planes show the scan reoriented to closest-canonical RAS; the
		// same reorientation of the map puts it on the same grid.
		shown, err := volume.Reorient(onScan)
		if err != nil {
			return nil, err
		}
		om, err := viewer.NewOverlayMap(oc.scene, shown, relevanceUnits(m))
		if err != nil {
			return nil, err
		}
		peak := overlay.Peak(shown)
		return func() {
			if u.open != oc {
				return
			}
			oc.relevance, oc.overlayVol, oc.peak = m, shown, peak
			u.scan.setOverlay(om)
			u.evidence.showRelevance(m, om)
			u.markReady()
		}, nil
	}, func(err error) {
		u.evidence.ovState.SetText(u.clean("No relevance map: " + err.Error()))
		u.markReady()
	})
}

// relevanceUnits labels a map's values for the colour bar and readout.
func relevanceUnits(m *overlay.Map) string {
	if m.Additive {
		return "share of the " + strings.ReplaceAll(m.Class, "_", " ") + " logit"
	}
	return "drop of the " + strings.ReplaceAll(m.Class, "_", " ") + " logit"
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
