package modelmake

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"runtime"
	"sort"
	"strings"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/notice"
	"brightfold/internal/parallel"
	"brightfold/internal/stats"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats" // NIfTI and DICOM for volume.Load
)

// MinPerClass is the fewest cases of a class model make accepts.
const MinPerClass = 10

// Options control Make.
type Options struct {
	Classes      []string // class names in logit order; the last is the positive class
	Spec         preprocess.Spec
	Name         string
	Version      string
	IntendedUse  string
	TrainingData string
	Seed         uint64
	// ValidationFraction of each class goes to validation when the manifest
	// has no split column (default 0.5).
	ValidationFraction float64
	SkipUnreadable     bool
	Workers            int // preparation goroutines (default: all CPUs)
	Threads            int // ONNX Runtime intra-op threads (default: all CPUs)
	// Progress, when set, is called after every case.
	Progress func(done, total int)
	// Log, when set, receives a line per stage.
	Log func(format string, args ...any)
	// Align, when set, aligns every case to a template first (template.go).
	Align *Alignment
}

// Case is one prepared and scored case: only what the fit needs.
type Case struct {
	ID    string
	Site  string
	Split string
	Fit   inference.FitCase
	// AlignValue is the final metric of the alignment to the template.
	AlignValue float64
}

// Result is what Make returns.
type Result struct {
	Card       *inference.Card
	Model      []byte
	Cases      []Case   // every case used, in manifest order
	Unreadable []string // "path: reason" of the scans skipped
	// Files are further files of the model folder (the template), by name.
	Files map[string][]byte
}

// Make builds a card for model from the manifest's cases. The ONNX Runtime
// environment must be initialised (inference.InitRuntime).
func Make(ctx context.Context, source string, model []byte, g Graph, m *manifest.Manifest, opt Options) (*Result, error) {
	opt = opt.withDefaults()
	if len(opt.Classes) < 2 {
		return nil, inputerr.New("", "--classes: give at least two class names, the positive one last (e.g. NEG,POS)")
	}
	if err := CheckGraph(source, g, opt.Classes); err != nil {
		return nil, err
	}
	labels, err := CheckManifest(m, opt.Classes)
	if err != nil {
		return nil, err
	}
	card := skeleton(g, opt, model)
	mf, err := inference.NewModelFolder(card, model)
	if err != nil {
		return nil, inputerr.Wrap(source, err)
	}
	mf.Source = source
	sess, err := inference.NewSession(mf, inference.SessionOptions{IntraOpThreads: opt.Threads})
	if err != nil {
		return nil, err
	}
	defer sess.Close()
	splits := assignSplits(m, labels, opt)
	res := &Result{Model: model}
	if err := setupAlignment(ctx, card, m, splits, opt, res); err != nil {
		return nil, err
	}
	cases, unreadable, err := runCases(ctx, sess, card, m, labels, splits, opt)
	if err != nil {
		return nil, err
	}
	if len(unreadable) > 0 && !opt.SkipUnreadable {
		return nil, inputerr.New(m.Source, "%d scan(s) cannot be prepared (use --skip-unreadable to leave them out): %s", len(unreadable), strings.Join(unreadable, "; "))
	}
	res.Cases, res.Unreadable = cases, mergeListed(res.Unreadable, unreadable)
	fitMetricRange(card, cases)
	if err := fitCard(card, res, m, g, opt); err != nil {
		return nil, err
	}
	res.Card = card
	return res, nil
}

func (o Options) withDefaults() Options {
	if o.ValidationFraction <= 0 || o.ValidationFraction >= 1 {
		o.ValidationFraction = 0.5
	}
	if o.Workers <= 0 {
		o.Workers = runtime.NumCPU()
	}
	if o.Log == nil {
		o.Log = func(string, ...any) {}
	}
	return o
}

// CheckGraph refuses a graph whose logit count does not fit the classes.
func CheckGraph(source string, g Graph, classes []string) error {
	if g.NumLogits > 0 && g.NumLogits != len(classes) && !(g.NumLogits == 1 && len(classes) == 2) {
		return inputerr.New(source, "the graph gives %d logits for the %d classes %v", g.NumLogits, len(classes), classes)
	}
	return nil
}

// CheckManifest refuses labels not in classes and fewer than MinPerClass
// cases of a class; it returns each case's class index.
func CheckManifest(m *manifest.Manifest, classes []string) ([]int, error) {
	labels, err := labelIndex(m, classes)
	if err != nil {
		return nil, err
	}
	return labels, checkCounts(m.Source, labels, classes, nil)
}

// labelIndex maps each case's label to its class index, refusing labels not
// in classes.
func labelIndex(m *manifest.Manifest, classes []string) ([]int, error) {
	idx := map[string]int{}
	for i, c := range classes {
		idx[c] = i
	}
	out := make([]int, len(m.Cases))
	for i, c := range m.Cases {
		k, ok := idx[c.Label]
		if !ok {
			return nil, inputerr.New(m.Source, "case %s: label %q is not one of --classes %s", c.ID, c.Label, strings.Join(classes, ","))
		}
		out[i] = k
	}
	return out, nil
}

