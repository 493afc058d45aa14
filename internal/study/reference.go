package study

import (
	"bytes"
	_ "embed"
	"encoding/json"
	"fmt"
	"math"
	"os/exec"
	"sort"
	"strings"

	"brightfold/internal/notice"
)

// Python is Debian's interpreter, which has python3-sklearn, numpy and scipy.
const Python = "/usr/bin/python3"

//go:embed sklearn_check.py
var sklearnScript []byte

// SklearnScript is the reference script CheckWithSklearn runs.
func SklearnScript() []byte { return append([]byte(nil), sklearnScript...) }

// ReferenceFigures are the figures the reference script recomputed from
// the cases CSV; nil values are figures it could not compute (a class was
// empty).
type ReferenceFigures struct {
	SklearnVersion string                         `json:"sklearn_version"`
	NumpyVersion   string                         `json:"numpy_version"`
	ScipyVersion   string                         `json:"scipy_version"`
	Rows           int                            `json:"rows"`
	Notices        []string                       `json:"notices"`
	HeldOutAUROC   *float64                       `json:"held_out_auroc"`
	ECEBefore      *float64                       `json:"ece_before"`
	ECEAfter       *float64                       `json:"ece_after"`
	BrierBefore    *float64                       `json:"brier_before"`
	BrierAfter     *float64                       `json:"brier_after"`
	ProbDiff       *float64                       `json:"probability_max_abs_diff"`
	FalseAlarmRate *float64                       `json:"false_alarm_rate"`
	ShiftAUROC     map[string]*float64            `json:"shift_auroc"`
	FlagRate       map[string]*float64            `json:"flag_rate"`
	CheckAUROC     map[string]map[string]*float64 `json:"check_auroc"`
}

// CheckWithSklearn runs the reference script (sklearn's roc_auc_score,
// numpy and scipy under Debian's Python) on the cases CSV at csvPath.
func CheckWithSklearn(csvPath string) (*ReferenceFigures, error) {
	cmd := exec.Command(Python, "-", csvPath)
	cmd.Stdin = bytes.NewReader(sklearnScript)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		return nil, fmt.Errorf("reference script (%s with sklearn) on %s: %v: %s", Python, csvPath, err, strings.TrimSpace(stderr.String()))
	}
	var ref ReferenceFigures
	if err := json.Unmarshal(stdout.Bytes(), &ref); err != nil {
		return nil, fmt.Errorf("reference script output: %w", err)
	}
	return &ref, nil
}

// Tolerance is the largest difference allowed between a figure and its
// reference: both compute the same rational numbers in float64, so only
// rounding may differ.
const Tolerance = 1e-9

// Agreement is the outcome of comparing the figures with the reference.
type Agreement struct {
	Reference  string   `json:"reference"`
	AUROCs     int      `json:"aurocs_compared"`
	Others     int      `json:"other_figures_compared"`
	MaxAbsDiff float64  `json:"max_abs_difference"`
	Mismatches []string `json:"mismatches"`
}

// OK reports whether every figure agreed.
func (a *Agreement) OK() bool { return a != nil && len(a.Mismatches) == 0 }

// Compare compares the figures with the reference's recomputation.
func Compare(f Figures, ref *ReferenceFigures) *Agreement {
	a := &Agreement{Reference: fmt.Sprintf("sklearn %s roc_auc_score and brier_score_loss; ECE (Guo et al. 2017, Eq. 3, %d bins) with numpy %s and scipy %s softmax",
		ref.SklearnVersion, ECEBins, ref.NumpyVersion, ref.ScipyVersion), Mismatches: []string{}}
	if len(ref.Notices) != 1 || ref.Notices[0] != notice.Full {
		a.Mismatches = append(a.Mismatches, fmt.Sprintf("cases CSV notice column holds %q, want notice.Full on every row", ref.Notices))
	}
	auc := func(name string, got float64, want *float64) {
		a.AUROCs++
		a.compare(name, got, want)
	}
	other := func(name string, got float64, want *float64) {
		a.Others++
		a.compare(name, got, want)
	}
	auc("held-out AUROC", float64(f.HeldOut.AUROC), ref.HeldOutAUROC)
	other("ECE before scaling", float64(f.Calibration.ECEBefore), ref.ECEBefore)
	other("ECE after scaling", float64(f.Calibration.ECEAfter), ref.ECEAfter)
	other("Brier score at temperature 1", float64(f.Calibration.BrierBefore), ref.BrierBefore)
	other("Brier score at the card's temperature", float64(f.Calibration.BrierAfter), ref.BrierAfter)
	other("false-alarm rate", float64(f.FalseAlarms.Rate), ref.FalseAlarmRate)
	zero := 0.0
	other("probability = softmax(z/T)", 0, refOr(ref.ProbDiff, &zero))
	for _, s := range f.Shifts {
		sh := string(s.Shift)
		auc("AUROC "+sh, float64(s.AUROC), ref.ShiftAUROC[sh])
		other("flag rate "+sh, float64(s.FlagRate), ref.FlagRate[sh])
		names := make([]string, 0, len(s.CheckAUROC))
		for n := range s.CheckAUROC {
			names = append(names, n)
		}
		sort.Strings(names)
		for _, n := range names {
			auc("AUROC "+sh+" "+n, float64(s.CheckAUROC[n]), ref.CheckAUROC[sh][n])
		}
	}
	return a
}

func refOr(p, def *float64) *float64 {
	if p == nil {
		return def
	}
	return p
}

func (a *Agreement) compare(name string, got float64, want *float64) {
	switch {
	case want == nil && math.IsNaN(got):
		return // neither could compute it
	case want == nil:
		a.Mismatches = append(a.Mismatches, fmt.Sprintf("%s: %.17g here, not computable by the reference", name, got))
		return
	}
	d := math.Abs(got - *want)
	if math.IsNaN(d) || d > Tolerance {
		a.Mismatches = append(a.Mismatches, fmt.Sprintf("%s: %.17g here, %.17g by the reference", name, got, *want))
		return
	}
	a.MaxAbsDiff = math.Max(a.MaxAbsDiff, d)
}
