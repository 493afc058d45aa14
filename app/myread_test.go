package app

import (
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/reading"
)

// A sequential reading session in the window: in the unaided read the
// Evidence and Fit check panels and the overlay are hidden and Meeting mode is
// forced (no identifier on screen); locking the read reveals the evidence for
// the aided read; locking that stores the read and the model's output shown.
func TestMyReadSequentialSession(t *testing.T) {
	dir := t.TempDir()
	series := writeDICOMCase(t, dir)
	file := filepath.Join(dir, "r1.bfread")
	s, err := reading.Create(file, []reading.Case{{Name: "HMRU-0001", Source: series, Truth: 1}, {Name: "HMRU-0002", Source: anatomical(t), Truth: 0}},
		reading.Options{Reader: "R1", Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	h := newHarness(t, Options{Session: file})
	h.u.start()
	h.settle()
	p := h.u.read
	if p.ti != 0 || h.u.open == nil {
		t.Fatalf("session did not open its first read: task %d, status %q", p.ti, h.u.message.Text)
	}
	first := p.tasks[0].Case.Code
	texts := h.texts()
	if !hasText(texts, "Case 1 of 2 · "+first+" · unaided read") {
		t.Errorf("worklist position not shown: %v", texts)
	}
	if !h.u.meeting || !h.u.meetingCheck.Disabled() {
		t.Error("Meeting mode is not forced in the unaided read")
	}
	if h.u.fit.root.Visible() || h.u.evidence.root.Visible() || h.u.head.root.Visible() {
		t.Error("Evidence or Fit check visible in the unaided read")
	}
	h.u.typedKey(keyEvent("O"))
	h.u.typedKey(keyEvent("O"))
	if h.u.scan.visibleOverlay() != nil || h.u.scan.layers().Overlay != nil {
		t.Error("overlay drawn in the unaided read")
	}
	for _, secret := range identifying(dir) {
		for _, x := range texts {
			if strings.Contains(x, secret) {
				t.Errorf("unaided read shows %q in %q", secret, x)
			}
		}
	}
	p.rating.SetText("35")
	p.confidence.SetSelected("2")
	p.lockRead()
	h.settle()
	if p.tasks[p.ti].Phase != reading.Aided || p.tasks[p.ti].Case.Code != first {
		t.Fatalf("after locking the unaided read the task is %+v", p.tasks[p.ti])
	}
	if !h.u.fit.root.Visible() || !h.u.evidence.root.Visible() || !h.u.head.root.Visible() || h.u.meetingCheck.Disabled() {
		t.Error("evidence still hidden in the aided read")
	}
	p.rating.SetText("70")
	p.lockRead()
	h.settle()
	if p.tasks[p.ti].Case.Code == first || p.tasks[p.ti].Phase != reading.Unaided || !hasText(h.texts(), "Case 2 of 2") {
		t.Errorf("did not move on to the next case's unaided read: %+v", p.tasks[p.ti])
	}
	// Previous goes back to the locked aided read: it can only be amended.
	p.step(-1)
	h.settle()
	if p.tasks[p.ti].Case.Code != first || p.tasks[p.ti].Phase != reading.Aided || !strings.HasPrefix(p.lock.Text, "Amend") || p.rating.Text != "70" {
		t.Fatalf("previous: task %+v, button %q, rating %q", p.tasks[p.ti], p.lock.Text, p.rating.Text)
	}
	p.rating.SetText("75")
	p.lockRead()
	h.settle()
	s, err = reading.Open(file)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	cur, _ := s.CurrentReads()
	if u, a := cur[first][reading.Unaided], cur[first][reading.Aided]; u.Rating != 35 || u.Confidence != 2 || a.Rating != 75 || a.Amendments != 1 || u.Seconds() < 0 {
		t.Errorf("stored reads %+v %+v", u, a)
	}
	m, _ := s.ModelOutputs()
	t.Logf("model outputs stored: %d (%+v)", len(m), m)
	if !h.u.model.missing() && len(m) != 1 {
		t.Errorf("model output not stored with the aided read: %v", m)
	}
}

// A crossover session in the window: each read shows or hides the evidence
// by its own condition, the first sitting comes first, and a second-sitting
// read locked within the washout says so on the status line.
func TestMyReadCrossoverSession(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "x.bfread")
	s, err := reading.Create(file, []reading.Case{{Name: "a", Source: anatomical(t), Truth: 1}, {Name: "b", Source: anatomical(t), Truth: 0}},
		reading.Options{Reader: "R2", Seed: 8, Design: reading.Crossover})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	h := newHarness(t, Options{Session: file})
	h.u.start()
	h.settle()
	p := h.u.read
	for n := 0; n < 4; n++ {
		task := p.tasks[p.ti]
		if want := n/2 + 1; task.Sitting != want {
			t.Fatalf("read %d is in sitting %d, want %d", n+1, task.Sitting, want)
		}
		blind := task.Phase == reading.Unaided
		if h.u.evidence.root.Visible() == blind || h.u.scan.ovCheck.Disabled() != blind || (blind && !h.u.meeting) {
			t.Errorf("read %d (%s): evidence visible %v, overlay check disabled %v, meeting %v",
				n+1, task.Phase, h.u.evidence.root.Visible(), h.u.scan.ovCheck.Disabled(), h.u.meeting)
		}
		p.rating.SetText("50")
		p.lockRead()
		h.settle()
		if n == 2 && !strings.Contains(h.u.message.Text, "washout") {
			t.Errorf("second sitting within the washout: status %q", h.u.message.Text)
		}
	}
}
