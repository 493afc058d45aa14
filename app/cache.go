package app

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"

	"brightfold/inference"
	"brightfold/internal/volume"
	"brightfold/overlay"
	"brightfold/viewer"
)

// keepCases is how many cases stay prepared in memory (the open one, the
// one prefetched after it, the one before): about 60 MB each for a demo
// scan with its scene, score and a few maps.
const keepCases = 3

// caseJob loads and scores one case in the background, once, for whoever
// asks: the case being opened, or the prefetch of the next case. Its
// results are written before the channels close and read only after.
type caseJob struct {
	c      Case
	cancel context.CancelFunc
	used   time.Time // last time the case was asked for (UI thread)

	loaded chan struct{} // closed when oc or loadErr is set
	scored chan struct{} // closed when the score (or scoreErr) is set
	oc     *openCase
	// The score, kept apart from oc until the UI thread applies it.
	result     *inference.Result
	card       *inference.Card
	unprepared *inference.NotPreparedError
	// loadErr and scoreErr are the stages' errors; an unprepared scan is not
	// an error (result holds its checks, unprepared the reason).
	loadErr, scoreErr error

	mu       sync.Mutex
	progress progressFunc // where the job's progress shows (the task strip), may be nil
}

// report sends progress to whoever watches the job now.
func (j *caseJob) report(frac float64, msg string) {
	j.mu.Lock()
	p := j.progress
	j.mu.Unlock()
	if p != nil {
		p(frac, msg)
	}
}

// watch directs the job's progress to p (nil: nowhere).
func (j *caseJob) watch(p progressFunc) {
	j.mu.Lock()
	j.progress = p
	j.mu.Unlock()
}

// caseStore keeps the jobs of recently used cases. Its methods run on the UI
// thread; the jobs run in their own goroutines.
type caseStore struct {
	model *model
	jobs  map[string]*caseJob // by case key
	wg    sync.WaitGroup
}

func newCaseStore(m *model) *caseStore {
	return &caseStore{model: m, jobs: map[string]*caseJob{}}
}

// caseKey identifies a case's content: its paths and series.
func caseKey(c Case) string { return fmt.Sprint(c.Paths, "|", c.Series) }

// job returns the case's job, starting it when there is none (or the last
// one failed or was cancelled).
func (s *caseStore) job(c Case) *caseJob {
	k := caseKey(c)
	if j := s.jobs[k]; j != nil && !j.failed() {
		j.used = time.Now()
		return j
	}
	ctx, cancel := context.WithCancel(context.Background())
	j := &caseJob{c: c, cancel: cancel, used: time.Now(), loaded: make(chan struct{}), scored: make(chan struct{})}
	s.jobs[k] = j
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		s.run(ctx, j)
	}()
	s.evict()
	return j
}

// failed reports whether the job ended in an error (so a new attempt may
// be made); a running job has not failed.
func (j *caseJob) failed() bool {
	select {
	case <-j.scored:
		return j.loadErr != nil || (j.scoreErr != nil && !errors.Is(j.scoreErr, errNoModelFolder))
	default:
		return false
	}
}

// run loads the scan, scores it, then prepares its maps.
func (s *caseStore) run(ctx context.Context, j *caseJob) {
	s.loadAndScore(ctx, j)
	j.prepareMaps(ctx)
}

// loadAndScore loads the scan, then scores it. A panic becomes the stage's error.
func (s *caseStore) loadAndScore(ctx context.Context, j *caseJob) {
	loadedClosed := false
	defer func() {
		if r := recover(); r != nil {
			err := &internalError{value: r}
			if !loadedClosed {
				j.loadErr = err
				close(j.loaded)
			} else {
				j.scoreErr = err
			}
		}
		close(j.scored)
	}()
	j.oc, j.loadErr = loadCase(ctx, j.c, j.report)
	loadedClosed = true
	close(j.loaded)
	if j.loadErr != nil {
		return
	}
	j.scoreErr = s.score(ctx, j)
}

// prepareMaps finds, once the case is scored, what every map of it needs:
// the head mask the maps are drawn inside. A map task started meanwhile
// waits for it (openCase.headMask) instead of computing it again. A panic
// here leaves the mask empty (maps then drawn everywhere), never the
// program ended.
func (j *caseJob) prepareMaps(ctx context.Context) {
	if j.loadErr != nil || j.scoreErr != nil || ctx.Err() != nil {
		return
	}
	defer func() { recover() }()
	j.oc.headMask()
}

// score runs the model on the loaded scan.
func (s *caseStore) score(ctx context.Context, j *caseJob) error {
	j.report(-1, "loading the model")
	sess, err := s.model.get()
	if err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	r, err := sess.ScoreContext(ctx, j.oc.vol, func(st inference.Stage, done float64) { j.report(done, string(st)) })
	j.card = sess.ModelFolder().Card
	var np *inference.NotPreparedError
	if errors.As(err, &np) {
		// A scan the model cannot take is a result: out-of-distribution,
		// with the checks that need no model, and no probability.
		j.result, j.unprepared = np.Result, np
		return nil
	}
	if err != nil {
		return fmt.Errorf("%s: %w", j.c.Code, err)
	}
	j.result = r
	return nil
}

// evict cancels and forgets the least recently used jobs beyond keepCases.
func (s *caseStore) evict() {
	for len(s.jobs) > keepCases {
		var oldK string
		var old *caseJob
		for k, j := range s.jobs {
			if old == nil || j.used.Before(old.used) {
				oldK, old = k, j
			}
		}
		old.cancel()
		delete(s.jobs, oldK)
	}
}

// forget drops a case's job (after a series was chosen, for instance).
func (s *caseStore) forget(c Case) {
	if j := s.jobs[caseKey(c)]; j != nil {
		j.cancel()
		delete(s.jobs, caseKey(c))
	}
}

// close cancels every job and waits for them.
func (s *caseStore) close() {
	for _, j := range s.jobs {
		j.cancel()
	}
	s.wg.Wait()
}

// shownMap is a relevance map ready to draw: on the model grid, carried onto
// the displayed grid, prepared for the planes, with its peak there.
type shownMap struct {
	m       *overlay.Map
	vol     *volume.Volume
	om      *viewer.OverlayMap
	peak    [3]int
	elapsed time.Duration
}
