// Package reading holds reading sessions: a reader's unaided and aided reads
// of a list of cases, kept in one SQLite file per session (WAL, one
// transaction per read), with the designs "sequential" and "crossover", and
// the export of the reads for a reader-study analysis (brightfold mrmc).
package reading

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/internal/cohort"
	"brightfold/internal/inputerr"
	"brightfold/internal/volume/dicom"
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

// LoadCases reads a case list from path through internal/cohort (a demo
// cohort folder with cohort.csv, a CSV manifest file, a BIDS dataset, or a
// folder of NIfTI files and DICOM folders); a folder in which cohort finds no
// scans is read as a DICOM folder tree, one case per series, so that DICOM
// files without the .dcm extension are found too. The truth is the label
// column, or a column named truth.
func LoadCases(path string) ([]Case, error) {
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	var cases []Case
	d, err := cohort.Open(abs, "")
	switch {
	case err == nil:
		cases, err = fromDataset(path, d)
	case isDir(abs) && strings.Contains(err.Error(), "no scans found"):
		cases, err = readDICOMTree(abs)
	}
	if err != nil {
		return nil, err
	}
	if len(cases) == 0 {
		return nil, inputerr.New(path, "no cases found")
	}
	if len(cases) > maxCases {
		return nil, inputerr.New(path, "%d cases; a session holds at most %d", len(cases), maxCases)
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].Name < cases[j].Name })
	return cases, nil
}

func isDir(p string) bool {
	st, err := os.Stat(p)
	return err == nil && st.IsDir()
}

func fromDataset(path string, d *cohort.Dataset) ([]Case, error) {
	var cases []Case
	for _, c := range d.Cases {
		truth := c.Label
		if truth < 0 && c.Covariates["truth"] != "" {
			switch strings.TrimSpace(c.Covariates["truth"]) {
			case "0":
				truth = 0
			case "1":
				truth = 1
			default:
				return nil, inputerr.New(path, "case %s: truth %q is not 0 or 1", c.Source, c.Covariates["truth"])
			}
		}
		src := c.Paths[0]
		if len(c.Paths) > 1 {
			src = commonDir(c.Paths)
		}
		cases = append(cases, Case{Name: c.Source, Source: src, Truth: truth})
	}
	return cases, nil
}

// readDICOMTree makes one case per loadable DICOM series under dir.
func readDICOMTree(dir string) ([]Case, error) {
	series, err := dicom.ListSeries([]string{dir})
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
