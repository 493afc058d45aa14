package app

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/internal/notice"
	"brightfold/internal/reading"
	"brightfold/internal/refcheck"
)

// The case report from the window, in Meeting mode with a reading session
// whose unaided read is locked: the PDF lands in the export folder named by
// the case's list code, and read back with pdftotext (poppler-utils, outside
// the project) it holds the notice, the code, the fit check and the read,
// and no identifier of the DICOM series or path; the status line names the
// file only.
func TestCaseReportMeeting(t *testing.T) {
	pdftotext := refcheck.Path(t, "/usr/bin/pdftotext")
	home := t.TempDir()
	t.Setenv("HOME", home)
	dir := t.TempDir()
	series := writeDICOMCase(t, dir)
	file := filepath.Join(dir, "r2.bfread")
	s, err := reading.Create(file, []reading.Case{{Name: "HMRU-0001", Source: series, Truth: 1}}, reading.Options{Reader: "R2", Seed: 5})
	if err != nil {
		t.Fatal(err)
	}
	cases, err := s.Cases()
	if err != nil || len(cases) != 1 {
		t.Fatalf("session cases %v: %v", cases, err)
	}
	if _, err := s.Record(reading.Read{Code: cases[0].Code, Phase: reading.Unaided, Rating: 35, Confidence: 2}); err != nil {
		t.Fatal(err)
	}
	s.Close()
	h := newHarness(t, Options{Session: file, Meeting: true})
	h.u.start()
	h.settle()
	if h.u.open == nil || h.u.open.result == nil || !h.u.meeting {
		t.Fatalf("case not scored in Meeting mode: %q", h.u.message.Text)
	}
	code := h.u.shownCode(h.u.cur)
	h.u.exportCaseReport()
	name := strings.ReplaceAll(code, " ", "-") + "-case-report.pdf"
	pdf := filepath.Join(home, exportFolderName, name)
	if _, err := os.Stat(pdf); err != nil {
		t.Fatalf("case report not written: %v (status %q)", err, h.u.message.Text)
	}
	if st := h.u.message.Text; !strings.Contains(st, name) || strings.Contains(st, home) || strings.Contains(st, string(filepath.Separator)) {
		t.Errorf("status line %q", st)
	}
	out, err := exec.Command(pdftotext, "-raw", pdf, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext: %v", err)
	}
	txt := strings.Join(strings.Fields(string(out)), " ")
	for _, want := range []string{notice.Full, "Case report: " + code, "Fit check:", "Model:", "Reads by R2",
		"Unaided read: probability 35 of 100, confidence 2 of 5"} {
		if !strings.Contains(txt, want) {
			t.Errorf("report lacks %q:\n%s", want, txt)
		}
	}
	// An out-of-distribution verdict: the probability is marked unreliable
	// and the fit check is given by cause, as in the window.
	if r := h.u.open.result; inference.Withheld(r) {
		if !strings.Contains(txt, "UNRELIABLE") || len(r.Causes) == 0 || !strings.Contains(txt, r.Causes[0].Title) {
			t.Errorf("out-of-distribution report without the unreliable mark or its first cause:\n%s", txt)
		}
	}
	for _, secret := range append(identifying(dir), home, "/tmp", "dicom") {
		if strings.Contains(txt, secret) {
			t.Errorf("report contains %q:\n%s", secret, txt)
		}
	}
}
