package cohort

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"brightfold/internal/inputerr"
)

// maxTableBytes bounds a manifest or participants table read into memory.
const maxTableBytes = 64 << 20

// manifestReserved are manifest columns that are not covariates.
var manifestReserved = map[string]bool{"path": true, "nifti_path": true, "label": true, "split": true,
	"participant_id": true, "case_id": true, "session_id": true, "notice": true}

// ReadManifestFile reads a CSV manifest; its paths are relative to the
// manifest's folder.
func ReadManifestFile(path string) (*Dataset, error) {
	b, err := readBounded(path)
	if err != nil {
		return nil, err
	}
	d, err := ParseManifest(b, filepath.Dir(path))
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	d.Name = strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
	if filepath.Base(path) == "cohort.csv" {
		d.Name = filepath.Base(filepath.Dir(path))
	}
	return d, nil
}

func readBounded(path string) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, maxTableBytes+1))
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	if len(b) > maxTableBytes {
		return nil, inputerr.New(path, "table larger than %d MiB", maxTableBytes>>20)
	}
	return b, nil
}

// ParseManifest reads a CSV manifest with a header row: a path column
// ("path", or "nifti_path" as in a phantom cohort.csv), optional "label"
// (1/0), "split", "participant_id" or "case_id", "session_id", and any other
// columns (site, age, sex, ...) as covariates; columns ending in "_path" and
// "notice" are ignored. Relative paths are taken from root.
func ParseManifest(b []byte, root string) (*Dataset, error) {
	r := csv.NewReader(bytes.NewReader(bytes.TrimPrefix(b, []byte("\ufeff"))))
	r.FieldsPerRecord = 0
	header, err := r.Read()
	if errors.Is(err, io.EOF) {
		return nil, errors.New("empty manifest: want a header row with a path column")
	}
	if err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	col := map[string]int{}
	d := &Dataset{Kind: KindManifest, Root: root}
	for i, h := range header {
		h = strings.ToLower(strings.TrimSpace(h))
		if _, dup := col[h]; dup {
			return nil, fmt.Errorf("manifest: column %q appears twice", h)
		}
		col[h] = i
		if !manifestReserved[h] && !strings.HasSuffix(h, "_path") && h != "" {
			d.Covariates = append(d.Covariates, h)
		}
	}
	pathCol, ok := col["path"]
	if !ok {
		if pathCol, ok = col["nifti_path"]; !ok {
			return nil, errors.New("manifest: no path column (want a header with path, label and optional split, site, age, sex, ...)")
		}
	}
	for line := 2; ; line++ {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("manifest: %w", err)
		}
		c, err := manifestCase(rec, col, pathCol, d.Covariates, root)
		if err != nil {
			return nil, fmt.Errorf("manifest line %d: %w", line, err)
		}
		d.Cases = append(d.Cases, c)
	}
	sortCases(d.Cases)
	return d, nil
}

func cell(rec []string, col map[string]int, name string) string {
	if i, ok := col[name]; ok && i < len(rec) {
		return strings.TrimSpace(rec[i])
	}
	return ""
}

func manifestCase(rec []string, col map[string]int, pathCol int, covs []string, root string) (Case, error) {
	p := strings.TrimSpace(rec[pathCol])
	if p == "" {
		return Case{}, errors.New("empty path")
	}
	id := cell(rec, col, "participant_id")
	if id == "" {
		id = cell(rec, col, "case_id")
	}
	if id == "" {
		base := filepath.Base(filepath.FromSlash(p))
		id = strings.TrimSuffix(strings.TrimSuffix(base, ".gz"), filepath.Ext(strings.TrimSuffix(base, ".gz")))
	}
	part := bidsLabel(strings.TrimPrefix(id, "sub-"))
	if part == "" {
		return Case{}, fmt.Errorf("participant %q has no letters or digits", id)
	}
	ses := bidsLabel(strings.TrimPrefix(cell(rec, col, "session_id"), "ses-"))
	label, ok := parseLabel(cell(rec, col, "label"))
	if !ok {
		return Case{}, fmt.Errorf("label %q: want 1 or 0 (or empty when unknown)", cell(rec, col, "label"))
	}
	full := filepath.FromSlash(p)
	if !filepath.IsAbs(full) {
		full = filepath.Join(root, full)
	}
	c := Case{Participant: part, Session: ses, Paths: []string{full}, Source: filepath.ToSlash(p),
		Label: label, Split: cell(rec, col, "split"), Covariates: map[string]string{}}
	c.Entities = entityStem(part, ses)
	for _, k := range covs {
		c.Covariates[k] = cell(rec, col, k)
	}
	return c, nil
}

// entityStem is "sub-P" or "sub-P_ses-S".
func entityStem(part, ses string) string {
	if ses == "" {
		return "sub-" + part
	}
	return "sub-" + part + "_ses-" + ses
}
