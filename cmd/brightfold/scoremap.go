package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"time"

	"brightfold/inference"
	"brightfold/internal/inputerr"
	"brightfold/internal/onnx/exec"
	"brightfold/internal/report"
	"brightfold/internal/volume"
	"brightfold/overlay"
)

// checkMap checks --map (and that --out gives the maps somewhere to go).
func checkMap(o scoreOptions) error {
	if o.mapMethod == "none" {
		return nil
	}
	if _, err := overlay.ParseMethod(o.mapMethod); err != nil {
		return usageError("brightfold score: --map %q: want one of %s", o.mapMethod, strings.Join(relevanceMethods, ", "))
	}
	if o.out == "" {
		return usageError("brightfold score: --map %s writes %s and %s: give --out DIR", o.mapMethod, report.RelevanceFile, report.OverlayFile)
	}
	return nil
}

// addRelevance computes the --map relevance map of the scored scan, carries
// it onto the scan's grid, writes relevance.nii.gz, relevance.json and
// overlay.png into --out, and adds the relevance block to the report.
// Ctrl-C stops a slow map cleanly (nothing is written).
func addRelevance(e *env, o scoreOptions, dir string, paths []string, v *volume.Volume, b *inference.ModelFolder, sess *inference.Session, res *inference.Result, rep *report.Score) error {
	t0 := time.Now()
	method, err := overlay.ParseMethod(o.mapMethod)
	if err != nil {
		return usageError("brightfold score: --map: %v", err)
	}
	ex, err := overlay.New(b, sess)
	if err != nil {
		return err
	}
	for _, a := range ex.Available() {
		if a.Method == method && !a.Available {
			return inputerr.New(b.Source, "--map %s: %s; --map occlusion works with any model", method, a.Reason)
		}
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	// Integrated gradients refine their steps (64, 192, 576) until the
	// completeness error is under 1 % (Sundararajan et al. 2017 advise so).
	opt := overlay.Options{Progress: progressPrinter(e.stderr, method), Tolerance: 0.01}
	m, err := ex.Compute(ctx, method, res.Prepared.Tensor, opt)
	if errors.Is(err, context.Canceled) {
		return inputerr.New(o.out, "--map %s: stopped before the map was complete; nothing written", method)
	}
	var me *exec.MemoryError
	if errors.As(err, &me) {
		// the model, run in Go for the map, asked for more than the limit
		return inputerr.New(b.Source, "%s: --map %s: %v", inference.ModelFile, method, me)
	}
	if err != nil {
		return fmt.Errorf("relevance map (%s): %w", method, err)
	}
	onScan, err := m.ToScan(res.Prepared.Transform)
	if err != nil {
		return err
	}
	prob := res.Prediction.Probabilities[m.Class]
	info := relevanceInfo(m, method, b, res, prob, shownInput(o, paths))
	if _, _, err := report.WriteRelevance(dir, onScan, info); err != nil {
		return wrapPathError(o.out, err)
	}
	fig := report.OverlayFigure{Scan: v, Map: onScan, At: peakRAS(onScan),
		Units: mapUnits(m), Title: figureTitle(m, method, b, res, prob, o.showProb)}
	fig.Model = fmt.Sprintf("Model: %s, version %s", b.Card.Name, b.Card.Version)
	fig.Verdict, fig.OOD, fig.Headline = "In distribution", false, inference.FormatProbability(prob)
	if inference.Withheld(res) {
		fig.Verdict, fig.OOD, fig.Headline = "OUT OF DISTRIBUTION", true, "Withheld"
		if o.showProb {
			fig.Headline = inference.FormatProbability(prob) + " (unreliable)"
		}
	}
	if err := report.WriteOverlayPNG(filepath.Join(dir, report.OverlayFile), fig); err != nil {
		return wrapPathError(o.out, err)
	}
	rep.Relevance = &report.Relevance{Method: string(method), File: report.RelevanceFile, Overlay: report.OverlayFile, Checks: m.Checks}
	rep.TimingMs["relevance"] = msSince(t0)
	return nil
}

func wrapPathError(dir string, err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return inputerr.Wrap(dir, err)
	}
	return err
}

