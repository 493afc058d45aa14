package reading

import (
	"io"
	"os"
	"path/filepath"

	"brightfold/internal/inputerr"
)

// ReadManifest reads a CSV manifest: one row per case, columns path (relative
// to the manifest's folder), label or truth (0/1, may be empty), and optional
// split, site, age and sex (read but not needed for reading). A case is named
// by its path. Written here because no shared manifest reader existed when
// reading sessions were built.
func ReadManifest(path string) ([]Case, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	defer f.Close()
	return parseManifest(path, io.LimitReader(f, 64<<20))
}

func parseManifest(path string, r io.Reader) ([]Case, error) {
	t, err := parseTable(path, r, ',')
	if err != nil {
		return nil, err
	}
	if !t.has("path") {
		return nil, inputerr.New(path, "manifest has no path column (columns path, label or truth, optional split, site, age, sex)")
	}
	dir := filepath.Dir(path)
	var cases []Case
	for i := range t.rows {
		rel := t.get(i, "path")
		src, err := within(dir, rel)
		if err != nil {
			return nil, inputerr.New(path, "line %d: %v", i+2, err)
		}
		truth, err := parseTruth(t.get(i, "truth", "label"))
		if err != nil {
			return nil, inputerr.New(path, "line %d: %v", i+2, err)
		}
		cases = append(cases, Case{Name: filepath.ToSlash(filepath.Clean(rel)), Source: src, Truth: truth})
	}
	if len(cases) == 0 {
		return nil, inputerr.New(path, "manifest lists no cases")
	}
	return cases, nil
}
