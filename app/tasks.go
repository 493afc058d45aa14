package app

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"
)

// Task kinds. Each kind has at most one run at a time: starting a kind
// cancels its previous run, and switching case cancels every kind.
const (
	taskDemo      = "demo"
	taskLoad      = "load"
	taskScore     = "score"
	taskRelevance = "relevance"
)

// progressFunc reports a fraction in [0, 1] (negative when unknown) and a
// short message. It may be called from any goroutine.
type progressFunc func(frac float64, msg string)

// work is the part of a task that runs off the UI thread. It returns the
// function that applies its result on the UI thread.
type work func(ctx context.Context, progress progressFunc) (apply func(), err error)

// taskState is what the UI shows of one running task.
type taskState struct {
	kind, label string
	frac        float64
	msg         string
	cancel      context.CancelFunc
	started     time.Time
}

// tasks runs background work. Results are applied on the UI thread through
// post, and only when their run is still the current one for its kind and
// has not been cancelled, so a result never lands on the wrong case.
type tasks struct {
	post     func(func()) // runs a function on the UI thread (fyne.Do in the app)
	onChange func()       // called on the UI thread when tasks start, progress or end

	mu      sync.Mutex
	running map[string]*taskState
	wg      sync.WaitGroup
}

func newTasks(post func(func()), onChange func()) *tasks {
	return &tasks{post: post, onChange: onChange, running: map[string]*taskState{}}
}

// start runs w in a goroutine as the current task of its kind; onErr runs on
// the UI thread when w fails (not when it was cancelled or superseded).
// start must be called on the UI thread.
func (ts *tasks) start(kind, label string, w work, onErr func(error)) {
	ctx, cancel := context.WithCancel(context.Background())
	t := &taskState{kind: kind, label: label, frac: -1, cancel: cancel, started: time.Now()}
	ts.mu.Lock()
	if old := ts.running[kind]; old != nil {
		old.cancel()
	}
	ts.running[kind] = t
	ts.mu.Unlock()
	ts.changed()

	var last time.Time
	var lastMu sync.Mutex
	progress := func(frac float64, msg string) {
		lastMu.Lock()
		now := time.Now()
		// Four updates a second: each repaints the window, which a
		// software renderer does on the same processors as the work.
		throttle := now.Sub(last) < 250*time.Millisecond && frac < 1
		if !throttle {
			last = now
		}
		lastMu.Unlock()
		if throttle || ctx.Err() != nil {
			return
		}
		ts.post(func() {
			ts.mu.Lock()
			t.frac, t.msg = frac, msg
			ts.mu.Unlock()
			ts.changed()
		})
	}
	ts.wg.Add(1)
	go func() {
		defer ts.wg.Done()
		apply, err := runSafely(ctx, w, progress)
		ts.post(func() {
			defer cancel()
			current := ts.finish(t)
			ts.changed()
			if !current || ctx.Err() != nil {
				return
			}
			if err != nil {
				if onErr != nil && !errors.Is(err, context.Canceled) {
					onErr(err)
				}
				return
			}
			if apply != nil {
				if perr := applySafely(apply); perr != nil && onErr != nil {
					onErr(perr)
				}
			}
		})
	}()
}

// applySafely runs a task's result on the UI thread, turning a panic into
// an error so that the window reports it and stays open.
func applySafely(apply func()) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = &internalError{value: r}
		}
	}()
	apply()
	return nil
}

// runSafely turns a panic in background work into an error, so that a bug
// in one computation shows as a message instead of ending the program.
func runSafely(ctx context.Context, w work, p progressFunc) (apply func(), err error) {
	defer func() {
		if r := recover(); r != nil {
			apply, err = nil, &internalError{value: r}
		}
	}()
	return w(ctx, p)
}

// internalError is a recovered panic from background work.
type internalError struct{ value any }

func (e *internalError) Error() string { return fmt.Sprintf("internal error: %v", e.value) }

// finish removes t if it is still the current task of its kind.
func (ts *tasks) finish(t *taskState) bool {
	ts.mu.Lock()
	defer ts.mu.Unlock()
	if ts.running[t.kind] != t {
		return false
	}
	delete(ts.running, t.kind)
	return true
}

// cancel stops the current run of each kind given.
func (ts *tasks) cancel(kinds ...string) {
	ts.mu.Lock()
	for _, k := range kinds {
		if t := ts.running[k]; t != nil {
			t.cancel()
			delete(ts.running, k)
		}
	}
	ts.mu.Unlock()
	ts.changed()
}

// snapshot returns the running tasks in a stable order.
func (ts *tasks) snapshot() []taskState {
	ts.mu.Lock()
	defer ts.mu.Unlock()
	var out []taskState
	for _, k := range []string{taskDemo, taskLoad, taskScore, taskRelevance} {
		if t := ts.running[k]; t != nil {
			out = append(out, *t)
		}
	}
	return out
}

// busy reports whether a task of any of the kinds is running.
func (ts *tasks) busy(kinds ...string) bool {
	ts.mu.Lock()
	defer ts.mu.Unlock()
	for _, k := range kinds {
		if ts.running[k] != nil {
			return true
		}
	}
	return false
}

func (ts *tasks) changed() {
	if ts.onChange != nil {
		ts.onChange()
	}
}

// wait blocks until every started goroutine has returned (their results may
// still be queued for the UI thread).
func (ts *tasks) wait() { ts.wg.Wait() }
