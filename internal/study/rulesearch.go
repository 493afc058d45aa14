package study

import (
	"fmt"
	"io"
	"strings"
	"time"

	"brightfold/inference"
	"brightfold/internal/notice"
	"brightfold/internal/stats"
	"brightfold/overlay"
)

// RuleSearchSeed is the phantom seed the LRP composite's configuration was
// chosen on; the maps are reported on MapsSeed.
const RuleSearchSeed uint64 = 20261211

// RuleCandidates are the LRP composite configurations compared: how many
// convolutions above the first get alpha1-beta0 (the rest epsilon), the
// epsilon (× RMS of the pre-activations) and the bias treatment of the
// epsilon and LRP-0 layers (Montavon et al. 2019, section 10.1;
// Kohlbrenner et al. 2020).
func RuleCandidates() []MapMethod {
	var out []MapMethod
	for _, lower := range []int{1, 2, 3} {
		for _, bias := range []overlay.LRPBias{overlay.BiasAbsorb, overlay.BiasIgnore} {
			for _, eps := range []float64{0.25, 0.05, 0.01} {
				out = append(out, MapMethod{
					Name:    fmt.Sprintf("alpha1-beta0 in %d conv. above the first, epsilon %.2g, biases %s", lower, eps, bias),
					Method:  overlay.LRP,
					Options: overlay.Options{LowerConvs: lower, Bias: bias, Epsilon: eps},
				})
			}
		}
	}
	return out
}

// RuleSearchResult holds each candidate's input share and mass accuracy on
// the search cases.
type RuleSearchResult struct {
	Seed         uint64       `json:"seed"`
	VoxelMM      float64      `json:"voxel_mm"`
	Candidates   []MapFigures `json:"candidates"`
	Model        ModelInfo    `json:"model"`
	Started      time.Time    `json:"started"`
	WallS        float64      `json:"wall_s"`
	CasesPerRule int          `json:"cases"`
}

// RunRuleSearch measures every RuleCandidates configuration on the first
// cfg.Cases (default 20) pattern-positive phantoms of cfg.Seed (default
// RuleSearchSeed).
func RunRuleSearch(b *inference.ModelFolder, cfg MapsConfig) (*RuleSearchResult, error) {
	if cfg.Seed == 0 {
		cfg.Seed = RuleSearchSeed
	}
	if cfg.Cases <= 0 {
		cfg.Cases = 20
	}
	cfg = cfg.withDefaults()
	ex, err := overlay.New(b, nil)
	if err != nil {
		return nil, err
	}
	cands := RuleCandidates()
	subs := positiveSubjects(cfg.Seed, cfg.Cases)
	t0 := time.Now()
	per, err := measureSubjects(ex, b.Card, cfg, subs, cands, nil)
	if err != nil {
		return nil, err
	}
	r := &RuleSearchResult{Seed: cfg.Seed, VoxelMM: cfg.VoxelMM, CasesPerRule: len(subs), Started: t0.UTC(), WallS: time.Since(t0).Seconds(),
		Model: ModelInfo{Name: b.Card.Name, Version: b.Card.Version, SHA256: b.SHA256}}
	for i, cd := range cands {
		f := MapFigures{Name: cd.Name}
		for k := range subs {
			f.MassAccuracy = append(f.MassAccuracy, per[k][i].acc)
			appendIf(&f.InputShare, per[k][i].checks, "input_share")
		}
		r.Candidates = append(r.Candidates, f)
	}
	return r, nil
}

// Markers of the rule-search block of docs/evaluation.md.
const (
	RuleSearchBlockBegin = "<!-- lrp rule search: begin (written by `make evaluate-maps`) -->"
	RuleSearchBlockEnd   = "<!-- lrp rule search: end -->"
)

// WriteRuleSearchMarkdown writes the rule-search table.
func WriteRuleSearchMarkdown(w io.Writer, r *RuleSearchResult) {
	fmt.Fprintf(w, "> %s\n\n", notice.Full)
	fmt.Fprintf(w, "Model: %s %s (model.onnx sha256 %s). Cases: the first %d pattern-positive phantoms of seed %d (%g mm), positive-class logit; z^B at the input layer and LRP-0 at the dense layer in every candidate. Run: %s, %.0f s wall.\n\n",
		r.Model.Name, r.Model.Version, r.Model.SHA256, r.CasesPerRule, r.Seed, r.VoxelMM, r.Started.Format(time.RFC3339), r.WallS)
	fmt.Fprintln(w, "| candidate | input share, median (quartiles) | lowest | mass accuracy, mean |")
	fmt.Fprintln(w, "|---|---|---|---|")
	for _, f := range r.Candidates {
		s := mapsSorted(f.InputShare)
		q := stats.Quantiles(s, []float64{0.25, 0.5, 0.75})
		m, _ := mapsMeanSD(f.MassAccuracy)
		fmt.Fprintf(w, "| %s | %.3f (%.3f–%.3f) | %.3f | %.4f |\n", f.Name, q[1], q[0], q[2], s[0], m)
	}
	fmt.Fprintf(w, "\n> %s\n", notice.Full)
}

// UpdateRuleSearchDocument replaces the rule-search block of the Markdown
// document at path.
func UpdateRuleSearchDocument(path string, r *RuleSearchResult) error {
	var b strings.Builder
	WriteRuleSearchMarkdown(&b, r)
	return replaceBlock(path, "block", RuleSearchBlockBegin, RuleSearchBlockEnd, b.String())
}
