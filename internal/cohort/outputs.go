package cohort

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/atomicfile"
	"brightfold/internal/notice"
	"brightfold/internal/report"
)

// Output names at the top of OUTDIR.
const (
	DescriptionFile = "dataset_description.json"
	ScoresTable     = "scores.tsv"
	ScoresSidecar   = "scores.json"
	// BIDSVersion is the BIDS version the derivative outputs follow.
	BIDSVersion = "1.9.0"
	// recordSchema versions the per-case result JSON.
	recordSchema = "brightfold-sweep-result/1"
)

// Status values of a case; a case that was not scored has "not scored: "
// followed by the reason.
const (
	StatusScored    = "scored"
	StatusNotScored = "not scored"
)

// Provenance says how a case's outputs were made; a rerun skips a case
// whose outputs are complete and whose Key matches.
type Provenance struct {
	Schema      string   `json:"schema"`
	ModelSHA256 string   `json:"model_sha256"`
	Map         string   `json:"map"`
	Key         string   `json:"key"`     // sha256 of the schema, model sha256 and options
	Outputs     []string `json:"outputs"` // the case's other files, relative to OUTDIR
}

// Record is one case's result JSON in OUTDIR.
type Record struct {
	Notice      string            `json:"notice"`
	Participant string            `json:"participant_id"`
	Session     string            `json:"session_id,omitempty"`
	Source      string            `json:"source"` // relative to the input dataset
	Status      string            `json:"status"`
	Label       *int              `json:"label"` // the truth the input gives, or null
	Covariates  map[string]string `json:"covariates"`
	Sweep       Provenance        `json:"sweep"`
	Result      *report.Score     `json:"result"` // null when the scan could not be read
}

// Probability is the calibrated probability of the positive class, or NaN
// when the model was not run.
func (r *Record) Probability() (float64, bool) {
	if r.Result == nil || r.Result.Prediction == nil {
		return 0, false
	}
	return r.Result.Prediction.Probability, true
}

// optionsKey is the provenance of a sweep's options.
func optionsKey(modelSHA, mapMethod string) Provenance {
	h := sha256.Sum256([]byte(recordSchema + "\nmodel_sha256=" + modelSHA + "\nmap=" + mapMethod + "\n"))
	return Provenance{Schema: recordSchema, ModelSHA256: modelSHA, Map: mapMethod, Key: hex.EncodeToString(h[:])}
}

// caseDir is the case's folder below OUTDIR: sub-P/[ses-S/]anat.
func caseDir(c Case) string {
	d := filepath.Join("sub-"+c.Participant, "anat")
	if c.Session != "" {
		d = filepath.Join("sub-"+c.Participant, "ses-"+c.Session, "anat")
	}
	return d
}

// ResultPath is the case's result JSON relative to OUTDIR.
func ResultPath(c Case) string {
	return filepath.Join(caseDir(c), c.Entities+"_result.json")
}

// mapPaths are the case's relevance map and its sidecar relative to OUTDIR.
func mapPaths(c Case, method string) (nii, sidecar string) {
	stem := filepath.Join(caseDir(c), c.Entities+"_desc-"+method+"_relevance")
	return stem + ".nii.gz", stem + ".json"
}

// readRecord reads a case's result JSON; ok is false when it is missing or
// not a complete result.
func readRecord(path string) (*Record, bool) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, false
	}
	var r Record
	if err := json.Unmarshal(b, &r); err != nil || r.Sweep.Schema != recordSchema {
		return nil, false
	}
	return &r, true
}

// complete says whether the case's outputs in out are all there and were
// made with provenance want.
func complete(out string, c Case, want Provenance) (*Record, bool) {
	r, ok := readRecord(filepath.Join(out, ResultPath(c)))
	if !ok || r.Sweep.Key != want.Key {
		return nil, false
	}
	for _, p := range r.Sweep.Outputs {
		if _, err := os.Stat(filepath.Join(out, p)); err != nil {
			return nil, false
		}
	}
	return r, true
}

// removeTemporaries deletes what a killed run left of atomic writes to the
// given files (".NAME.tmp*" beside each).
func removeTemporaries(paths ...string) {
	for _, p := range paths {
		left, _ := filepath.Glob(filepath.Join(filepath.Dir(p), "."+filepath.Base(p)+".tmp*"))
		for _, l := range left {
			os.Remove(l)
		}
	}
}

func encodeJSON(v any) ([]byte, error) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// writeJSON writes v as indented JSON atomically, creating the folder.
func writeJSON(path string, v any) error {
	b, err := encodeJSON(v)
	if err != nil {
		return fmt.Errorf("encode %s: %w", filepath.Base(path), err)
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return err
	}
	return atomicfile.WriteBytes(path, b)
}

// Generator names the program in GeneratedBy.
type Generator struct {
	Name    string `json:"Name"`
	Version string `json:"Version"`
	// Description says what was run (model folder, options).
	Description string `json:"Description,omitempty"`
}

// description is dataset_description.json of a BIDS derivative dataset
// (BIDS 1.9, "Derived dataset and pipeline description").
type description struct {
	Name           string              `json:"Name"`
	BIDSVersion    string              `json:"BIDSVersion"`
	DatasetType    string              `json:"DatasetType"`
	GeneratedBy    []Generator         `json:"GeneratedBy"`
	SourceDatasets []map[string]string `json:"SourceDatasets"`
	DatasetLinks   map[string]string   `json:"DatasetLinks"`
	Notice         string              `json:"notice"`
}

// writeDescription writes OUTDIR/dataset_description.json unless the same
// bytes are already there (shards write it alike).
func writeDescription(out string, d *Dataset, g Generator) error {
	desc := description{Name: "Brightfold sweep of " + d.Name, BIDSVersion: BIDSVersion, DatasetType: "derivative",
		GeneratedBy:    []Generator{g},
		SourceDatasets: []map[string]string{{"URL": "bids:raw:"}},
		DatasetLinks:   map[string]string{"raw": filepath.Base(filepath.Clean(d.Root))},
		Notice:         notice.Full}
	b, err := encodeJSON(desc)
	if err != nil {
		return err
	}
	p := filepath.Join(out, DescriptionFile)
	if old, err := os.ReadFile(p); err == nil && bytes.Equal(old, b) {
		return nil
	} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	return atomicfile.WriteBytes(p, b)
}

// ReadOutputs reads every file below dir (relative path → content) with
// the "timing_ms" objects of result JSONs left out: two sweeps of the same
// cohort, model folder and options give equal maps.
func ReadOutputs(dir string) (map[string]string, error) {
	out := map[string]string{}
	err := filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err != nil || info.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		out[rel] = withoutTiming(string(b))
		return nil
	})
	return out, err
}

// withoutTiming removes a result JSON's "timing_ms" object (which holds
// no nested objects).
func withoutTiming(s string) string {
	i := strings.Index(s, `"timing_ms": {`)
	if i < 0 {
		return s
	}
	j := strings.Index(s[i:], "}")
	return s[:i] + s[i+j+1:]
}
