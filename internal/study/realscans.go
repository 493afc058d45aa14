package study

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/inference"
	"brightfold/internal/report"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
)

// Folders of Debian's reference data with real (non-phantom) scans.
const (
	NibabelDataDir = "/usr/lib/python3/dist-packages/nibabel/tests/data"
	PydicomDataDir = "/usr/lib/python3/dist-packages/pydicom/data/test_files"
)

// pydicomScans are the pydicom test files evaluated: one CT and one MR
// slice (the other MR_small variants are the same image in other transfer
// syntaxes).
var pydicomScans = []string{"CT_small.dcm", "MR_small.dcm"}

// RealScan names one real reference scan.
type RealScan struct {
	Name string `json:"name"` // file name
	From string `json:"from"` // "nibabel" or "pydicom" test data
	Path string `json:"-"`    // full path (not written: it is machine-specific)
	Note string `json:"note"` // what the file is, when known
}

// ReferenceScans lists the real scans of Debian's nibabel test data (every
// .nii, .nii.gz and .dcm file there) and pydicom's CT_small.dcm and
// MR_small.dcm, those that are installed.
func ReferenceScans() []RealScan {
	var out []RealScan
	if ents, err := os.ReadDir(NibabelDataDir); err == nil {
		for _, e := range ents {
			n := e.Name()
			if e.Type().IsRegular() && (strings.HasSuffix(n, ".nii") || strings.HasSuffix(n, ".nii.gz") || strings.HasSuffix(n, ".dcm")) {
				out = append(out, RealScan{Name: n, From: "nibabel", Path: filepath.Join(NibabelDataDir, n)})
			}
		}
	}
	sort.Slice(out, func(a, b int) bool { return out[a].Name < out[b].Name })
	for _, n := range pydicomScans {
		p := filepath.Join(PydicomDataDir, n)
		if _, err := os.Stat(p); err == nil {
			out = append(out, RealScan{Name: n, From: "pydicom", Path: p})
		}
	}
	return out
}

// Status of a real scan's evaluation.
const (
	StatusScored      = "scored"
	StatusNotPrepared = "not prepared" // loaded, but it cannot be prepared for the model: checked without the model
	StatusNotLoaded   = "not loaded"   // Brightfold cannot read it as a scan (score exits 2)
)

// FailedCheck is one failed check of a real scan, with its sentence.
type FailedCheck struct {
	Name        string        `json:"name"`
	Title       string        `json:"title"`
	Required    bool          `json:"required"`
	Value       report.Number `json:"value"` // null when not measurable
	Threshold   string        `json:"threshold"`
	Explanation string        `json:"explanation"`
}

// RealResult is the evaluation of one real scan.
type RealResult struct {
	Scan        RealScan      `json:"scan"`
	Status      string        `json:"status"`
	Error       string        `json:"error,omitempty"` // why it was not loaded or not prepared
	Format      string        `json:"format,omitempty"`
	Dims        [3]int        `json:"dims"`
	SpacingMm   [3]float64    `json:"spacing_mm"`
	Modality    string        `json:"modality,omitempty"`
	Verdict     string        `json:"verdict,omitempty"`
	FitScore    report.Number `json:"fit_score"`
	Probability *float64      `json:"probability"` // null when the model was not run
	Failed      []FailedCheck `json:"failed_checks"`
	// Causes group the failed checks (inference.GroupCauses).
	Causes []inference.Cause `json:"causes"`
}

// ScoreReal loads each scan as `brightfold score` does (volume.Load, first
// volume, the only series) and scores it with sess (Score).
func ScoreReal(sess *inference.Session, scans []RealScan) ([]RealResult, error) {
	out := make([]RealResult, 0, len(scans))
	for _, s := range scans {
		r, err := scoreReal(sess, s)
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, nil
}

func scoreReal(sess *inference.Session, s RealScan) (RealResult, error) {
	r := RealResult{Scan: s}
	v, err := volume.Load([]string{s.Path}, volume.LoadOptions{})
	if err != nil {
		r.Status, r.Error = StatusNotLoaded, relativeError(err, s)
		return r, nil
	}
	r.Format, r.Dims, r.SpacingMm, r.Modality = v.Meta.Format, v.Dims, v.Spacing(), v.Meta.Modality
	res, notPrepared, err := Score(sess, v)
	if err != nil {
		return r, fmt.Errorf("%s: %w", s.Name, err)
	}
	r.Status, r.Verdict, r.FitScore = StatusScored, res.Verdict, report.Number(res.FitScore)
	if notPrepared != "" {
		r.Status, r.Error = StatusNotPrepared, relativeError(errors.New(notPrepared), s)
	} else {
		p := res.Prediction.Probability
		r.Probability = &p
	}
	r.Causes = res.Causes
	for _, c := range res.FailedChecks() {
		r.Failed = append(r.Failed, FailedCheck{Name: c.Name, Title: inference.CheckTitle(c.Name), Required: c.Required,
			Value: report.Number(c.Value), Threshold: c.Threshold, Explanation: c.Explanation})
	}
	return r, nil
}

// relativeError is the error text with the machine-specific folder removed.
func relativeError(err error, s RealScan) string {
	return strings.ReplaceAll(err.Error(), filepath.Dir(s.Path)+string(filepath.Separator), "")
}
