package reading

import (
	"bytes"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"brightfold/internal/inputerr"
)

// ReadRow is one read for the analysis.
type ReadRow struct {
	Reader    string
	Condition string
	Case      string
	Truth     int // 0, 1, or -1 unknown
	Rating    float64
	Seconds   float64 // -1 when unknown
	Session   bool    // from a session file (ratings are probabilities 0–100)
}

// ModelRow is the model's output on a case, from a session file.
type ModelRow struct {
	Case        string
	Truth       int
	Probability float64
	SHA256      string
	Name        string
}

// Reads is what the analysis reads from its inputs.
type Reads struct {
	Rows  []ReadRow
	Model []ModelRow
}

// sqliteMagic starts every SQLite database file.
var sqliteMagic = []byte("SQLite format 3\x00")

// LoadReads reads session files and CSV files of reads (columns reader,
// condition or treatment, case, truth, rating; optional seconds).
func LoadReads(paths []string) (*Reads, error) {
	out := &Reads{}
	for _, p := range paths {
		head := make([]byte, len(sqliteMagic))
		f, err := os.Open(p)
		if err != nil {
			return nil, inputerr.Wrap(p, err)
		}
		n, _ := io.ReadFull(f, head)
		f.Close()
		if n == len(head) && bytes.Equal(head, sqliteMagic) {
			err = out.addSession(p)
		} else {
			err = out.addCSV(p)
		}
		if err != nil {
			return nil, err
		}
	}
	return out, nil
}

func (r *Reads) addSession(path string) error {
	s, err := Open(path)
	if err != nil {
		return err
	}
	defer s.Close()
	cases, cur, err := s.casesAndReads()
	if err != nil {
		return err
	}
	models, err := s.ModelOutputs()
	if err != nil {
		return err
	}
	for _, c := range cases {
		for _, p := range []Phase{Unaided, Aided} {
			if rd, ok := cur[c.Code][p]; ok {
				r.Rows = append(r.Rows, ReadRow{Reader: s.Meta.Reader, Condition: string(p), Case: c.Code,
					Truth: c.Truth, Rating: rd.Rating, Seconds: rd.Seconds(), Session: true})
			}
		}
		if m, ok := models[c.Code]; ok {
			r.Model = append(r.Model, ModelRow{Case: c.Code, Truth: c.Truth, Probability: m.Probability,
				SHA256: m.ModelSHA256, Name: m.ModelName})
		}
	}
	return nil
}

func (r *Reads) addCSV(path string) error {
	f, err := os.Open(path)
	if err != nil {
		return inputerr.Wrap(path, err)
	}
	defer f.Close()
	rows, err := ParseReadsCSV(path, io.LimitReader(f, 256<<20))
	if err != nil {
		return err
	}
	r.Rows = append(r.Rows, rows...)
	return nil
}

// ParseReadsCSV parses a CSV of reads: columns reader, condition (or
// treatment, as published MRMC data name it), case, truth (0/1), rating (any
// ordered score); optional seconds. Other columns are ignored.
func ParseReadsCSV(path string, rd io.Reader) ([]ReadRow, error) {
	t, err := parseTable(path, rd, ',')
	if err != nil {
		return nil, err
	}
	for _, need := range [][]string{{"reader"}, {"condition", "treatment"}, {"case"}, {"truth"}, {"rating"}} {
		if !t.has(need...) {
			return nil, inputerr.New(path, "no %s column (want reader, condition or treatment, case, truth, rating)", need[0])
		}
	}
	var rows []ReadRow
	for i := range t.rows {
		row := ReadRow{Reader: t.get(i, "reader"), Condition: t.get(i, "condition", "treatment"),
			Case: t.get(i, "case"), Seconds: -1}
		if row.Reader == "" || row.Condition == "" || row.Case == "" {
			return nil, inputerr.New(path, "line %d: empty reader, condition or case", i+2)
		}
		if row.Truth, err = parseTruth(t.get(i, "truth")); err != nil {
			return nil, inputerr.New(path, "line %d: %v", i+2, err)
		}
		if row.Rating, err = strconv.ParseFloat(t.get(i, "rating"), 64); err != nil || math.IsNaN(row.Rating) || math.IsInf(row.Rating, 0) {
			return nil, inputerr.New(path, "line %d: rating %q is not a number", i+2, t.get(i, "rating"))
		}
		if s := t.get(i, "seconds"); s != "" {
			if v, err := strconv.ParseFloat(s, 64); err == nil && v >= 0 && !math.IsInf(v, 0) {
				row.Seconds = v
			}
		}
		rows = append(rows, row)
	}
	if len(rows) == 0 {
		return nil, inputerr.New(path, "no reads")
	}
	return rows, nil
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
