package study

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"sort"
	"strings"
	"sync/atomic"
	"time"

	"brightfold/inference"
	"brightfold/internal/atomicfile"
	"brightfold/internal/cputime"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/parallel"
	"brightfold/internal/phantom"
	"brightfold/internal/stats"
	"brightfold/overlay"
)

// MapsSeed is the phantom seed of the relevance-map evaluation, used for no
// training or fitting. The LRP composite is chosen on RuleSearchSeed; earlier
// composites were looked at on this seed before that rule existed, so it is
// not untouched by the choice of LRP settings.
const MapsSeed uint64 = 20261210

// MapsConfig says which pattern-positive phantoms the relevance maps are
// measured on and with which settings.
type MapsConfig struct {
	Seed    uint64  // 0 means MapsSeed
	Cases   int     // pattern-positive phantoms (0 means 50)
	VoxelMM float64 // phantom voxel size (0 means 1 mm)
	Steps   int     // integrated-gradients steps (0 means 64)
	Stride  int     // occlusion stride (0 means 4)
	Workers int     // cases at once (0 means all CPUs)
	Context context.Context
	// Progress, when set, is called after each case.
	Progress func(done, total int)
}

func (c MapsConfig) withDefaults() MapsConfig {
	if c.Seed == 0 {
		c.Seed = MapsSeed
	}
	if c.Cases <= 0 {
		c.Cases = 50
	}
	if c.VoxelMM <= 0 {
		c.VoxelMM = 1
	}
	if c.Steps <= 0 {
		c.Steps = 64
	}
	if c.Stride <= 0 {
		c.Stride = 4
	}
	if c.Context == nil {
		c.Context = context.Background()
	}
	return c
}

// MapMethod is one row of the relevance-map table.
type MapMethod struct {
	Name    string
	Method  overlay.Method
	Options overlay.Options
}

// MapMethods are the table's rows: the product's LRP composite, the
// composite with z^B at the input layer (the default before the choice on
// the tuning seed), the earlier composite (epsilon in the upper
// convolutions), the pure rule
// sets, the contrast target, integrated gradients with both baselines,
// gradient × input and occlusion.
func MapMethods(steps, stride int) []MapMethod {
	return []MapMethod{
		{"LRP composite (product default)", overlay.LRP, overlay.Options{}},
		{"LRP composite, z^B input layer (default before the tuning seed)", overlay.LRP, overlay.Options{Input: overlay.InputZB}},
		{"LRP composite, epsilon 0.25 in conv3–conv4 (earlier default)", overlay.LRP, overlay.Options{LowerConvs: 1, Input: overlay.InputZB}},
		{"LRP epsilon 0.25", overlay.LRP, overlay.Options{Rule: overlay.RuleEpsilon}},
		{"LRP alpha1-beta0", overlay.LRP, overlay.Options{Rule: overlay.RuleAlphaBeta}},
		{"LRP composite, contrast", overlay.LRP, overlay.Options{Contrast: true}},
		{fmt.Sprintf("integrated gradients, zero baseline, m = %d", steps), overlay.IntegratedGradients, overlay.Options{Steps: steps}},
		{fmt.Sprintf("integrated gradients, blurred baseline, m = %d", steps), overlay.IntegratedGradients, overlay.Options{Steps: steps, Baseline: overlay.BaselineBlur}},
		{fmt.Sprintf("integrated gradients, zero, contrast, m = %d", steps), overlay.IntegratedGradients, overlay.Options{Steps: steps, Contrast: true}},
		{"gradient × input", overlay.GradientInput, overlay.Options{}},
		{fmt.Sprintf("occlusion, 8-voxel cube, stride %d", stride), overlay.Occlusion, overlay.Options{Stride: stride}},
	}
}

