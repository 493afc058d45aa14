// Package report writes Brightfold's outputs (JSON, CSV, images, NIfTI),
// each carrying the research-use notice.
package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"path/filepath"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
)

// ResultFile is the file name `score --out DIR` writes.
const ResultFile = "result.json"

// Score is the JSON form of one scored scan (the fields of DESIGN.md's
// `score --json`). It holds no patient identifiers.
type Score struct {
	Notice     string             `json:"notice"`
	Input      Input              `json:"input"`
	Model      Model              `json:"model"`
	OOD        OOD                `json:"ood"`        // first: when the fit check fails, the verdict leads
	Prediction *Prediction        `json:"prediction"` // null when the model was not run (the scan could not be prepared)
	Relevance  *Relevance         `json:"relevance,omitempty"`
	TimingMs   map[string]float64 `json:"timing_ms"`
	Warnings   []string           `json:"warnings"`
}

// Input describes the scored scan.
type Input struct {
	Path        string     `json:"path,omitempty"` // empty unless the user asked for paths
	Format      string     `json:"format"`
	Dims        [3]int     `json:"dims"`
	SpacingMm   [3]float64 `json:"spacing_mm"`
	Orientation string     `json:"orientation"`
	Modality    string     `json:"modality,omitempty"`
}

// Model names the model folder.
type Model struct {
	Name    string `json:"name"`
	Version string `json:"version"`
	SHA256  string `json:"sha256"`
	Source  string `json:"source,omitempty"`
}

// Prediction is the calibrated prediction.
type Prediction struct {
	Label         string             `json:"label"`
	Probability   float64            `json:"probability"` // of the positive class
	PositiveClass string             `json:"positive_class"`
	Probabilities map[string]float64 `json:"probabilities"`
	Temperature   float64            `json:"temperature"`
	Uncalibrated  float64            `json:"uncalibrated_probability"`
	// DoNotUse is set when the fit check failed: the probability is kept
	// for the record but must not be used, and says why.
	DoNotUse string `json:"do_not_use,omitempty"`
}

// OOD is the fit check.
type OOD struct {
	Verdict string `json:"verdict"`
	// Score is the fit score (inference.FitScore): the product over the
	// required causes of each one's largest severity, at least the largest
	// severity of a failed required check; when every required check
	// passes, the largest severity (≤ 1). > 1 is out-of-distribution.
	Score  Number  `json:"score"`
	Checks []Check `json:"checks"`
	// Causes group the failed checks by what they saw
	// (inference.GroupCauses); empty when every check passes.
	Causes []Cause `json:"causes"`
}

// Cause is one reason the scan is unlike the training scans, with the
// names of the failed checks that saw it.
type Cause struct {
	Name        string   `json:"name"`
	Title       string   `json:"title"`
	Explanation string   `json:"explanation"`
	Checks      []string `json:"checks"`
	Required    bool     `json:"required"`
	Severity    Number   `json:"severity"`
	// Consequence marks the last entry: failed checks that may follow
	// from the causes above it, not a cause of their own (not counted in
	// the fit score).
	Consequence bool `json:"consequence"`
}

// Check is one fit-check result. Value is null when not measurable.
type Check struct {
	Name        string `json:"name"`
	Value       Number `json:"value"`
	Threshold   string `json:"threshold"`
	Pass        bool   `json:"pass"`
	Required    bool   `json:"required"`
	Explanation string `json:"explanation"`
	Severity    Number `json:"severity"` // factor beyond the limit: > 1 exactly when the check fails
}

// Number is a float64 that encodes NaN and infinities as JSON null.
type Number float64

// MarshalJSON writes null for a non-finite value.
func (n Number) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return json.Marshal(f)
}

// Relevance describes a relevance map written beside the result: the
// method, the map's file, and the method's own checks (for example
// "consistency_error"), which appear as fields of the object.
type Relevance struct {
	Method  string
	File    string
	Overlay string
	Checks  map[string]float64
	// Problem says why no map was made (File and Overlay are then empty).
	Problem string
}

// MarshalJSON flattens Checks into the object.
func (r Relevance) MarshalJSON() ([]byte, error) {
	m := map[string]any{"method": r.Method}
	if r.File != "" {
		m["file"] = r.File
	}
	if r.Problem != "" {
		m["problem"] = r.Problem
	}
	if r.Overlay != "" {
		m["overlay"] = r.Overlay
	}
	for k, v := range r.Checks {
		if _, taken := m[k]; !taken {
			m[k] = Number(v)
		}
	}
	return json.Marshal(m)
}

// EncodeScore writes s as indented JSON, setting the notice.
func EncodeScore(w io.Writer, s *Score) error {
	s.Notice = notice.Full
	if s.Warnings == nil {
		s.Warnings = []string{}
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(s)
}

// WriteScore writes s atomically as DIR/result.json and returns the path.
func WriteScore(dir string, s *Score) (string, error) {
	var buf bytes.Buffer
	if err := EncodeScore(&buf, s); err != nil {
		return "", fmt.Errorf("encode %s: %w", ResultFile, err)
	}
	p := filepath.Join(dir, ResultFile)
	if err := atomicfile.WriteBytes(p, buf.Bytes()); err != nil {
		return "", err
	}
	return p, nil
}
