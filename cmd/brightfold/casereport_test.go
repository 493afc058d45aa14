package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/reading"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
)

// pdfText reads a PDF back with pdftotext (poppler-utils), whitespace folded.
func pdfText(t *testing.T, p string) string {
	t.Helper()
	out, err := exec.Command(refcheck.Path(t, "/usr/bin/pdftotext"), "-raw", p, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext %s: %v", p, err)
	}
	return strings.Join(strings.Fields(string(out)), " ")
}

// The case report in Meeting mode, for a DICOM series carrying identifiers,
// with a reading session: read back with pdftotext it has the notice, the
// case code, the model, the fit check and the reads, and no identifier or path.
func TestScoreCaseReportMeeting(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	v, err := volume.Load([]string{headNIfTI(t)}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	root := t.TempDir()
	dir := filepath.Join(root, "HMRU-0001", "dicom")
	err = dicom.WriteSeries(dir, v, dicom.WriteOptions{Seed: "HMRU-0001/T1", PatientName: "DEMO^SUBJECT0001",
		PatientID: "HMRU-0001-ID", PatientBirthDate: "19510203", StudyDate: "20261201", AccessionNumber: "ACC7781",
		InstitutionName: "Harbourside Memory Research Unit"})
	if err != nil {
		t.Fatal(err)
	}
	sfile := filepath.Join(root, "r7.bfread")
	s, err := reading.Create(sfile, []reading.Case{{Name: "HMRU-0001", Source: dir, Truth: 1}}, reading.Options{Reader: "R7", Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	s.Record(reading.Read{Code: "C001", Phase: reading.Unaided, Rating: 35, Confidence: 2})
	s.Record(reading.Read{Code: "C001", Phase: reading.Aided, Rating: 62})
	s.Close()
	pdf := filepath.Join(root, "out", "case.pdf")
	os.MkdirAll(filepath.Dir(pdf), 0o755)
	code, _, stderr := runCLI("score", dir, "--model", mf, "--ort-lib", lib, "--threads", "1", "--report", pdf, "--session", sfile, "--meeting")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	txt := pdfText(t, pdf)
	for _, want := range []string{notice.Full, "Case report: C001", "Fit check:", "Model:", "Calibration: temperature scaling",
		"Reads by R7", "Unaided read: probability 35 of 100, confidence 2 of 5", "Aided read: probability 62 of 100"} {
		if !strings.Contains(txt, want) {
			t.Errorf("report lacks %q:\n%s", want, txt)
		}
	}
	for _, secret := range []string{"DEMO", "SUBJECT0001", "HMRU", "19510203", "20261201", "ACC7781", "Harbourside", root, "/tmp", "dicom"} {
		if strings.Contains(txt, secret) {
			t.Errorf("report contains %q:\n%s", secret, txt)
		}
	}
	if out, err := exec.Command(refcheck.Path(t, "/usr/bin/pdfinfo"), pdf).Output(); err != nil || !regexp.MustCompile(`(?m)^Pages:\s+1$`).Match(out) {
		t.Errorf("pdfinfo: %v\n%s", err, out)
	}
}