// MapFigures are one method's per-case figures.
type MapFigures struct {
	Name string `json:"name"`
	// MassAccuracy is the relevance mass accuracy on the scan grid (Arras
	// et al. 2022, section 4.2) of each case.
	MassAccuracy []float64 `json:"mass_accuracy"`
	// InputShare is Σ relevance / target logit (additive methods only);
	// BiasShare and StabiliserShare what LRP's biases and stabilisers keep.
	InputShare      []float64 `json:"input_share,omitempty"`
	BiasShare       []float64 `json:"bias_share,omitempty"`
	StabiliserShare []float64 `json:"stabiliser_share,omitempty"`
	// Check is the method's own check (LRP: ledger consistency error;
	// integrated gradients: completeness error) of each case.
	CheckName string    `json:"check_name,omitempty"`
	Check     []float64 `json:"check,omitempty"`
}

// MapsResult is the relevance-map evaluation.
type MapsResult struct {
	Config      MapsConfig   `json:"-"`
	Model       ModelInfo    `json:"model"`
	Chance      []float64    `json:"chance"`       // mask share of the scan, per case
	ChanceBrain []float64    `json:"chance_brain"` // mask share of the intracranial voxels
	Methods     []MapFigures `json:"methods"`
	Started     time.Time    `json:"started"`
	WallS       float64      `json:"wall_s"`
	CPUS        float64      `json:"cpu_s"`
}

// RunMaps computes every MapMethods map on the first cfg.Cases
// pattern-positive phantoms of cfg.Seed, carries each onto the scan grid
// and measures it against the phantom's ground-truth mask.
func RunMaps(b *inference.ModelFolder, sess *inference.Session, cfg MapsConfig) (*MapsResult, error) {
	cfg = cfg.withDefaults()
	ex, err := overlay.New(b, sess)
	if err != nil {
		return nil, err
	}
	methods := MapMethods(cfg.Steps, cfg.Stride)
	subs := positiveSubjects(cfg.Seed, cfg.Cases)
	res := &MapsResult{Config: cfg, Started: time.Now().UTC(), Model: ModelInfo{Name: b.Card.Name, Version: b.Card.Version, SHA256: b.SHA256},
		Chance: make([]float64, len(subs)), ChanceBrain: make([]float64, len(subs)), Methods: make([]MapFigures, len(methods))}
	t0, cpu0 := time.Now(), cputime.Seconds()
	per, err := measureSubjects(ex, b.Card, cfg, subs, methods, func(k int, c *phantom.Case) {
		res.Chance[k], res.ChanceBrain[k] = chanceOf(c)
	})
	if err != nil {
		return nil, err
	}
	for m, md := range methods {
		f := MapFigures{Name: md.Name}
		for k := range subs {
			mc := per[k][m]
			f.MassAccuracy = append(f.MassAccuracy, mc.acc)
			f.CheckName = mc.checkName
			appendIf(&f.InputShare, mc.checks, "input_share")
			appendIf(&f.BiasShare, mc.checks, "bias_share")
			appendIf(&f.StabiliserShare, mc.checks, "stabiliser_share")
			appendIf(&f.Check, mc.checks, mc.checkName)
		}
		res.Methods[m] = f
	}
	res.WallS, res.CPUS = time.Since(t0).Seconds(), cputime.Seconds()-cpu0
	return res, nil
}

func appendIf(dst *[]float64, checks map[string]float64, key string) {
	if v, ok := checks[key]; ok && key != "" {
		*dst = append(*dst, v)
	}
}

// positiveSubjects returns the indices of the first n pattern-positive
// in-distribution subjects of seed.
func positiveSubjects(seed uint64, n int) []int {
	var out []int
	for idx := 0; len(out) < n; idx++ {
		if phantom.NewSubject(seed, idx, phantom.ShiftNone).Label == 1 {
			out = append(out, idx)
		}
	}
	return out
}

// chanceOf is the mask's share of the scan and of the intracranial voxels.
func chanceOf(c *phantom.Case) (float64, float64) {
	nMask, nBrain := 0, 0
	for j, v := range c.Mask.Data {
		if v > 0 {
			nMask++
		}
		if c.Labels[j] >= phantom.CSF {
			nBrain++
		}
	}
	return float64(nMask) / float64(len(c.Mask.Data)), float64(nMask) / float64(max(nBrain, 1))
}

