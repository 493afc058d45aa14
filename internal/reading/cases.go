// Package reading holds reading sessions: a reader's unaided and aided reads
// of a list of cases, kept in one SQLite file per session (WAL, one
// transaction per read), with the designs "sequential" and "crossover", and
// the export of the reads for a reader-study analysis (brightfold mrmc).
package reading

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"brightfold/internal/inputerr"
	"brightfold/internal/phantom"
	"brightfold/internal/volume"
)

// Case is one case of a case list.
type Case struct {
	// Name is how the case list names the case (a subject or case ID, a
	// relative path). It is shown outside Meeting mode only and never exported.
	Name string
	// Source is the absolute path of the scan (a file or a folder).
	Source string
	// Series selects a DICOM series in Source (volume.LoadOptions.SeriesUID); may be empty.
	Series string
	// Truth is 0 or 1 when the case list gives it, -1 otherwise. It is stored
	// but never shown to the reader.
	Truth int
}

// maxCases bounds a case list (a reader study is hundreds of cases, not millions).
const maxCases = 100000

// LoadCases reads a case list from path: a demo cohort folder (cohort.csv), a
// CSV manifest file, a BIDS folder (sub-*/anat/*_T1w.nii[.gz] and
// participants.tsv), or a folder tree of DICOM files (one case per series).
func LoadCases(path string) ([]Case, error) {
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	st, err := os.Stat(abs)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	var cases []Case
	switch {
	case !st.IsDir():
		cases, err = ReadManifest(abs)
	case fileExists(filepath.Join(abs, phantom.CohortFile)):
		cases, err = readCohort(abs)
	case isBIDS(abs):
		cases, err = readBIDS(abs)
	default:
		cases, err = readDICOMTree(abs)
	}
	if err != nil {
		return nil, err
	}
	if len(cases) == 0 {
		return nil, inputerr.New(path, "no cases found")
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].Name < cases[j].Name })
	for i := 1; i < len(cases); i++ {
		if cases[i].Name == cases[i-1].Name {
			return nil, inputerr.New(path, "case %q is listed twice", cases[i].Name)
		}
	}
	return cases, nil
}

func fileExists(p string) bool {
	st, err := os.Stat(p)
	return err == nil && !st.IsDir()
}

// csvTable is a header-indexed CSV or TSV table.
type csvTable struct {
	col  map[string]int
	rows [][]string
}

// readTable reads a CSV (comma) or TSV (tab) file with a header line, bounded
// in size; column names are matched case-insensitively.
func readTable(path string, comma rune) (*csvTable, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	defer f.Close()
	return parseTable(path, io.LimitReader(f, 64<<20), comma)
}

func parseTable(path string, r io.Reader, comma rune) (*csvTable, error) {
	cr := csv.NewReader(r)
	cr.Comma = comma
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = false
	if comma == '\t' {
		cr.LazyQuotes = true
	}
	head, err := cr.Read()
	if err != nil {
		return nil, inputerr.New(path, "no header line: %v", tableErr(err))
	}
	t := &csvTable{col: map[string]int{}}
	for i, h := range head {
		h = strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		if _, dup := t.col[h]; !dup {
			t.col[h] = i
		}
	}
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			return t, nil
		}
		if err != nil {
			return nil, inputerr.New(path, "%v", tableErr(err))
		}
		if len(t.rows) >= maxCases {
			return nil, inputerr.New(path, "more than %d rows", maxCases)
		}
		if len(rec) != len(head) {
			return nil, inputerr.New(path, "line %d has %d fields, the header %d", len(t.rows)+2, len(rec), len(head))
		}
		t.rows = append(t.rows, rec)
	}
}

func tableErr(err error) error {
	if errors.Is(err, io.EOF) {
		return errors.New("empty file")
	}
	return err
}

// get returns the value of the first of names present in row i ("" if none).
func (t *csvTable) get(i int, names ...string) string {
	for _, n := range names {
		if c, ok := t.col[n]; ok {
			return strings.TrimSpace(t.rows[i][c])
		}
	}
	return ""
}

func (t *csvTable) has(names ...string) bool {
	for _, n := range names {
		if _, ok := t.col[n]; ok {
			return true
		}
	}
	return false
}

// parseTruth reads a 0/1 truth value; "" and "n/a" mean unknown (-1).
func parseTruth(s string) (int, error) {
	switch strings.ToLower(s) {
	case "", "n/a", "na":
		return -1, nil
	case "0", "false", "no", "negative":
		return 0, nil
	case "1", "true", "yes", "positive":
		return 1, nil
	}
	if v, err := strconv.ParseFloat(s, 64); err == nil && (v == 0 || v == 1) {
		return int(v), nil
	}
	return 0, fmt.Errorf("truth %q is not 0 or 1", s)
}

