// Package manifest reads the labelled case lists that `brightfold model make`
// and `brightfold model recalibrate` fit on: a CSV manifest (columns path,
// label, and optional split, site, age, sex and any others, kept as
// covariates) or a BIDS dataset folder (T1w images under sub-*/[ses-*/]anat,
// labels and covariates from participants.tsv). Paths are taken relative to
// the manifest's folder. Research use only.
package manifest

import (
	"encoding/csv"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/inputerr"
)

// Splits a case may be assigned to.
const (
	SplitCalibration = "calibration" // fitting the card (fit check, temperature)
	SplitValidation  = "validation"  // the card's validation figures
)

// MaxTableBytes bounds a manifest or participants.tsv read into memory.
const MaxTableBytes = 64 << 20

// MaxCases bounds the number of cases one manifest may list.
const MaxCases = 1_000_000

// Case is one labelled scan.
type Case struct {
	ID         string            // participant (and session) or the file's stem
	Path       string            // absolute or relative to the working folder
	Label      string            // a class name
	Split      string            // "", SplitCalibration or SplitValidation
	Site       string            // "" when not given
	Covariates map[string]string // age, sex and any other columns
}

// Manifest is a read case list.
type Manifest struct {
	Source     string   // the manifest file or BIDS folder
	Covariates []string // covariate column names, in file order
	Cases      []Case
}

// reserved columns are not covariates.
var reserved = map[string]bool{"path": true, "label": true, "split": true, "site": true, "participant_id": true, "case_id": true}

// Read reads a CSV manifest, or a BIDS folder whose participants.tsv column
// labelColumn holds the labels.
func Read(path, labelColumn string) (*Manifest, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	if st.IsDir() {
		return readBIDS(path, labelColumn)
	}
	b, err := ReadBounded(path)
	if err != nil {
		return nil, err
	}
	m, err := ParseCSV(b, filepath.Dir(path))
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	m.Source = path
	return m, nil
}

// ParseCSV parses a CSV manifest with a header row. Relative paths are
// joined to root. Column names are case-insensitive.
func ParseCSV(b []byte, root string) (*Manifest, error) {
	r := NewCSVReader(b)
	r.FieldsPerRecord = -1
	r.ReuseRecord = false
	return parseTable(r, root, "manifest", func(rec []string, col Header) (string, error) {
		p := col.Cell(rec, "path")
		if p == "" {
			return "", errors.New("empty path")
		}
		return p, nil
	}, "label")
}

// parseTable reads a header and rows; pathOf gives a row's scan path.
func parseTable(r *csv.Reader, root, what string, pathOf func([]string, Header) (string, error), labelCol string) (*Manifest, error) {
	m := &Manifest{}
	seen := map[string]int{}
	var col Header
	err := ReadTable(r, what, func(h Header) error {
		col = h
		for _, n := range h.Names {
			if n != "" && !reserved[n] && n != labelCol && n != "notice" && !strings.HasSuffix(n, "_path") {
				m.Covariates = append(m.Covariates, n)
			}
		}
		if !h.Has(labelCol) {
			return fmt.Errorf("%s: no %q column (want path, label and optional split, site, age, sex, ...)", what, labelCol)
		}
		if what == "manifest" && !h.Has("path") {
			return fmt.Errorf("manifest: no \"path\" column (want path, label and optional split, site, age, sex, ...)")
		}
		return nil
	}, func(line int, rec []string) error {
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			return nil
		}
		if len(m.Cases) >= MaxCases {
			return fmt.Errorf("%s: more than %d cases", what, MaxCases)
		}
		c, err := row(rec, col, labelCol, m.Covariates, root, pathOf)
		if err != nil {
			return fmt.Errorf("%s line %d: %w", what, line, err)
		}
		if prev, dup := seen[c.Path]; dup {
			return fmt.Errorf("%s line %d: path %q already listed on line %d", what, line, c.Path, prev)
		}
		seen[c.Path] = line
		m.Cases = append(m.Cases, c)
		return nil
	})
	if err != nil {
		return nil, err
	}
	if len(m.Cases) == 0 {
		return nil, fmt.Errorf("%s: no cases", what)
	}
	return m, nil
}

func row(rec []string, col Header, labelCol string, covs []string, root string, pathOf func([]string, Header) (string, error)) (Case, error) {
	p, err := pathOf(rec, col)
	if err != nil {
		return Case{}, err
	}
	c := Case{Label: col.Cell(rec, labelCol), Site: col.Cell(rec, "site"), Covariates: map[string]string{}}
	if c.Label == "" || strings.EqualFold(c.Label, "n/a") {
		return Case{}, fmt.Errorf("%s: empty label", p)
	}
	switch s := strings.ToLower(col.Cell(rec, "split")); s {
	case "", SplitCalibration, SplitValidation:
		c.Split = s
	default:
		return Case{}, fmt.Errorf("split %q: want %q, %q or empty", s, SplitCalibration, SplitValidation)
	}
	for _, k := range covs {
		if v := col.Cell(rec, k); v != "" && !strings.EqualFold(v, "n/a") {
			c.Covariates[k] = v
		}
	}
	c.ID = col.Cell(rec, "participant_id")
	if c.ID == "" {
		c.ID = col.Cell(rec, "case_id")
	}
	full := Resolve(p, root)
	c.Path = full
	if c.ID == "" {
		base := strings.TrimSuffix(filepath.Base(full), ".gz")
		c.ID = strings.TrimSuffix(base, filepath.Ext(base))
	}
	return c, nil
}

// Classes returns the distinct labels in first-seen order.
func (m *Manifest) Classes() []string {
	var out []string
	seen := map[string]bool{}
	for _, c := range m.Cases {
		if !seen[c.Label] {
			seen[c.Label] = true
			out = append(out, c.Label)
		}
	}
	return out
}

// Sites returns the distinct non-empty sites, sorted.
func (m *Manifest) Sites() []string {
	seen := map[string]bool{}
	var out []string
	for _, c := range m.Cases {
		if c.Site != "" && !seen[c.Site] {
			seen[c.Site] = true
			out = append(out, c.Site)
		}
	}
	sort.Strings(out)
	return out
}