// checkCounts refuses fewer than MinPerClass cases of any class (among the
// cases whose keep entry is true, or all when keep is nil).
func checkCounts(source string, labels []int, classes []string, keep []bool) error {
	n := make([]int, len(classes))
	for i, l := range labels {
		if keep == nil || keep[i] {
			n[l]++
		}
	}
	for k, c := range classes {
		if n[k] < MinPerClass {
			return inputerr.New(source, "class %q has %d usable cases; at least %d per class are needed", c, n[k], MinPerClass)
		}
	}
	return nil
}

func skeleton(g Graph, opt Options, model []byte) *inference.Card {
	spec := opt.Spec
	sum := sha256.Sum256(model)
	shape := append([]int64(nil), g.Shape...)
	spatial := [3]int64{int64(spec.Shape[2]), int64(spec.Shape[1]), int64(spec.Shape[0])}
	if g.Layout == preprocess.LayoutNCXYZ {
		spatial = [3]int64{int64(spec.Shape[0]), int64(spec.Shape[1]), int64(spec.Shape[2])}
	}
	copy(shape[2:], spatial[:])
	return &inference.Card{
		Schema: inference.SchemaVersion, Name: opt.Name, Version: opt.Version,
		Task:    fmt.Sprintf("Classifies a brain scan as one of %s (positive class %q).", strings.Join(opt.Classes, ", "), opt.Classes[len(opt.Classes)-1]),
		Classes: opt.Classes, PositiveClass: opt.Classes[len(opt.Classes)-1],
		Input:         inference.InputSpec{Name: g.Input, Shape: shape, Layout: g.Layout, DataType: "float32"},
		Preprocessing: spec,
		Outputs:       inference.OutputSpec{Logits: g.Logits, Features: g.Features, Activation: g.Activation},
		Calibration:   inference.Calibration{Temperature: 1},
		ModelSHA256:   hex.EncodeToString(sum[:]),
		IntendedUse:   opt.IntendedUse, TrainingData: opt.TrainingData,
	}
}

// assignSplits keeps a manifest's split column; cases without one are
// split per class: shuffled by a PCG stream seeded by opt.Seed, the first
// round(fraction·n) of each class to validation.
func assignSplits(m *manifest.Manifest, labels []int, opt Options) []string {
	out := make([]string, len(m.Cases))
	byClass := map[int][]int{}
	for i, c := range m.Cases {
		out[i] = c.Split
		if c.Split == "" {
			byClass[labels[i]] = append(byClass[labels[i]], i)
		}
	}
	r := rand.New(rand.NewPCG(opt.Seed, 0x73706c6974))
	keys := make([]int, 0, len(byClass))
	for k := range byClass {
		keys = append(keys, k)
	}
	sort.Ints(keys)
	for _, k := range keys {
		idx := byClass[k]
		r.Shuffle(len(idx), func(a, b int) { idx[a], idx[b] = idx[b], idx[a] })
		nv := int(float64(len(idx))*opt.ValidationFraction + 0.5)
		for j, i := range idx {
			out[i] = manifest.SplitCalibration
			if j < nv {
				out[i] = manifest.SplitValidation
			}
		}
	}
	return out
}

// runCases prepares, measures and scores the cases a batch at a time; only
// the measurements and the model outputs are kept.
func runCases(ctx context.Context, sess *inference.Session, card *inference.Card, m *manifest.Manifest, labels []int, splits []string, opt Options) ([]Case, []string, error) {
	levels := inference.DefaultLevels()
	batch := 2 * opt.Workers
	var cases []Case
	var unreadable []string
	done := 0
	for lo := 0; lo < len(m.Cases); lo += batch {
		if err := ctx.Err(); err != nil {
			return nil, nil, err
		}
		hi := min(len(m.Cases), lo+batch)
		prs := make([]*preprocess.Prepared, hi-lo)
		facts := make([]inference.CaseFacts, hi-lo)
		errs := make([]error, hi-lo)
		parallel.Each(hi-lo, opt.Workers, func(_, k int) {
			c := m.Cases[lo+k]
			v, err := volume.Load([]string{c.Path}, volume.LoadOptions{})
			if err != nil {
				errs[k] = err
				return
			}
			pr, err := inference.PrepareForCard(v, card)
			if err != nil {
				errs[k] = err
				return
			}
			prs[k], facts[k] = pr, inference.MeasureCase(v, pr, levels)
			pr.Tensor.HeadMask = nil
		})
		var ts []*preprocess.Tensor
		var at []int
		for k, e := range errs {
			if e != nil {
				unreadable = append(unreadable, fmt.Sprintf("%s: %v", filepath.Base(m.Cases[lo+k].Path), e))
				continue
			}
			ts, at = append(ts, prs[k].Tensor), append(at, k)
		}
		outs, err := sess.RunContext(ctx, ts)
		if err != nil {
			return nil, nil, fmt.Errorf("ONNX Runtime: %w", err)
		}
		for j, k := range at {
			c := m.Cases[lo+k]
			cases = append(cases, Case{ID: c.ID, Site: c.Site, Split: splits[lo+k],
				Fit: inference.FitCase{Facts: facts[k], Output: outs[j], Label: labels[lo+k]}, AlignValue: alignValue(prs[k])})
		}
		done = hi
		if opt.Progress != nil {
			opt.Progress(done, len(m.Cases))
		}
	}
	return cases, unreadable, nil
}

