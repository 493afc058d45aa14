package reading

import (
	"encoding/csv"
	"fmt"
	"io"
	"sort"
	"strconv"

	"brightfold/internal/notice"
)

// Task is one read to make in the worklist.
type Task struct {
	Case    SessionCase
	Phase   Phase
	Sitting int
	Done    bool
}

// Worklist lists the reads to make in order: sequential, each case unaided
// then aided; crossover, the first sitting (each case in its first
// condition) then the second.
func (s *Session) Worklist() ([]Task, error) {
	cases, cur, err := s.casesAndReads()
	if err != nil {
		return nil, err
	}
	var out []Task
	add := func(c SessionCase, p Phase, sitting int) {
		_, done := cur[c.Code][p]
		out = append(out, Task{Case: c, Phase: p, Sitting: sitting, Done: done})
	}
	if s.Meta.Design == Sequential {
		for _, c := range cases {
			add(c, Unaided, 1)
			add(c, Aided, 1)
		}
		return out, nil
	}
	for sitting := 1; sitting <= 2; sitting++ {
		for _, c := range cases {
			aided := c.FirstAided == (sitting == 1)
			p := Unaided
			if aided {
				p = Aided
			}
			add(c, p, sitting)
		}
	}
	return out, nil
}

// NextTask is the index of the first read not yet made, or -1 when all are done.
func NextTask(tasks []Task) int {
	for i, t := range tasks {
		if !t.Done {
			return i
		}
	}
	return -1
}

// ExportColumns are the columns of an exported reads table. The reader's
// chosen name and case codes only: no patient names, IDs, dates of birth or
// paths. The last column repeats the research-use notice on every row.
var ExportColumns = []string{"reader", "condition", "case", "truth", "rating", "confidence", "seconds", "amended", "notice"}

// Export writes one row per case and condition, in case-code order: the read that counts (the
// latest amendment if any), amended = the number of amendments, seconds =
// time from opening the case to locking the original read (empty if unknown).
func (s *Session) Export(w io.Writer) error {
	cases, cur, err := s.casesAndReads()
	if err != nil {
		return err
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].Code < cases[j].Code })
	cw := csv.NewWriter(w)
	if err := cw.Write(ExportColumns); err != nil {
		return err
	}
	for _, c := range cases {
		for _, p := range []Phase{Unaided, Aided} {
			r, ok := cur[c.Code][p]
			if !ok {
				continue
			}
			if err := cw.Write(exportRow(s.Meta.Reader, c, r)); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("export reads: %w", err)
	}
	return nil
}

func exportRow(reader string, c SessionCase, r Current) []string {
	truth, conf, secs := "", "", ""
	if c.Truth >= 0 {
		truth = strconv.Itoa(c.Truth)
	}
	if r.Confidence > 0 {
		conf = strconv.Itoa(r.Confidence)
	}
	if sec := r.Seconds(); sec >= 0 {
		secs = strconv.FormatFloat(sec, 'f', 1, 64)
	}
	return []string{reader, string(r.Phase), c.Code, truth, strconv.FormatFloat(r.Rating, 'g', -1, 64),
		conf, secs, strconv.Itoa(r.Amendments), notice.Full}
}

// casesAndReads returns the cases in reading order and the reads that count.
func (s *Session) casesAndReads() ([]SessionCase, map[string]map[Phase]Current, error) {
	cases, err := s.Cases()
	if err != nil {
		return nil, nil, err
	}
	cur, err := s.CurrentReads()
	return cases, cur, err
}
