package app

import (
	"context"
	"math/rand"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// Switching cases and relevance methods while scans load, scores run and
// maps compute never crashes and never leaves a result on the wrong case:
// after a burst of random clicks the window shows the last case chosen,
// scored, with the map of the last method chosen. Run it with -race (the
// Makefile's race target does) to check the background tasks' sharing.
func TestStressSwitchCasesAndMethods(t *testing.T) {
	src := anatomical(t)
	dir := t.TempDir()
	var paths []string
	for _, name := range []string{"a.nii", "b.nii", "c.nii"} {
		b, err := os.ReadFile(src)
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, p)
	}
	h := newHarness(t, Options{Model: tinyModelFolder(t)})
	h.u.addPaths(paths, true)
	rng := rand.New(rand.NewSource(17))
	labels := methodLabels()
	steps := 40
	if testing.Short() {
		steps = 12
	}
	for i := 0; i < steps; i++ {
		switch rng.Intn(4) {
		case 0:
			h.u.selectCase(rng.Intn(len(h.u.cases)))
		case 1:
			h.u.evidence.selectMethod(labels[rng.Intn(len(labels))])
		case 2:
			h.u.typedKey(keyEvent("N"))
		case 3:
			h.u.setMeeting(!h.u.meeting)
		}
		// Let some of the background work land, some not.
		h.drain(time.Duration(rng.Intn(400)) * time.Millisecond)
	}
	h.u.evidence.selectMethod("LRP")
	h.settle()
	h.u.showAnyway() // the real scan may fail the tiny model's fit check
	h.settle()
	u := h.u
	if u.open == nil || u.open.c.Code != u.cases[u.cur].Code {
		t.Fatalf("open case %v, chosen %d", u.open, u.cur)
	}
	if u.open.result == nil {
		t.Fatalf("last case not scored: %q / %q", u.evidence.status.Text, u.message.Text)
	}
	if u.scan.overlay == nil || u.open.relevance == nil || u.open.relevance.Method != "lrp" {
		t.Fatalf("no LRP map on the last case: %q / %q", u.evidence.ovState.Text, u.message.Text)
	}
}

// A panic in a background task's result (on the UI thread) becomes a
// message in the window; the window and its state stay.
func TestPanicInResultBecomesMessage(t *testing.T) {
	h := newHarness(t, Options{})
	var got error
	h.u.tasks.start(taskLoad, "broken", func(_ context.Context, _ progressFunc) (func(), error) {
		return func() {
			var p *openCase
			_ = p.c.Code // nil pointer dereference on the UI thread
		}, nil
	}, func(err error) { got = err; h.u.fail(err) })
	h.settle()
	if got == nil || !strings.Contains(h.u.message.Text, "internal error") {
		t.Fatalf("panic in a result: error %v, message %q", got, h.u.message.Text)
	}
}

// drain runs queued UI work for about d, whether or not tasks are running.
func (h *harness) drain(d time.Duration) {
	end := time.Now().Add(d)
	for time.Now().Before(end) {
		select {
		case f := <-h.q:
			f()
		case <-time.After(5 * time.Millisecond):
		}
	}
}
