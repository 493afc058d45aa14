package reading

import (
	"encoding/csv"
	"errors"
	"io"
	"strings"

	"brightfold/internal/inputerr"
)

// maxRows bounds a table of reads (readers × conditions × cases).
const maxRows = 2000000

// csvTable is a header-indexed CSV table; column names are matched
// case-insensitively.
type csvTable struct {
	col  map[string]int
	rows [][]string
}

func parseTable(path string, r io.Reader, comma rune) (*csvTable, error) {
	cr := csv.NewReader(r)
	cr.Comma = comma
	cr.FieldsPerRecord = -1
	head, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, inputerr.New(path, "empty file: want a header line")
	}
	if err != nil {
		return nil, inputerr.New(path, "%v", err)
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
			return nil, inputerr.New(path, "%v", err)
		}
		if len(t.rows) >= maxRows {
			return nil, inputerr.New(path, "more than %d rows", maxRows)
		}
		if len(rec) != len(head) {
			return nil, inputerr.New(path, "line %d has %d fields, the header %d", len(t.rows)+2, len(rec), len(head))
		}
		t.rows = append(t.rows, rec)
	}
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
