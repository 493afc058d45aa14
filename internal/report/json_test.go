package report

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/internal/notice"
)

func TestScoreJSON(t *testing.T) {
	s := &Score{
		Input:      Input{Path: "scan.nii.gz", Format: "nifti", Dims: [3]int{2, 3, 4}},
		Model:      Model{Name: "m", Version: "1", SHA256: strings.Repeat("a", 64)},
		Prediction: &Prediction{Label: "x", Probability: 0.25, Probabilities: map[string]float64{"x": 0.75, "y": 0.25}},
		OOD: OOD{Verdict: "in-distribution", Score: Number(0.5),
			Checks: []Check{{Name: "noise_level", Value: Number(math.NaN()), Threshold: "0 to 1", Pass: true, Severity: Number(math.Inf(1))}}},
		Relevance: &Relevance{Method: "lrp", File: "relevance.nii.gz", Checks: map[string]float64{"consistency_error": 0.003, "method": 9}},
		TimingMs:  map[string]float64{"total": 12},
	}
	dir := t.TempDir()
	p, err := WriteScore(dir, s)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(p)
	var got map[string]any
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatalf("%v\n%s", err, b)
	}
	if got["notice"] != notice.Full {
		t.Error("notice missing")
	}
	c := got["ood"].(map[string]any)["checks"].([]any)[0].(map[string]any)
	if c["value"] != nil || c["severity"] != nil {
		t.Errorf("non-finite numbers must be null: %v", c)
	}
	r := got["relevance"].(map[string]any)
	if r["method"] != "lrp" || r["consistency_error"] != 0.003 {
		t.Errorf("relevance block %v", r)
	}
	if w, ok := got["warnings"].([]any); !ok || len(w) != 0 {
		t.Errorf("warnings should be an empty list, got %v", got["warnings"])
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 || entries[0].Name() != ResultFile {
		t.Errorf("folder holds %v", entries)
	}
	// a folder that does not exist: an error, nothing written
	if _, err := WriteScore(filepath.Join(dir, "missing", "deeper"), s); err == nil {
		t.Error("write into a missing folder succeeded")
	}
}
