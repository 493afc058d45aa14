package study

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
)

// Files an evaluation writes into its output folder.
const (
	JSONFile     = "evaluation.json"
	MarkdownFile = "evaluation.md"
)

// Goals of the evaluation (issue 4 and issue 3).
const (
	GoalShiftAUROC   = 0.95
	GoalFalseAlarms  = 0.05
	GoalHeldOutAUROC = 0.95
)

// EncodeJSON writes ev as indented JSON (the notice first).
func EncodeJSON(w io.Writer, ev *Evaluation) error {
	ev.Notice = notice.Full
	b, err := json.MarshalIndent(ev, "", "  ")
	if err != nil {
		return fmt.Errorf("encode evaluation: %w", err)
	}
	_, err = w.Write(append(b, '\n'))
	return err
}

// WriteOutputs writes evaluation.json, cases.csv and evaluation.md into dir
// (created if needed), each atomically.
func WriteOutputs(dir string, card *inference.Card, ev *Evaluation) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return inputerr.Wrap(dir, err)
	}
	if err := WriteCasesCSV(filepath.Join(dir, CasesFile), card, ev); err != nil {
		return err
	}
	return writeSummaries(dir, ev)
}

// writeSummaries writes the JSON and Markdown summaries (after the
// reference check has been added).
func writeSummaries(dir string, ev *Evaluation) error {
	if err := atomicfile.Write(filepath.Join(dir, JSONFile), func(w io.Writer) error { return EncodeJSON(w, ev) }); err != nil {
		return err
	}
	return atomicfile.WriteBytes(filepath.Join(dir, MarkdownFile), []byte(Markdown(ev)))
}

// RewriteSummaries rewrites evaluation.json and evaluation.md in dir, for
// example after the reference check.
func RewriteSummaries(dir string, ev *Evaluation) error { return writeSummaries(dir, ev) }

func f3(x float64) string {
	if math.IsNaN(x) {
		return "n/a"
	}
	return fmt.Sprintf("%.3f", x)
}

func pct(x float64) string {
	if math.IsNaN(x) {
		return "n/a"
	}
	return fmt.Sprintf("%.1f %%", 100*x)
}

func meets(ok bool) string {
	if ok {
		return "met"
	}
	return "MISSED"
}

// bestCheck is the single check with the highest AUROC for a shift.
func bestCheck(s ShiftFigure) (string, float64) {
	names := make([]string, 0, len(s.CheckAUROC))
	for n := range s.CheckAUROC {
		names = append(names, n)
	}
	sort.Strings(names)
	best, auc := "", math.Inf(-1)
	for _, n := range names {
		if a := float64(s.CheckAUROC[n]); a > auc {
			best, auc = n, a
		}
	}
	return best, auc
}

// counts prints a failed-check tally, most frequent first.
func counts(m map[string]int) string {
	type kv struct {
		k string
		v int
	}
	var xs []kv
	for k, v := range m {
		xs = append(xs, kv{k, v})
	}
	sort.Slice(xs, func(a, b int) bool {
		if xs[a].v != xs[b].v {
			return xs[a].v > xs[b].v
		}
		return xs[a].k < xs[b].k
	})
	var parts []string
	for _, x := range xs {
		parts = append(parts, fmt.Sprintf("%s %d", x.k, x.v))
	}
	if len(parts) == 0 {
		return "none"
	}
	return strings.Join(parts, ", ")
}

func heading(ev *Evaluation) []string {
	c, m := ev.Cohort, ev.Machine
	return []string{
		fmt.Sprintf("Model: %s %s (model.onnx sha256 %s), from %s; temperature %.4g.", ev.Model.Name, ev.Model.Version, ev.Model.SHA256, ev.Model.Source, ev.Model.Temperature),
		fmt.Sprintf("Cohort: fresh synthetic phantoms, seed %d (never used in training or fitting), %d in-distribution and %d per shift type, %g mm voxels.",
			c.Seed, c.N, c.PerShift, c.VoxelMM),
		fmt.Sprintf("Run: %s; %d CPUs (%s, %s), %d cases at a time; %.0f s wall, %.0f CPU s; 1-minute load average %.1f at the start, %.1f at the end (other jobs share the machine: the timing is indicative, the figures do not depend on it).",
			ev.Date, m.CPUs, m.GOARCH, m.GoVersion, c.Workers, ev.Timing.WallS, float64(ev.Timing.CPUS), float64(m.LoadStart), float64(m.LoadEnd)),
	}
}

