package manifest

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

// Header is the header row of a case table: column names lower-cased and
// trimmed, in file order, and where each stands.
type Header struct {
	Names []string
	Raw   []string // the names as written, trimmed
	index map[string]int
}

// Has tells whether the table has the column.
func (h Header) Has(name string) bool {
	_, ok := h.index[name]
	return ok
}

// Cell is the trimmed cell of column name in rec ("" when absent).
func (h Header) Cell(rec []string, name string) string {
	if i, ok := h.index[name]; ok && i < len(rec) {
		return strings.TrimSpace(rec[i])
	}
	return ""
}

// NewCSVReader reads comma-separated b, a UTF-8 byte order mark dropped.
func NewCSVReader(b []byte) *csv.Reader {
	return csv.NewReader(bytes.NewReader(bytes.TrimPrefix(b, []byte("\ufeff"))))
}

// ReadTable is the one reader of Brightfold's case tables (CSV manifests,
// participants.tsv): it reads the header row of r, refusing an empty table
// and a column named twice, hands it to header, then hands each data row
// with its line number to row. what names the table in errors. The caller
// decides what the columns and labels mean.
func ReadTable(r *csv.Reader, what string, header func(Header) error, row func(line int, rec []string) error) error {
	names, err := r.Read()
	if errors.Is(err, io.EOF) {
		return fmt.Errorf("empty %s: want a header row", what)
	}
	if err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	h := Header{index: map[string]int{}}
	for i, n := range names {
		h.Raw = append(h.Raw, strings.TrimSpace(n))
		n = strings.ToLower(strings.TrimSpace(n))
		h.Names = append(h.Names, n)
		if n == "" {
			continue
		}
		if _, dup := h.index[n]; dup {
			return fmt.Errorf("%s: column %q appears twice", what, n)
		}
		h.index[n] = i
	}
	if err := header(h); err != nil {
		return err
	}
	for line := 2; ; line++ {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return fmt.Errorf("%s: %w", what, err)
		}
		if err := row(line, rec); err != nil {
			return err
		}
	}
}

// ReadBounded reads a table file of at most MaxTableBytes.
func ReadBounded(path string) ([]byte, error) {
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

// Resolve turns a table's slash-separated path into a file path, taken
// from root when relative.
func Resolve(p, root string) string {
	full := filepath.FromSlash(p)
	if !filepath.IsAbs(full) {
		full = filepath.Join(root, full)
	}
	return full
}

// Binary maps a raw yes/no label cell to 1 (1, true, yes, positive, pos),
// 0 (0, false, no, negative, neg) or -1 for unknown (empty, n/a, na, nan),
// case-insensitively; ok is false for anything else. Tables whose labels
// are class names map them with the card's classes instead.
func Binary(label string) (v int, ok bool) {
	switch strings.ToLower(strings.TrimSpace(label)) {
	case "1", "true", "yes", "positive", "pos":
		return 1, true
	case "0", "false", "no", "negative", "neg":
		return 0, true
	case "", "n/a", "na", "nan":
		return -1, true
	}
	return -1, false
}