// readCohort reads a demo cohort folder's cohort.csv.
func readCohort(dir string) ([]Case, error) {
	p := filepath.Join(dir, phantom.CohortFile)
	t, err := readTable(p, ',')
	if err != nil {
		return nil, err
	}
	if !t.has("case_id") || !t.has("nifti_path") {
		return nil, inputerr.New(p, "not a cohort table (no case_id and nifti_path columns)")
	}
	var cases []Case
	for i := range t.rows {
		truth, err := parseTruth(t.get(i, "label"))
		if err != nil {
			return nil, inputerr.New(p, "line %d: %v", i+2, err)
		}
		src, err := within(dir, t.get(i, "nifti_path"))
		if err != nil {
			return nil, inputerr.New(p, "line %d: %v", i+2, err)
		}
		cases = append(cases, Case{Name: t.get(i, "case_id"), Source: src, Truth: truth})
	}
	return cases, nil
}

// within joins a relative path from a table to its folder, refusing absolute
// paths and paths that climb out of the folder.
func within(dir, rel string) (string, error) {
	if rel == "" {
		return "", errors.New("empty path")
	}
	if filepath.IsAbs(rel) {
		return "", fmt.Errorf("path %q is absolute; paths are relative to the table", rel)
	}
	p := filepath.Join(dir, filepath.FromSlash(rel))
	if r, err := filepath.Rel(dir, p); err != nil || r == "." || r == ".." || strings.HasPrefix(r, ".."+string(filepath.Separator)) {
		return "", fmt.Errorf("path %q leaves the table's folder", rel)
	}
	return p, nil
}

// isBIDS reports whether dir looks like a BIDS dataset.
func isBIDS(dir string) bool {
	if fileExists(filepath.Join(dir, "dataset_description.json")) || fileExists(filepath.Join(dir, "participants.tsv")) {
		return true
	}
	m, _ := filepath.Glob(filepath.Join(dir, "sub-*", "anat"))
	return len(m) > 0
}

// readBIDS lists sub-*/[ses-*/]anat/*_T1w.nii[.gz]; participants.tsv may give
// a truth column ("truth", else "label").
func readBIDS(dir string) ([]Case, error) {
	truth := map[string]int{}
	pt := filepath.Join(dir, "participants.tsv")
	if fileExists(pt) {
		t, err := readTable(pt, '\t')
		if err != nil {
			return nil, err
		}
		for i := range t.rows {
			v, err := parseTruth(t.get(i, "truth", "label"))
			if err != nil {
				return nil, inputerr.New(pt, "line %d: %v", i+2, err)
			}
			truth[t.get(i, "participant_id")] = v
		}
	}
	var files []string
	for _, pat := range []string{"sub-*/anat/*_T1w.nii*", "sub-*/ses-*/anat/*_T1w.nii*"} {
		m, err := filepath.Glob(filepath.Join(dir, filepath.FromSlash(pat)))
		if err != nil {
			return nil, inputerr.Wrap(dir, err)
		}
		files = append(files, m...)
	}
	var cases []Case
	for _, f := range files {
		if !strings.HasSuffix(f, ".nii") && !strings.HasSuffix(f, ".nii.gz") {
			continue
		}
		rel, _ := filepath.Rel(dir, f)
		sub := strings.SplitN(filepath.ToSlash(rel), "/", 2)[0]
		v, ok := truth[sub]
		if !ok {
			v = -1
		}
		cases = append(cases, Case{Name: filepath.ToSlash(rel), Source: f, Truth: v})
	}
	if len(cases) == 0 {
		return nil, inputerr.New(dir, "BIDS folder without sub-*/anat/*_T1w.nii[.gz] scans")
	}
	return cases, nil
}

// readDICOMTree makes one case per loadable DICOM series under dir.
func readDICOMTree(dir string) ([]Case, error) {
	series, err := volume.ListSeries([]string{dir})
	if err != nil {
		return nil, err
	}
	var cases []Case
	for _, s := range series {
		if s.Problem != "" || len(s.Files) == 0 {
			continue
		}
		src := commonDir(s.Files)
		rel, _ := filepath.Rel(dir, src)
		name := filepath.ToSlash(rel)
		if s.Number != 0 {
			name += fmt.Sprintf(" series %d", s.Number)
		}
		cases = append(cases, Case{Name: name + " " + s.Key, Source: src, Series: s.Key, Truth: -1})
	}
	return cases, nil
}

// commonDir is the deepest folder holding every file.
func commonDir(files []string) string {
	d := filepath.Dir(files[0])
	for _, f := range files[1:] {
		for !strings.HasPrefix(filepath.Dir(f)+string(filepath.Separator), d+string(filepath.Separator)) {
			parent := filepath.Dir(d)
			if parent == d {
				break
			}
			d = parent
		}
	}
	return d
}
