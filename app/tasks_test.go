package app

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"
)

// runQueue runs posted functions until done is closed and the queue is empty.
func runQueue(q chan func(), done func() bool) {
	deadline := time.Now().Add(10 * time.Second)
	for time.Now().Before(deadline) {
		select {
		case f := <-q:
			f()
		case <-time.After(5 * time.Millisecond):
			if done() && len(q) == 0 {
				return
			}
		}
	}
}

// A run superseded by a newer run of its kind, or cancelled, never applies
// its result; the newest run does; a panic in background work becomes an
// error instead of ending the program.
func TestTasksApplyOnlyTheCurrentRun(t *testing.T) {
	q := make(chan func(), 1024)
	ts := newTasks(func(f func()) { q <- f }, nil)
	release := make(chan struct{})
	var applied []string
	slow := func(name string) work {
		return func(ctx context.Context, p progressFunc) (func(), error) {
			p(0.5, "half")
			select {
			case <-release:
			case <-ctx.Done():
				return nil, ctx.Err()
			}
			return func() { applied = append(applied, name) }, nil
		}
	}
	ts.start(taskScore, "first", slow("first"), nil)
	ts.start(taskScore, "second", slow("second"), nil) // supersedes first
	ts.start(taskRelevance, "third", slow("third"), nil)
	ts.cancel(taskRelevance)
	close(release)
	runQueue(q, func() bool { return !ts.busy(taskScore, taskRelevance) })
	ts.wait()
	runQueue(q, func() bool { return true })
	if len(applied) != 1 || applied[0] != "second" {
		t.Errorf("applied %v, want only the current run [second]", applied)
	}

	var got error
	ts.start(taskLoad, "panics", func(context.Context, progressFunc) (func(), error) {
		var counts []int
		counts[len(counts)]++ // index out of range: a runtime panic
		return nil, nil
	}, func(err error) { got = err })
	runQueue(q, func() bool { return !ts.busy(taskLoad) })
	var ie *internalError
	if !errors.As(got, &ie) || !strings.Contains(got.Error(), "internal error") {
		t.Errorf("panic gave %v", got)
	}
}