// progressPrinter reports the slow methods' progress on stderr in steps of
// a tenth.
func progressPrinter(w io.Writer, method overlay.Method) func(done, total int) {
	if method != overlay.Occlusion && method != overlay.IntegratedGradients {
		return nil
	}
	last := -1
	return func(done, total int) {
		if total <= 0 {
			return
		}
		if step := 10 * done / total; step > last {
			last = step
			fmt.Fprintf(w, "%s: %d %% (%d of %d passes)\n", method.Title(), 10*step, done, total)
		}
	}
}

func relevanceInfo(m *overlay.Map, method overlay.Method, b *inference.ModelFolder, res *inference.Result, prob float64, input string) report.RelevanceInfo {
	checks := map[string]report.Number{}
	for k, x := range m.Checks {
		checks[k] = report.Number(x)
	}
	c := b.Card
	return report.RelevanceInfo{
		Method: string(method), MethodName: method.Title(), Reference: method.Reference(), About: method.About(),
		Rule: m.Rule, TargetClass: m.Class, TargetLogit: report.Number(m.Target), Probability: report.Number(prob),
		Units: mapUnits(m), Input: input,
		Space:     "the input scan's voxel grid (dims and affine as the scan); computed on the model grid and carried back through the inverse of the preprocessing transform",
		ModelGrid: report.ModelGrid{Dims: res.Prepared.Transform.GridDims, Affine: res.Prepared.Transform.GridAffine},
		Checks:    checks, Settings: m.Settings, Passes: m.Passes,
		InputShare: inputShare(m), Shares: m.ShareSentence(),
		Model:    report.Model{Name: c.Name, Version: c.Version, SHA256: b.SHA256},
		FitCheck: res.Verdict,
	}
}

// inputShare is the map's input_share check, or nil (occlusion).
func inputShare(m *overlay.Map) *report.Number {
	if v, ok := m.Checks["input_share"]; ok {
		n := report.Number(v)
		return &n
	}
	return nil
}

func mapUnits(m *overlay.Map) string {
	if m.Additive {
		return "share of the logit per voxel"
	}
	return "logit drop"
}

// peakRAS is the RAS position of the map's peak voxel.
func peakRAS(m *volume.Volume) [3]float64 {
	p := overlay.Peak(m)
	return m.Affine.Apply([3]float64{float64(p[0]), float64(p[1]), float64(p[2])})
}

// figureTitle says what the figure shows: the method, the explained class
// with its probability, the model and the fit check.
// When the fit check failed, the verdict and its causes come first and the
// probability is withheld unless asked for (then labelled unreliable).
func figureTitle(m *overlay.Map, method overlay.Method, b *inference.ModelFolder, res *inference.Result, prob float64, showProb bool) []string {
	cls := inference.ClassName(m.Class)
	var lines []string
	if inference.Withheld(res) {
		lines = append(lines, "The scan is unlike the training scans: neither the probability nor this map can be relied on.")
		lines = append(lines, inference.VerdictCauses(res)...)
		if showProb {
			lines = append(lines, fmt.Sprintf("Probability of %s shown on request: %s, UNRELIABLE.", cls, inference.FormatProbability(prob)))
		}
	} else {
		lines = append(lines, fmt.Sprintf("Probability of %s (%s). %s", cls, inference.CalibrationLabel(b.Card), inference.PrevalenceNote(b.Card)))
	}
	return append(lines,
		fmt.Sprintf("Relevance map: %s (%s), for %s. Slices across its strongest part; inside the head only; warm colours speak for the class.", method.Title(), method.Reference(), cls))
}

// writeRelevanceText adds the relevance map to the text form of a result.
func writeRelevanceText(w io.Writer, rep *report.Score) {
	r := rep.Relevance
	if r == nil {
		return
	}
	if r.Problem != "" {
		fmt.Fprintf(w, "Relevance:   %s\n", r.Problem)
		return
	}
	fmt.Fprintf(w, "Relevance:   %s map in %s, figure in %s (%s)\n", r.Method, r.File, r.Overlay, report.RelevanceSidecar)
	fmt.Fprintf(w, "             %s\n", overlay.ShareSentence(overlay.Method(r.Method), r.Checks))
}
