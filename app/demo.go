package app

import (
	"bufio"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync"

	"brightfold/internal/inputerr"
	"brightfold/internal/phantom"
)

// The demo cohort made on first start: a dozen in-distribution phantoms and
// one of each shifted variant, so that the fit check can be seen at work.
const (
	demoCases = 12
	demoSeed  = 20261201
)

// shiftNotes describes the shifted demo variants in the Cases panel.
var shiftNotes = map[string]string{
	"ct":      "shifted: CT-like",
	"t2":      "shifted: T2-like",
	"thick":   "shifted: thick slices",
	"cropped": "shifted: cropped view",
	"flipped": "shifted: wrong orientation",
	"noisy":   "shifted: heavy noise",
	"child":   "shifted: child-size head",
}

// startDemo opens the demo cohort, generating it first (in the background,
// with progress) when the folder holds none.
func (u *UI) startDemo() {
	dir := u.opts.DemoDir
	if abs, err := filepath.Abs(dir); err == nil {
		dir = abs
	}
	if phantom.IsCohort(dir) {
		u.openCohort(dir)
		return
	}
	n := u.opts.DemoCases
	if n <= 0 {
		n = demoCases
	}
	total := len(phantom.Cohort(demoSeed, n, true))
	u.casesPanel.setNote("First start: generating the synthetic demo cohort…")
	u.tasks.start(taskDemo, "Generating the demo cohort", func(ctx context.Context, progress progressFunc) (func(), error) {
		progress(0, fmt.Sprintf("0 of %d cases", total))
		w := &lineCounter{total: total, progress: progress}
		_, err := phantom.WriteCohort(dir, phantom.WriteOptions{N: n, Seed: demoSeed, Shifts: true, Progress: w})
		if err != nil {
			return nil, err
		}
		return func() { u.openCohort(dir) }, nil
	}, func(err error) {
		u.casesPanel.setNote("The demo cohort could not be made. Open a scan with Open… or drop one on the window.")
		u.fail(err)
		u.markReady()
	})
}

// lineCounter turns the cohort writer's one line per case into progress.
type lineCounter struct {
	mu       sync.Mutex
	n, total int
	progress progressFunc
}

func (l *lineCounter) Write(b []byte) (int, error) {
	l.mu.Lock()
	l.n += strings.Count(string(b), "\n")
	n := l.n
	l.mu.Unlock()
	l.progress(float64(n)/float64(max(l.total, 1)), fmt.Sprintf("%d of %d cases", n, l.total))
	return len(b), nil
}

// openCohort lists a cohort's cases and opens the first.
func (u *UI) openCohort(dir string) {
	cases, err := readCohort(dir)
	if err != nil {
		u.casesPanel.setNote("The demo cohort could not be read.")
		u.fail(err)
		u.markReady()
		return
	}
	u.casesPanel.setNote(fmt.Sprintf("Harbourside demo cohort: %d synthetic phantoms, %d of them deliberately shifted.", len(cases), countShifted(cases)))
	first := len(u.cases)
	u.cases = append(u.cases, cases...)
	u.casesPanel.refresh()
	if len(cases) > 0 {
		u.selectCase(first)
	}
}

func countShifted(cs []Case) int {
	n := 0
	for _, c := range cs {
		if strings.HasPrefix(c.Note, "shifted") {
			n++
		}
	}
	return n
}

// readCohort reads cohort.csv. A case with a DICOM series opens that series
// (it carries the fictional identifiers that Meeting mode hides); the others
// open their NIfTI file. Labels and severities are not shown: they are the
// answers a reader is meant to find.
func readCohort(dir string) ([]Case, error) {
	path := filepath.Join(dir, phantom.CohortFile)
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	defer f.Close()
	r := csv.NewReader(bufio.NewReader(io.LimitReader(f, 64<<20)))
	head, err := r.Read()
	if err != nil {
		return nil, inputerr.New(path, "no header row: %v", err)
	}
	col := map[string]int{}
	for i, h := range head {
		col[h] = i
	}
	for _, need := range []string{"case_id", "nifti_path", "dicom_path", "shift"} {
		if _, ok := col[need]; !ok {
			return nil, inputerr.New(path, "no %q column", need)
		}
	}
	var out []Case
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, inputerr.New(path, "%v", err)
		}
		c := Case{Code: rec[col["case_id"]], Note: "demo"}
		if n, ok := shiftNotes[rec[col["shift"]]]; ok {
			c.Note = n
		}
		p := rec[col["nifti_path"]]
		if d := rec[col["dicom_path"]]; d != "" {
			p = d
			c.Note += " · DICOM"
		}
		c.Paths = []string{filepath.Join(dir, filepath.FromSlash(p))}
		out = append(out, c)
	}
	return out, nil
}