// fitCard fits the fit check and temperature on the calibration split and
// measures the validation figures on the validation split.
func fitCard(card *inference.Card, res *Result, m *manifest.Manifest, g Graph, opt Options) error {
	var cal, val []inference.FitCase
	var valCases []Case
	counts := map[string]map[string]int{manifest.SplitCalibration: {}, manifest.SplitValidation: {}}
	for _, c := range res.Cases {
		counts[c.Split][opt.Classes[c.Fit.Label]]++
		if c.Split == manifest.SplitValidation {
			val, valCases = append(val, c.Fit), append(valCases, c)
		} else {
			cal = append(cal, c.Fit)
		}
	}
	labels := make([]int, len(res.Cases))
	for i, c := range res.Cases {
		labels[i] = c.Fit.Label
	}
	if err := checkCounts(m.Source, labels, opt.Classes, nil); err != nil {
		return err
	}
	for _, split := range []string{manifest.SplitCalibration, manifest.SplitValidation} {
		for _, cl := range opt.Classes {
			if counts[split][cl] < 2 {
				return inputerr.New(m.Source, "the %s split has %d case(s) of class %q; each split needs cases of every class", split, counts[split][cl], cl)
			}
		}
	}
	name := filepath.Base(m.Source)
	calDesc := fmt.Sprintf("%d calibration cases of %s", len(cal), name)
	valDesc := fmt.Sprintf("%d validation cases of %s", len(val), name)
	opt.Log("fitting the fit check and temperature on %s", calDesc)
	ood, calib, _, err := inference.FitReference(card, cal, nil, inference.FitOptions{TrainDescription: calDesc, ValidationDescription: calDesc})
	if err != nil {
		return fmt.Errorf("fit: %w", err)
	}
	card.OOD = ood
	card.Calibration = chooseTemperature(card, calib, val, valDesc)
	card.Validation = Figures(card, valCases, valDesc, opt.Seed)
	card.Provenance = &inference.Provenance{MadeBy: "brightfold model make", Cases: name, Seed: opt.Seed,
		Split: splitRule(m, opt), Counts: counts, Skipped: len(res.Unreadable), Graph: g.Notes}
	card.Cautions = append(cautions(card), notice.Full)
	if err := card.Validate(); err != nil {
		return fmt.Errorf("made card: %w", err)
	}
	return nil
}

func splitRule(m *manifest.Manifest, opt Options) string {
	given := 0
	for _, c := range m.Cases {
		if c.Split != "" {
			given++
		}
	}
	rule := fmt.Sprintf("stratified by class: a fraction %.2f of each class to validation, shuffled by PCG seed %d", opt.ValidationFraction, opt.Seed)
	switch {
	case given == len(m.Cases):
		return "the manifest's split column"
	case given > 0:
		return "the manifest's split column where given; the rest " + rule
	}
	return rule
}

// chooseTemperature keeps the temperature fitted on the calibration split
// only when it lowers the validation NLL; otherwise T = 1.
func chooseTemperature(card *inference.Card, calib inference.Calibration, val []inference.FitCase, valDesc string) inference.Calibration {
	var logits [][]float64
	var labels []int
	for _, fc := range val {
		logits = append(logits, inference.ClassLogits(card, fc.Output.Logits))
		labels = append(labels, fc.Label)
	}
	n1, nT := stats.NLL(logits, labels, 1), stats.NLL(logits, labels, calib.Temperature)
	if nT < n1 {
		calib.Method += fmt.Sprintf("; kept because it lowers the mean NLL of the %s from %.4f (T = 1) to %.4f", valDesc, n1, nT)
		return calib
	}
	return inference.Calibration{Temperature: 1, FittedOn: calib.FittedOn,
		Method: fmt.Sprintf("none: the temperature %.4g fitted on the calibration split (Guo et al. 2017) did not lower the mean NLL of the %s (%.4f at T = 1, %.4f at T = %.4g), so T = 1", calib.Temperature, valDesc, n1, nT, calib.Temperature)}
}

func cautions(card *inference.Card) []string {
	out := []string{"The validation figures describe the group's own validation cases only; another site, scanner or population may differ (see `brightfold model recalibrate`).",
		"The fit check was fitted on the calibration split: scans unlike those cases are flagged, scans like them are not thereby shown to be read correctly."}
	for _, m := range card.Validation {
		if m.Warning != "" {
			out = append(out, fmt.Sprintf("%s%s: %s", m.Name, siteText(m.Site), m.Warning))
			break
		}
	}
	return out
}

func siteText(s string) string {
	if s == "" {
		return ""
	}
	return " (site " + s + ")"
}