// WriteTable prints the figures as a plain-text table, the notice first and last.
func WriteTable(w io.Writer, ev *Evaluation) {
	f := ev.Figures
	fmt.Fprintln(w, notice.Full)
	fmt.Fprintln(w)
	for _, l := range heading(ev) {
		fmt.Fprintln(w, l)
	}
	fmt.Fprintln(w)
	h := f.HeldOut
	fmt.Fprintf(w, "Held-out AUROC (positive-class probability, %d cases, %d with the pattern): %s  goal ≥ %.2f: %s\n",
		h.N, h.Positives, f3(float64(h.AUROC)), GoalHeldOutAUROC, meets(float64(h.AUROC) >= GoalHeldOutAUROC))
	fmt.Fprintf(w, "Accuracy (most probable class): %s\n", f3(float64(h.Accuracy)))
	k := f.Calibration
	fmt.Fprintf(w, "ECE (%d equal-width bins): %s before, %s after temperature scaling (T = %.4g); NLL %s before, %s after\n",
		k.Bins, f3(float64(k.ECEBefore)), f3(float64(k.ECEAfter)), k.Temperature, f3(float64(k.NLLBefore)), f3(float64(k.NLLAfter)))
	fa := f.FalseAlarms
	fmt.Fprintf(w, "False alarms: %d of %d in-distribution cases (%s)  goal ≤ %.0f %%: %s; failed checks: %s\n",
		fa.Flagged, fa.N, pct(float64(fa.Rate)), 100*GoalFalseAlarms, meets(float64(fa.Rate) <= GoalFalseAlarms), counts(fa.FailedChecks))
	fmt.Fprintln(w)
	fmt.Fprintf(w, "%-8s %4s %8s %9s  %-28s %6s  %s\n", "shift", "n", "flagged", "AUROC", "best single check", "AUROC", "goal ≥ 0.95")
	for _, s := range f.Shifts {
		bn, ba := bestCheck(s)
		fmt.Fprintf(w, "%-8s %4d %4d/%-3d %9s  %-28s %6s  %s\n", s.Shift, s.N, s.Flagged, s.N, f3(float64(s.AUROC)), bn, f3(ba),
			meets(float64(s.AUROC) >= GoalShiftAUROC))
	}
	for _, s := range f.Shifts {
		fmt.Fprintf(w, "  %s: causes: %s; failed checks: %s\n", s.Shift, counts(s.Causes), counts(s.FailedChecks))
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Real reference scans:")
	for _, r := range ev.RealScans {
		fmt.Fprintf(w, "  %-28s %s\n", r.Scan.Name, realLine(r))
		for _, c := range r.Failed {
			fmt.Fprintf(w, "      - %s: %s\n", inference.CheckTitle(c.Name), c.Explanation)
		}
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, referenceLine(ev.Reference))
	fmt.Fprintln(w)
	fmt.Fprintln(w, notice.Full)
}

func realLine(r RealResult) string {
	if r.Status == StatusNotLoaded {
		return "not loaded (score exits 2): " + r.Error
	}
	s := fmt.Sprintf("%s (fit score %.3g, %d failed checks)", r.Verdict, float64(r.FitScore), len(r.Failed))
	if r.Status == StatusNotPrepared {
		s += "; model not run"
	}
	if r.Verdict != fitcheck.OutOfDistribution {
		s += "  <-- NOT flagged"
	}
	return s
}

func referenceLine(a *Agreement) string {
	switch {
	case a == nil:
		return "Reference check: not run."
	case a.OK():
		return fmt.Sprintf("Reference check: %d AUROCs and %d other figures recomputed by %s from cases.csv agree (largest difference %.2g).",
			a.AUROCs, a.Others, a.Reference, a.MaxAbsDiff)
	}
	return fmt.Sprintf("Reference check FAILED (%s): %s", a.Reference, strings.Join(a.Mismatches, "; "))
}

// Markdown is the figures as a Markdown section, the notice first and last.
func Markdown(ev *Evaluation) string {
	var b bytes.Buffer
	f := ev.Figures
	fmt.Fprintf(&b, "> %s\n\n", notice.Full)
	for _, l := range heading(ev) {
		fmt.Fprintf(&b, "%s\n", l)
	}
	b.WriteString("\n| figure | value | goal |\n|---|---|---|\n")
	h := f.HeldOut
	fmt.Fprintf(&b, "| held-out AUROC, positive-class probability (%d cases, %d with the pattern) | %s | ≥ %.2f: %s |\n",
		h.N, h.Positives, f3(float64(h.AUROC)), GoalHeldOutAUROC, meets(float64(h.AUROC) >= GoalHeldOutAUROC))
	fmt.Fprintf(&b, "| accuracy (most probable class) | %s | |\n", f3(float64(h.Accuracy)))
	k := f.Calibration
	fmt.Fprintf(&b, "| ECE, %d bins, temperature 1 (bootstrap 95 %% interval) | %s (%s) | |\n", k.Bins, f3(float64(k.ECEBefore)), ciText(k.ECEBeforeCI))
	fmt.Fprintf(&b, "| ECE, %d bins, the card's temperature T = %.4g (bootstrap 95 %% interval) | %s (%s) | |\n", k.Bins, k.Temperature, f3(float64(k.ECEAfter)), ciText(k.ECEAfterCI))
	fmt.Fprintf(&b, "| Brier score, temperature 1 / T = %.4g | %s / %s | |\n", k.Temperature, f3(float64(k.BrierBefore)), f3(float64(k.BrierAfter)))
	fmt.Fprintf(&b, "| NLL, temperature 1 / T = %.4g | %s / %s | |\n", k.Temperature, f3(float64(k.NLLBefore)), f3(float64(k.NLLAfter)))
	fa := f.FalseAlarms
	fmt.Fprintf(&b, "| false alarms (in-distribution cases flagged) | %d / %d = %s | ≤ %.0f %%: %s |\n\n",
		fa.Flagged, fa.N, pct(float64(fa.Rate)), 100*GoalFalseAlarms, meets(float64(fa.Rate) <= GoalFalseAlarms))
	if k.Decision != "" {
		fmt.Fprintf(&b, "Temperature, as the card states: %s\n\n", k.Decision)
	}
	fmt.Fprintf(&b, "False alarms by failed check: %s; by cause: %s.\n\n", counts(fa.FailedChecks), counts(fa.Causes))
	b.WriteString("| shift | n | flagged | AUROC of the fit score | goal ≥ 0.95 | best single check (AUROC) | causes (flagged cases) | failed checks |\n|---|---|---|---|---|---|---|---|\n")
	for _, s := range f.Shifts {
		bn, ba := bestCheck(s)
		fmt.Fprintf(&b, "| %s | %d | %d | %s | %s | %s (%s) | %s | %s |\n", s.Shift, s.N, s.Flagged, f3(float64(s.AUROC)),
			meets(float64(s.AUROC) >= GoalShiftAUROC), bn, f3(ba), counts(s.Causes), counts(s.FailedChecks))
	}
	b.WriteString("\n| real scan | from | dims, spacing (mm) | status / verdict | failed checks |\n|---|---|---|---|---|\n")
	for _, r := range ev.RealScans {
		var names []string
		for _, c := range r.Failed {
			names = append(names, c.Name)
		}
		status := r.Verdict
		switch {
		case r.Status == StatusNotLoaded:
			status = "not loaded (score exits 2)"
		case r.Verdict != fitcheck.OutOfDistribution:
			status += " (**not flagged**)"
		}
		if r.Status == StatusNotPrepared {
			status += "; not prepared, model not run"
		}
		geom := ""
		if r.Status != StatusNotLoaded {
			geom = fmt.Sprintf("%d×%d×%d, %.3g×%.3g×%.3g", r.Dims[0], r.Dims[1], r.Dims[2], r.SpacingMm[0], r.SpacingMm[1], r.SpacingMm[2])
			if r.Modality != "" {
				geom += ", " + r.Modality
			}
		}
		fmt.Fprintf(&b, "| %s | %s | %s | %s | %s |\n", r.Scan.Name, r.Scan.From, geom, status, strings.Join(names, ", "))
	}
	b.WriteString("\nWhat Brightfold tells the reader for each real scan:\n\n")
	for _, r := range ev.RealScans {
		fmt.Fprintf(&b, "- **%s**: ", r.Scan.Name)
		if r.Status == StatusNotLoaded {
			fmt.Fprintf(&b, "%s: %s\n", r.Status, r.Error)
			continue
		}
		fmt.Fprintf(&b, "%s (fit score %.3g; %s, %s).\n", r.Verdict, float64(r.FitScore),
			inference.Plural(inference.CountCauses(r.Causes), "cause", "causes"), inference.Plural(len(r.Failed), "failed check", "failed checks"))
		sentence := map[string]string{}
		for _, c := range r.Failed {
			sentence[c.Name] = c.Explanation
		}
		for _, k := range r.Causes {
			if k.Consequence {
				fmt.Fprintf(&b, "  - %s (not counted as causes): %s\n", k.Title, k.Explanation)
			} else {
				fmt.Fprintf(&b, "  - *%s* (severity %.3g): %s\n", inference.CauseTitle(k), k.Severity, k.Explanation)
			}
			for _, n := range k.Checks {
				fmt.Fprintf(&b, "    - %s: %s\n", inference.CheckTitle(n), sentence[n])
			}
		}
	}
	fmt.Fprintf(&b, "\n%s\n\n> %s\n", referenceLine(ev.Reference), notice.Full)
	return b.String()
}

// Figure block markers of a hand-written document whose figures section
// UpdateDocument refreshes.
const (
	BlockBegin = "<!-- evaluation figures: begin (written by `make evaluate`) -->"
	BlockEnd   = "<!-- evaluation figures: end -->"
)

// UpdateDocument replaces the text between BlockBegin and BlockEnd in the
// Markdown file at path with Markdown(ev), atomically; the text around the
// block is kept. A file without the markers is refused.
func UpdateDocument(path string, ev *Evaluation) error {
	return replaceBlock(path, "figures block", BlockBegin, BlockEnd, Markdown(ev))
}

// ciText prints an interval as "lo to hi" ("–" when there is none).
func ciText(ci []float64) string {
	if len(ci) != 2 {
		return "–"
	}
	return f3(ci[0]) + " to " + f3(ci[1])
}