// mapCase is one method's figures on one case.
type mapCase struct {
	acc       float64
	checks    map[string]float64
	checkName string
}

// measureCase computes every method's map of case c and its mass accuracy.
// measureSubjects generates the phantom of each subject of cfg.Seed and
// measures every method on it, cfg.Workers at a time, reporting progress;
// each, when set, also sees every generated case.
func measureSubjects(ex *overlay.Explainer, card *inference.Card, cfg MapsConfig, subs []int, methods []MapMethod, each func(k int, c *phantom.Case)) ([][]mapCase, error) {
	per := make([][]mapCase, len(subs))
	var done atomic.Int64
	err := parallel.EachErr(len(subs), cfg.Workers, func(_, k int) error {
		c, err := phantom.Generate(cfg.Seed, subs[k], phantom.Options{VoxelMM: cfg.VoxelMM})
		if err != nil {
			return err
		}
		if each != nil {
			each(k, c)
		}
		per[k], err = measureCase(cfg.Context, ex, c, methods, card)
		if cfg.Progress != nil {
			cfg.Progress(int(done.Add(1)), len(subs))
		}
		return err
	})
	return per, err
}

func measureCase(ctx context.Context, ex *overlay.Explainer, c *phantom.Case, methods []MapMethod, card *inference.Card) ([]mapCase, error) {
	pr, err := inference.PrepareForCard(c.Volume, card)
	if err != nil {
		return nil, err
	}
	mask := make([]bool, len(c.Mask.Data))
	for j, v := range c.Mask.Data {
		mask[j] = v > 0
	}
	out := make([]mapCase, len(methods))
	for i, md := range methods {
		m, err := ex.Compute(ctx, md.Method, pr.Tensor, md.Options)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", md.Name, err)
		}
		onScan, err := m.ToScan(pr.Transform)
		if err != nil {
			return nil, err
		}
		acc, err := overlay.MassAccuracy(onScan.Data, mask)
		if errors.Is(err, overlay.ErrNoPositiveRelevance) {
			acc = 0 // counted as no localisation; the table says how many
		}
		out[i] = mapCase{acc: acc, checks: m.Checks}
		for _, k := range []string{"consistency_error", "completeness_error"} {
			if _, ok := m.Checks[k]; ok {
				out[i].checkName = k
			}
		}
	}
	return out, nil
}

// Markers of the relevance-map block of docs/evaluation.md.
const (
	MapsBlockBegin = "<!-- relevance maps: begin (written by `make evaluate-maps`) -->"
	MapsBlockEnd   = "<!-- relevance maps: end -->"
)

