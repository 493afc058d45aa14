package app

import (
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/canvas"
	"fyne.io/fyne/v2/test"
	"fyne.io/fyne/v2/widget"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
)

// harness drives a UI on Fyne's headless test driver. Background tasks run
// for real; what they post for the UI thread is queued and run by settle on
// the test goroutine, so that every widget change happens on one goroutine.
type harness struct {
	t testing.TB
	q chan func()
	u *UI
	w fyne.Window
}

func newHarness(t testing.TB, opts Options) *harness {
	t.Helper()
	a := test.NewTempApp(t)
	a.Settings().SetTheme(newTheme())
	w := test.NewWindow(nil)
	h := &harness{t: t, q: make(chan func(), 1<<14), w: w}
	h.u = newUI(a, w, opts, func(f func()) { h.q <- f })
	w.SetContent(h.u.root)
	w.Resize(windowSize)
	h.u.installShortcuts()
	t.Cleanup(func() {
		h.u.close()
		done := make(chan struct{})
		go func() { h.u.tasks.wait(); close(done) }()
		for {
			select {
			case <-done:
				h.u.model.close()
				w.Close()
				return
			case <-h.q:
			}
		}
	})
	return h
}

// settle runs queued UI work until no task is running and the queue is empty.
func (h *harness) settle() {
	h.t.Helper()
	deadline := time.Now().Add(4 * time.Minute)
	for {
		select {
		case f := <-h.q:
			f()
			continue
		default:
		}
		if !h.u.tasks.busy(taskDemo, taskLoad, taskScore, taskRelevance) {
			select {
			case f := <-h.q:
				f()
				continue
			case <-time.After(30 * time.Millisecond):
			}
			if len(h.q) == 0 && !h.u.tasks.busy(taskDemo, taskLoad, taskScore, taskRelevance) {
				return
			}
		}
		if time.Now().After(deadline) {
			h.t.Fatalf("background tasks still running after 4 minutes: %+v", h.u.tasks.snapshot())
		}
		select {
		case f := <-h.q:
			f()
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// open adds paths as cases, opens the first and waits for it.
func (h *harness) open(paths ...string) {
	h.t.Helper()
	h.u.addPaths(paths, true)
	h.settle()
	if h.u.open == nil {
		h.t.Fatalf("case not opened; status: %q", h.u.message.Text)
	}
}

// texts returns every text the window renders: canvas texts, labels,
// rich texts, buttons, checks, selects and list rows, overlays included,
// and the window title.
func (h *harness) texts() []string {
	out := []string{h.w.Title()}
	var walk func(o fyne.CanvasObject)
	walk = func(o fyne.CanvasObject) {
		if o == nil || !o.Visible() {
			return
		}
		switch x := o.(type) {
		case *canvas.Text:
			out = append(out, x.Text)
		case *widget.Label:
			out = append(out, x.Text)
		case *widget.Select:
			out = append(out, x.Selected)
		case *widget.Check:
			out = append(out, x.Text)
		case *widget.Button:
			out = append(out, x.Text)
		case *widget.RichText:
			out = append(out, x.String())
		}
		switch x := o.(type) {
		case *fyne.Container:
			for _, c := range x.Objects {
				walk(c)
			}
		case fyne.Widget:
			for _, c := range test.WidgetRenderer(x).Objects() {
				walk(c)
			}
		}
	}
	c := h.w.Canvas()
	walk(c.Content())
	for _, o := range c.Overlays().List() {
		walk(o)
	}
	return out
}

// anatomical is a real T1 scan from Debian's python3-nibabel test data.
func anatomical(t *testing.T) string {
	return refcheck.Path(t, "/usr/lib/python3/dist-packages/nibabel/tests/data/anatomical.nii")
}

// canonicalShape asks nibabel (python3-nibabel 5.0, as_closest_canonical)
// for the voxel dims of a NIfTI file in closest-canonical RAS order.
func canonicalShape(t *testing.T, path string) [3]int {
	t.Helper()
	refcheck.PythonModule(t, "nibabel")
	out, err := exec.Command(refcheck.Python, "-c",
		"import sys, nibabel as nib; s = nib.as_closest_canonical(nib.load(sys.argv[1])).shape; print(s[0], s[1], s[2])", path).Output()
	if err != nil {
		t.Fatalf("nibabel: %v", err)
	}
	var d [3]int
	f := strings.Fields(string(out))
	for i := range d {
		d[i] = atoi(t, f[i])
	}
	return d
}

func atoi(t *testing.T, s string) int {
	n := 0
	for _, r := range s {
		if r < '0' || r > '9' {
			t.Fatalf("not a number: %q", s)
		}
		n = n*10 + int(r-'0')
	}
	return n
}

// writeDICOMCase writes the anatomical scan as a DICOM series carrying the
// fictional demo identifiers, so that Meeting mode has something to hide.
func writeDICOMCase(t *testing.T, dir string) string {
	t.Helper()
	v, err := volume.Load([]string{anatomical(t)}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "DEMO_SUBJECT0001_series")
	err = dicom.WriteSeries(out, v, dicom.WriteOptions{
		Seed: "HMRU-0001/T1", PatientName: "DEMO^SUBJECT0001", PatientID: "HMRU-0001",
		PatientBirthDate: "19500101", StudyDate: "20260301", SeriesDescription: "T1 demo",
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// keyEvent is a typed key by name, e.g. "M".
func keyEvent(name string) *fyne.KeyEvent { return &fyne.KeyEvent{Name: fyne.KeyName(name)} }
