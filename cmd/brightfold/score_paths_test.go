package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
	"brightfold/internal/refcheck"
	"brightfold/internal/report"
)

// A scan whose folder and file carry a patient's name (the example:
// a home folder "Roe Jane 1953" and a file named after the record number).
// Without --show-paths no output of score names it: stdout (text and JSON),
// result.json, relevance.json and the case report PDF (read back with
// poppler's pdftotext). With --show-paths the path is there.
func TestScoreShowsNoPathByDefault(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	dir := filepath.Join(t.TempDir(), "Roe Jane 1953", "ROE_JANE_MRN-7781234")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	scan := filepath.Join(dir, "ROE_JANE_MRN-7781234.nii.gz")
	if err := os.Rename(headNIfTI(t), scan); err != nil {
		t.Fatal(err)
	}
	leaks := []string{"Roe Jane", "ROE_JANE", "7781234", filepath.Dir(dir)}
	for _, show := range []bool{false, true} {
		tmp := t.TempDir()
		out, pdf := filepath.Join(tmp, "out"), filepath.Join(tmp, "case.pdf")
		args := []string{"score", scan, "--model", mf, "--ort-lib", lib, "--threads", "1", "--map", "lrp", "--out", out, "--report", pdf}
		if show {
			args = append(args, "--show-paths")
		}
		code, jsonOut, stderr := runCLI(append(args, "--json")...)
		if code != 0 {
			t.Fatalf("show=%v: exit %d: %s", show, code, stderr)
		}
		code, textOut, stderr := runCLI(args...)
		if code != 0 {
			t.Fatalf("show=%v text: exit %d: %s", show, code, stderr)
		}
		outputs := map[string]string{"stdout JSON": jsonOut, "stdout text": textOut, "case report": pdfText(t, pdf)}
		for _, f := range []string{report.ResultFile, report.RelevanceSidecar} {
			b, err := os.ReadFile(filepath.Join(out, f))
			if err != nil {
				t.Fatal(err)
			}
			outputs[f] = string(b)
		}
		for name, text := range outputs {
			if !strings.Contains(text, notice.Full) {
				t.Errorf("show=%v: %s lacks the notice", show, name)
			}
			for _, l := range leaks {
				if got := strings.Contains(text, l) || strings.Contains(text, jsonQuoted(l)); got != show && name != "case report" {
					t.Errorf("show=%v: %s contains %q: %v", show, name, l, got)
				} else if !show && got {
					t.Errorf("case report contains %q without --show-paths", l)
				}
			}
		}
		var rep struct {
			Input map[string]any `json:"input"`
		}
		if err := json.Unmarshal([]byte(jsonOut), &rep); err != nil {
			t.Fatal(err)
		}
		if p, ok := rep.Input["path"]; ok != show || (show && p != scan) {
			t.Errorf("show=%v: stdout JSON input.path = %v", show, p)
		}
		if !show && !strings.Contains(textOut, "path not shown (--show-paths shows it)") {
			t.Errorf("text output does not say the path is hidden:\n%s", textOut)
		}
	}
}

// jsonQuoted is s as it appears inside a JSON string.
func jsonQuoted(s string) string {
	b, _ := json.Marshal(s)
	return string(b[1 : len(b)-1])
}
