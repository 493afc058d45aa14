package app

import (
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"fyne.io/fyne/v2"
	"fyne.io/fyne/v2/storage"
	"fyne.io/fyne/v2/test"
	"fyne.io/fyne/v2/widget"

	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
)

// Files dropped on the window become cases, and the first one opens.
func TestDropOpensScans(t *testing.T) {
	h := newHarness(t, Options{})
	path := anatomical(t)
	h.u.dropped(fyne.NewPos(10, 10), []fyne.URI{storage.NewFileURI(path)})
	h.settle()
	if len(h.u.cases) != 1 || h.u.open == nil || h.u.cases[0].Paths[0] != path {
		t.Fatalf("drop: cases %+v, open %v", h.u.cases, h.u.open != nil)
	}
}

// A folder holding two DICOM series asks which one to open, listing both,
// and opens the one picked.
func TestFolderWithSeveralSeriesAsks(t *testing.T) {
	dir := t.TempDir()
	v, err := volume.Load([]string{anatomical(t)}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for i, desc := range []string{"T1 first", "T1 repeat"} {
		err := dicom.WriteSeries(filepath.Join(dir, desc), v, dicom.WriteOptions{
			Seed: "HMRU-0002/" + desc, StudySeed: "HMRU-0002", PatientName: "DEMO^SUBJECT0002",
			SeriesDescription: desc, SeriesNumber: i + 1,
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	h := newHarness(t, Options{})
	h.u.addPaths([]string{dir}, true)
	h.settle()
	if h.u.open != nil {
		t.Fatal("opened without asking which series")
	}
	overlays := h.w.Canvas().Overlays().List()
	if len(overlays) == 0 {
		t.Fatal("no series chooser shown")
	}
	var list *widget.List
	var walk func(o fyne.CanvasObject)
	walk = func(o fyne.CanvasObject) {
		switch x := o.(type) {
		case *widget.List:
			list = x
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
	walk(overlays[len(overlays)-1])
	if list == nil || list.Length() != 2 {
		t.Fatalf("series chooser list %v", list)
	}
	texts := strings.Join(h.texts(), "\n")
	if !strings.Contains(texts, "T1 first") || !strings.Contains(texts, "T1 repeat") {
		t.Errorf("chooser does not describe both series:\n%s", texts)
	}
	listed, err := dicom.ListSeries([]string{dir})
	if err != nil {
		t.Fatal(err)
	}
	list.Select(1)
	h.settle()
	if h.u.open == nil {
		t.Fatalf("picked series not opened: %q", h.u.message.Text)
	}
	if got, want := h.u.open.vol.Meta.SeriesDescription, listed[1].Description; got != want || h.u.cases[0].Series != listed[1].Key {
		t.Errorf("opened series %q (key %q), picked %q (key %q)", got, h.u.cases[0].Series, want, listed[1].Key)
	}
}

// In Meeting mode the export goes to the export folder without a file
// dialog (which would show folder names), named by the list code and
// what the figure holds.
func TestMeetingExportWritesFile(t *testing.T) {
	home := t.TempDir()
	t.Setenv("HOME", home)
	h := newHarness(t, Options{Meeting: true})
	h.open(anatomical(t))
	h.u.exportView()
	p := filepath.Join(home, "Brightfold exports", "Case-01-scan-axial.png")
	f, err := os.Open(p)
	if err != nil {
		t.Fatalf("export not written: %v (status %q)", err, h.u.message.Text)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if img.Bounds().Dx() < 600 {
		t.Errorf("export %v", img.Bounds())
	}
	if strings.Contains(h.u.message.Text, home) {
		t.Errorf("Meeting mode status shows the path: %q", h.u.message.Text)
	}
}
