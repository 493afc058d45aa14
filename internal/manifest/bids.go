package manifest

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
)

// readBIDS lists the T1w images of a BIDS dataset (sub-*/anat/*_T1w.nii[.gz]
// and sub-*/ses-*/anat/...) with labels and covariates from the row of
// participants.tsv with the same participant_id. A participant without a row
// or without a label is refused: a silently dropped case would change the
// figures.
func readBIDS(dir, labelColumn string) (*Manifest, error) {
	if labelColumn == "" {
		return nil, inputerr.New(dir, "a BIDS folder needs --label-column (the participants.tsv column holding the class names)")
	}
	tsv := filepath.Join(dir, "participants.tsv")
	b, err := ReadBounded(tsv)
	if err != nil {
		return nil, err
	}
	rows, covs, err := ParseParticipants(b, labelColumn)
	if err != nil {
		return nil, inputerr.Wrap(tsv, err)
	}
	images, err := t1wImages(dir)
	if err != nil {
		return nil, inputerr.Wrap(dir, err)
	}
	if len(images) == 0 {
		return nil, inputerr.New(dir, "no sub-*/[ses-*/]anat/*_T1w.nii[.gz] images")
	}
	m := &Manifest{Source: dir, Covariates: covs}
	for _, img := range images {
		sub := strings.SplitN(filepath.Base(img), "_", 2)[0]
		c, ok := rows[sub]
		if !ok {
			return nil, inputerr.New(tsv, "no row for %s (image %s)", sub, img)
		}
		c.Path = img
		c.ID = strings.TrimSuffix(strings.TrimSuffix(filepath.Base(img), ".gz"), ".nii")
		m.Cases = append(m.Cases, c)
	}
	return m, nil
}

// ParseParticipants reads a participants.tsv: participant_id, the label
// column, optional split and site, and any other columns as covariates.
func ParseParticipants(b []byte, labelColumn string) (map[string]Case, []string, error) {
	r := NewCSVReader(b)
	r.Comma = '\t'
	r.LazyQuotes = true
	r.FieldsPerRecord = -1
	m, err := parseTable(r, "", "participants.tsv", func(rec []string, col Header) (string, error) {
		id := col.Cell(rec, "participant_id")
		if !strings.HasPrefix(id, "sub-") || len(id) == 4 {
			return "", fmt.Errorf("participant_id %q: want sub-<label>", id)
		}
		return id, nil
	}, strings.ToLower(labelColumn))
	if err != nil {
		return nil, nil, err
	}
	out := map[string]Case{}
	for _, c := range m.Cases {
		id := filepath.Base(c.Path)
		c.ID = id
		out[id] = c
	}
	return out, m.Covariates, nil
}

// t1wImages finds the T1w NIfTI images, sorted.
func t1wImages(dir string) ([]string, error) {
	var out []string
	for _, pat := range []string{"sub-*/anat/*_T1w.nii*", "sub-*/ses-*/anat/*_T1w.nii*"} {
		ms, err := filepath.Glob(filepath.Join(dir, pat))
		if err != nil {
			return nil, err
		}
		for _, p := range ms {
			if strings.HasSuffix(p, ".nii") || strings.HasSuffix(p, ".nii.gz") {
				if st, err := os.Stat(p); err == nil && !st.IsDir() {
					out = append(out, p)
				}
			}
		}
	}
	sort.Strings(out)
	return out, nil
}