// WriteMapsMarkdown writes the relevance-map tables.
func WriteMapsMarkdown(w io.Writer, r *MapsResult) {
	cfg := r.Config
	mc, _ := mapsMeanSD(r.Chance)
	mb, _ := mapsMeanSD(r.ChanceBrain)
	fmt.Fprintf(w, "> %s\n\n", notice.Full)
	fmt.Fprintf(w, "Model: %s %s (model.onnx sha256 %s). Cases: the first %d pattern-positive phantoms of seed %d (%g mm), positive-class logit unless the row says contrast. Run: %s, %.0f s wall, %.0f CPU s.\n\n",
		r.Model.Name, r.Model.Version, r.Model.SHA256, len(r.Chance), cfg.Seed, cfg.VoxelMM, r.Started.Format(time.RFC3339), r.WallS, r.CPUS)
	fmt.Fprintf(w, "Localisation: relevance mass accuracy (share of the positive relevance inside the ground-truth mask, Arras et al. 2022, section 4.2) on the scan grid. Chance is the mask's share of the scan, %.4f on average, or %.4f of the intracranial voxels.\n\n", mc, mb)
	fmt.Fprintln(w, "| method | mass accuracy, mean (sd) | × chance | cases ≥ 3× chance | input share, median (quartiles; min to max) | own check (median, max) |")
	fmt.Fprintln(w, "|---|---|---|---|---|---|")
	for _, f := range r.Methods {
		m, sd := mapsMeanSD(f.MassAccuracy)
		above := 0
		for k, a := range f.MassAccuracy {
			if a >= 3*r.Chance[k] {
				above++
			}
		}
		fmt.Fprintf(w, "| %s | %.4f (%.4f) | %.1f | %d/%d | %s | %s |\n", f.Name, m, sd, m/mc, above, len(f.MassAccuracy), shareSummary(f.InputShare), checkSummary(f.CheckName, f.Check))
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Where the logit goes under each LRP rule set (shares of the logit, median and 5th to 95th percentile over the cases; input + bias + stabiliser = 1):")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "| LRP rules | input share | bias share | stabiliser share |")
	fmt.Fprintln(w, "|---|---|---|---|")
	for _, f := range r.Methods {
		if len(f.BiasShare) == 0 {
			continue
		}
		fmt.Fprintf(w, "| %s | %s | %s | %s |\n", f.Name, spread(f.InputShare), spread(f.BiasShare), spread(f.StabiliserShare))
	}
	fmt.Fprintf(w, "\n> %s\n", notice.Full)
}

func mapsSorted(x []float64) []float64 {
	c := append([]float64(nil), x...)
	sort.Float64s(c)
	return c
}

func shareSummary(x []float64) string {
	if len(x) == 0 {
		return "– (not additive)"
	}
	c := mapsSorted(x)
	q := stats.Quantiles(c, []float64{0.25, 0.5, 0.75})
	return fmt.Sprintf("%.3f (%.3f–%.3f; %.3f to %.3f)", q[1], q[0], q[2], c[0], c[len(c)-1])
}

func spread(x []float64) string {
	if len(x) == 0 {
		return "–"
	}
	q := stats.Quantiles(mapsSorted(x), []float64{0.05, 0.5, 0.95})
	return fmt.Sprintf("%.3f (%.3f to %.3f)", q[1], q[0], q[2])
}

func checkSummary(name string, x []float64) string {
	if len(x) == 0 {
		return "–"
	}
	c := mapsSorted(x)
	label := map[string]string{"consistency_error": "ledger consistency", "completeness_error": "completeness"}[name]
	return fmt.Sprintf("%s %.2g, %.2g", label, stats.Quantile(c, 0.5), c[len(c)-1])
}

func mapsMeanSD(x []float64) (float64, float64) {
	if len(x) == 0 {
		return math.NaN(), math.NaN()
	}
	var s, ss float64
	for _, v := range x {
		s += v
	}
	m := s / float64(len(x))
	for _, v := range x {
		ss += (v - m) * (v - m)
	}
	return m, math.Sqrt(ss / float64(max(len(x)-1, 1)))
}

// UpdateMapsDocument replaces the relevance-map block of the Markdown
// document at path.
func UpdateMapsDocument(path string, r *MapsResult) error {
	var b strings.Builder
	WriteMapsMarkdown(&b, r)
	return replaceBlock(path, "block", MapsBlockBegin, MapsBlockEnd, b.String())
}

// replaceBlock replaces what lies between the lines begin and end of the
// document at path with body, atomically; what names the block in the
// error for a document without it.
func replaceBlock(path, what, begin, end, body string) error {
	old, err := os.ReadFile(path)
	if err != nil {
		return inputerr.Wrap(path, err)
	}
	s := string(old)
	i, j := strings.Index(s, begin), strings.Index(s, end)
	if i < 0 || j < i {
		return inputerr.New(path, "no %s (%q … %q) to update", what, begin, end)
	}
	return atomicfile.WriteBytes(path, []byte(s[:i+len(begin)]+"\n"+body+s[j:]))
}
