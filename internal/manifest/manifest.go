// Package manifest reads the labelled case lists that `brightfold model make`
// and `brightfold model recalibrate` fit on: a CSV manifest (columns path,
// label, and optional split, site, age, sex and any others, kept as
// covariates) or a BIDS dataset folder (T1w images under sub-*/[ses-*/]anat,
// labels and covariates from participants.tsv). Paths are taken relative to
// the manifest's folder. Research use only.
package manifest

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
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
	b, err := readBounded(path)
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

func readBounded(path string) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, MaxTableBytes+1))
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	if len(b) > MaxTableBytes {
		return nil, inputerr.New(path, "table larger than %d MiB", MaxTableBytes>>20)
	}
	return b, nil
}

// ParseCSV parses a CSV manifest with a header row. Relative paths are
// joined to root. Column names are case-insensitive.
func ParseCSV(b []byte, root string) (*Manifest, error) {
	r := csv.NewReader(bytes.NewReader(bytes.TrimPrefix(b, []byte("\ufeff"))))
	r.FieldsPerRecord = -1
	r.ReuseRecord = false
	return parseTable(r, root, "manifest", func(rec []string, col map[string]int) (string, error) {
		p := cell(rec, col, "path")
		if p == "" {
			return "", errors.New("empty path")
		}
		return p, nil
	}, "label")
}

// parseTable reads a header and rows; pathOf gives a row's scan path.
func parseTable(r *csv.Reader, root, what string, pathOf func([]string, map[string]int) (string, error), labelCol string) (*Manifest, error) {
	header, err := r.Read()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("empty %s: want a header row", what)
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	col := map[string]int{}
	m := &Manifest{}
	for i, h := range header {
		h = strings.ToLower(strings.TrimSpace(h))
		if h == "" {
			continue
		}
		if _, dup := col[h]; dup {
			return nil, fmt.Errorf("%s: column %q appears twice", what, h)
		}
		col[h] = i
		if !reserved[h] && h != labelCol && h != "notice" && !strings.HasSuffix(h, "_path") {
			m.Covariates = append(m.Covariates, h)
		}
	}
	if _, ok := col[labelCol]; !ok {
		return nil, fmt.Errorf("%s: no %q column (want path, label and optional split, site, age, sex, ...)", what, labelCol)
	}
	if what == "manifest" {
		if _, ok := col["path"]; !ok {
			return nil, fmt.Errorf("manifest: no \"path\" column (want path, label and optional split, site, age, sex, ...)")
		}
	}
	seen := map[string]int{}
	for line := 2; ; line++ {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", what, err)
		}
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			continue
		}
		if len(m.Cases) >= MaxCases {
			return nil, fmt.Errorf("%s: more than %d cases", what, MaxCases)
		}
		c, err := row(rec, col, labelCol, m.Covariates, root, pathOf)
		if err != nil {
			return nil, fmt.Errorf("%s line %d: %w", what, line, err)
		}
		if prev, dup := seen[c.Path]; dup {
			return nil, fmt.Errorf("%s line %d: path %q already listed on line %d", what, line, c.Path, prev)
		}
		seen[c.Path] = line
		m.Cases = append(m.Cases, c)
	}
	if len(m.Cases) == 0 {
		return nil, fmt.Errorf("%s: no cases", what)
	}
	return m, nil
}

func row(rec []string, col map[string]int, labelCol string, covs []string, root string, pathOf func([]string, map[string]int) (string, error)) (Case, error) {
	p, err := pathOf(rec, col)
	if err != nil {
		return Case{}, err
	}
	c := Case{Label: cell(rec, col, labelCol), Site: cell(rec, col, "site"), Covariates: map[string]string{}}
	if c.Label == "" || strings.EqualFold(c.Label, "n/a") {
		return Case{}, fmt.Errorf("%s: empty label", p)
	}
	switch s := strings.ToLower(cell(rec, col, "split")); s {
	case "", SplitCalibration, SplitValidation:
		c.Split = s
	default:
		return Case{}, fmt.Errorf("split %q: want %q, %q or empty", s, SplitCalibration, SplitValidation)
	}
	for _, k := range covs {
		if v := cell(rec, col, k); v != "" && !strings.EqualFold(v, "n/a") {
			c.Covariates[k] = v
		}
	}
	c.ID = cell(rec, col, "participant_id")
	if c.ID == "" {
		c.ID = cell(rec, col, "case_id")
	}
	full := filepath.FromSlash(p)
	if !filepath.IsAbs(full) {
		full = filepath.Join(root, full)
	}
	c.Path = full
	if c.ID == "" {
		base := strings.TrimSuffix(filepath.Base(full), ".gz")
		c.ID = strings.TrimSuffix(base, filepath.Ext(base))
	}
	return c, nil
}

func cell(rec []string, col map[string]int, name string) string {
	if i, ok := col[name]; ok && i < len(rec) {
		return strings.TrimSpace(rec[i])
	}
	return ""
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
