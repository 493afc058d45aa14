package study

import (
	"fmt"
	"math"
	"os"
	"runtime"
	"strconv"
	"strings"
	"time"

	"brightfold/inference"
	"brightfold/internal/cputime"
	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/report"
)

// Evaluation is one complete evaluation of a model folder.
type Evaluation struct {
	Notice    string       `json:"notice"`
	Date      string       `json:"date"` // UTC, RFC 3339
	Model     ModelInfo    `json:"model"`
	Cohort    CohortInfo   `json:"cohort"`
	Machine   Machine      `json:"machine"`
	Timing    Timing       `json:"timing"`
	Figures   Figures      `json:"figures"`
	RealScans []RealResult `json:"real_scans"`
	// Reference is the agreement with sklearn, once CheckWithSklearn has run.
	Reference *Agreement `json:"reference_check"`
	// Checks lists the check names of Cases' severities, in report order.
	Checks []string `json:"checks"`
	Cases  []Case   `json:"-"` // written to the cases CSV
}

// ModelInfo names the evaluated model folder.
type ModelInfo struct {
	Name        string  `json:"name"`
	Version     string  `json:"version"`
	SHA256      string  `json:"sha256"`
	Source      string  `json:"source"`
	Temperature float64 `json:"temperature"`
}

// CohortInfo describes the evaluated phantoms.
type CohortInfo struct {
	Seed     uint64          `json:"seed"`
	N        int             `json:"in_distribution"`
	PerShift int             `json:"per_shift"`
	Shifts   []phantom.Shift `json:"shifts"`
	VoxelMM  float64         `json:"voxel_mm"`
	Workers  int             `json:"workers"`
}

// Machine records where the evaluation ran; the load averages say how
// much else was running (the figures do not depend on it, the timing does).
type Machine struct {
	CPUs      int           `json:"cpus"`
	GOARCH    string        `json:"goarch"`
	GoVersion string        `json:"go_version"`
	LoadStart report.Number `json:"load_average_1min_start"`
	LoadEnd   report.Number `json:"load_average_1min_end"`
}

// Run scores cfg's cohort and the real scans with sess and computes the
// figures. source names the model folder in the outputs (a folder, a zip or the
// embedded demo model folder).
func Run(sess *inference.Session, source string, cfg Config, scans []RealScan) (*Evaluation, error) {
	t0, cpu0 := time.Now(), cputime.Seconds()
	card := sess.ModelFolder().Card
	workers := cfg.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	ev := &Evaluation{
		Notice: notice.Full,
		Date:   t0.UTC().Format(time.RFC3339),
		Model: ModelInfo{Name: card.Name, Version: card.Version, SHA256: sess.ModelFolder().SHA256, Source: source,
			Temperature: card.Calibration.Temperature},
		Cohort:  CohortInfo{Seed: cfg.Seed, N: cfg.N, PerShift: cfg.PerShift, Shifts: cfg.shifts(), VoxelMM: voxelOr1(cfg.VoxelMM), Workers: workers},
		Machine: Machine{CPUs: runtime.NumCPU(), GOARCH: runtime.GOARCH, GoVersion: runtime.Version(), LoadStart: report.Number(loadAverage())},
	}
	cases, err := ScoreCohort(sess, cfg)
	if err != nil {
		return nil, err
	}
	ev.Cases, ev.Checks = cases, CheckNames(cases)
	ev.Figures = Compute(card, cases)
	if ev.RealScans, err = ScoreReal(sess, scans); err != nil {
		return nil, fmt.Errorf("real scans: %w", err)
	}
	ev.Machine.LoadEnd = report.Number(loadAverage())
	ev.Timing = Timing{WallS: since(t0), CPUS: report.Number(cputime.Seconds() - cpu0)}
	return ev, nil
}

func voxelOr1(v float64) float64 {
	if v <= 0 {
		return 1
	}
	return v
}

// loadAverage is the 1-minute load average from /proc/loadavg (NaN when
// unreadable).
func loadAverage() float64 {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return math.NaN()
	}
	f := strings.Fields(string(b))
	if len(f) == 0 {
		return math.NaN()
	}
	x, err := strconv.ParseFloat(f[0], 64)
	if err != nil {
		return math.NaN()
	}
	return x
}
