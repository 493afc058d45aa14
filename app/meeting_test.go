package app

import (
	"image"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
)

// identifying lists what Meeting mode must hide for the DICOM case that
// writeDICOMCase makes: the fictional patient name (and its parts), the
// birth and study dates in DICOM and ISO form, and the path.
func identifying(dir string) []string {
	return []string{"DEMO^SUBJECT0001", "SUBJECT0001", "Subject0001", "19500101", "1950-01-01", "20260301", "2026-03-01", dir,
		"DEMO_SUBJECT0001_series", "HMRU-0001", "SCAN-01"}
}

// Outside Meeting mode the identity bar shows the patient name and the path;
// in Meeting mode no rendered text holds the name, the dates or the path,
// the case code is shown instead, and the mode's state is on screen.
func TestMeetingModeHidesIdentifiers(t *testing.T) {
	dir := t.TempDir()
	series := writeDICOMCase(t, dir)
	h := newHarness(t, Options{})
	h.open(series)
	texts := h.texts()
	if !hasText(texts, "Demo, Subject0001") || !hasText(texts, "1950-01-01") || !hasText(texts, series) {
		t.Fatalf("outside Meeting mode the name and path should be shown; identity %q", h.u.identity.Text)
	}

	h.u.setMeeting(true)
	// Make some text that would carry a path: a failed open of a missing file.
	h.u.fail(&os.PathError{Op: "open", Path: filepath.Join(dir, "missing.nii"), Err: os.ErrNotExist})
	texts = h.texts()
	for _, s := range identifying(dir) {
		for _, x := range texts {
			if strings.Contains(x, s) {
				t.Errorf("Meeting mode shows %q in %q", s, x)
			}
		}
	}
	if !hasText(texts, "Case 01") {
		t.Error("Meeting mode does not show the case code")
	}
	if !hasText(texts, "MEETING MODE ON") || !h.u.meetingCheck.Checked {
		t.Error("Meeting mode's state is not visible")
	}

	// The M key switches it off again and the identifiers come back.
	h.u.typedKey(keyEvent("M"))
	if h.u.meeting || !hasText(h.texts(), "Demo, Subject0001") {
		t.Error("key M did not leave Meeting mode")
	}
}

// The exported view carries the notice, read back from the PNG by optical
// character recognition (Debian's tesseract-ocr), and in Meeting mode it
// holds none of the identifiers.
func TestExportCarriesNoticeAndHidesIdentifiers(t *testing.T) {
	tess := refcheck.Path(t, "/usr/bin/tesseract")
	dir := t.TempDir()
	series := writeDICOMCase(t, dir)
	h := newHarness(t, Options{})
	h.open(series)
	h.u.setMeeting(true)
	img, err := h.u.exportImage()
	if err != nil {
		t.Fatal(err)
	}
	b := img.Bounds()
	if b.Dx() < 600 || b.Dy() < 400 {
		t.Fatalf("export is %v", b)
	}
	// The notice band across the top is read on its own (tesseract mixes
	// lines of a band and the columns below it).
	band := 0
	for band < b.Dy() && img.At(2, band) == img.At(2, 2) {
		band++
	}
	text := ocr(t, tess, img.(*image.RGBA).SubImage(image.Rect(0, 0, b.Dx(), band)), 2) + " " + ocr(t, tess, img, 2)
	norm := strings.Join(strings.Fields(text), " ")
	for _, phrase := range []string{"Research use only", "Not a diagnosis", "licensed clinician"} {
		if !strings.Contains(norm, phrase) {
			t.Errorf("OCR of the export lacks %q:\n%s", phrase, norm)
		}
	}
	for _, s := range identifying(dir) {
		if strings.Contains(norm, s) {
			t.Errorf("the Meeting mode export shows %q", s)
		}
	}
	// A composed figure: the list code, the model and the verdict, no
	// window controls.
	for _, want := range []string{"Case", "Harbourside", "DISTRIBUTION", "Withheld"} {
		if !strings.Contains(norm, want) {
			t.Errorf("OCR of the export lacks %q:\n%s", want, norm)
		}
	}
	for _, control := range []string{"Reset view", "Drag:", "Crosshair", "wheel"} {
		if strings.Contains(norm, control) {
			t.Errorf("the export shows the window control %q:\n%s", control, norm)
		}
	}
	if got := h.u.exportName(); got != "Case-01-scan-axial.png" && !strings.HasPrefix(got, "Case-01-") {
		t.Errorf("export name %q", got)
	}
}

// ocr upscales img by k (tesseract reads small screen fonts better large)
// and returns the recognised text.
func ocr(t *testing.T, tess string, img image.Image, k int) string {
	t.Helper()
	b := img.Bounds()
	big := image.NewRGBA(image.Rect(0, 0, b.Dx()*k, b.Dy()*k))
	for y := 0; y < b.Dy()*k; y++ {
		for x := 0; x < b.Dx()*k; x++ {
			big.Set(x, y, img.At(b.Min.X+x/k, b.Min.Y+y/k))
		}
	}
	p := filepath.Join(t.TempDir(), "export.png")
	f, err := os.Create(p)
	if err != nil {
		t.Fatal(err)
	}
	if err := png.Encode(f, big); err != nil {
		t.Fatal(err)
	}
	f.Close()
	out, err := exec.Command(tess, p, "stdout").Output()
	if err != nil {
		t.Fatalf("tesseract: %v", err)
	}
	return string(out)
}

// Meeting mode hides whole paths and only paths in the status line: the
// issue's example with a home folder holding spaces, and two paths with
// ordinary words between them (the words stay).
func TestMeetingModeHidesWholePathsOnly(t *testing.T) {
	h := newHarness(t, Options{})
	h.u.setMeeting(true)
	for in, want := range map[string]string{
		"Exported /root/Roe Jane 1953/exports/x.png and /tmp/y":         "Exported [path hidden] and [path hidden]",
		"Read /data/Harbour side/t1.nii.gz, then wrote /tmp/out.png ok": "Read [path hidden], then wrote [path hidden] ok",
	} {
		h.u.say(in)
		if got := h.u.message.Text; got != want {
			t.Errorf("Meeting mode shows %q as %q, want %q", in, got, want)
		}
	}
	h.u.setMeeting(false)
	h.u.say("Exported /tmp/y")
	if got := h.u.message.Text; got != "Exported /tmp/y" {
		t.Errorf("outside Meeting mode the path should stay: %q", got)
	}
}
