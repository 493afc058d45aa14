package cohort

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
)

// manifestReserved are manifest columns that are not covariates.
var manifestReserved = map[string]bool{"path": true, "nifti_path": true, "label": true, "split": true,
	"participant_id": true, "case_id": true, "session_id": true, "notice": true}

// ReadManifestFile reads a CSV manifest; its paths are relative to the
// manifest's folder.
func ReadManifestFile(path string) (*Dataset, error) {
	b, err := manifest.ReadBounded(path)
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

// ParseManifest reads a CSV manifest with a header row: a path column
// ("path", or "nifti_path" as in a phantom cohort.csv), optional "label"
// (1/0), "split", "participant_id" or "case_id", "session_id", and any other
// columns (site, age, sex, ...) as covariates; columns ending in "_path" and
// "notice" are ignored. Relative paths are taken from root.
func ParseManifest(b []byte, root string) (*Dataset, error) {
	r := manifest.NewCSVReader(b)
	r.FieldsPerRecord = 0
	d := &Dataset{Kind: KindManifest, Root: root}
	var col manifest.Header
	pathCol := "path"
	err := manifest.ReadTable(r, "manifest", func(h manifest.Header) error {
		col = h
		for _, n := range h.Names {
			if !manifestReserved[n] && !strings.HasSuffix(n, "_path") && n != "" {
				d.Covariates = append(d.Covariates, n)
			}
		}
		if !h.Has(pathCol) {
			if pathCol = "nifti_path"; !h.Has(pathCol) {
				return errors.New("manifest: no path column (want a header with path, label and optional split, site, age, sex, ...)")
			}
		}
		return nil
	}, func(line int, rec []string) error {
		c, err := manifestCase(rec, col, pathCol, d.Covariates, root)
		if err != nil {
			return fmt.Errorf("manifest line %d: %w", line, err)
		}
		d.Cases = append(d.Cases, c)
		return nil
	})
	if err != nil {
		return nil, err
	}
	sortCases(d.Cases)
	return d, nil
}

func manifestCase(rec []string, col manifest.Header, pathCol string, covs []string, root string) (Case, error) {
	p := col.Cell(rec, pathCol)
	if p == "" {
		return Case{}, errors.New("empty path")
	}
	id := col.Cell(rec, "participant_id")
	if id == "" {
		id = col.Cell(rec, "case_id")
	}
	if id == "" {
		base := filepath.Base(filepath.FromSlash(p))
		id = strings.TrimSuffix(strings.TrimSuffix(base, ".gz"), filepath.Ext(strings.TrimSuffix(base, ".gz")))
	}
	part := bidsLabel(strings.TrimPrefix(id, "sub-"))
	if part == "" {
		return Case{}, fmt.Errorf("participant %q has no letters or digits", id)
	}
	ses := bidsLabel(strings.TrimPrefix(col.Cell(rec, "session_id"), "ses-"))
	label, ok := manifest.Binary(col.Cell(rec, "label"))
	if !ok {
		return Case{}, fmt.Errorf("label %q: want 1 or 0 (or empty when unknown)", col.Cell(rec, "label"))
	}
	c := Case{Participant: part, Session: ses, Paths: []string{manifest.Resolve(p, root)}, Source: filepath.ToSlash(p),
		Label: label, Split: col.Cell(rec, "split"), Covariates: map[string]string{}}
	c.Entities = entityStem(part, ses)
	for _, k := range covs {
		c.Covariates[k] = col.Cell(rec, k)
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
