package overlay

import (
	"context"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// The localisation measurement runs on few coarse phantoms by default; the
// issue's figure is `go test ./overlay -run TestLocalisation -overlay.cases 50
// -overlay.full -v` (1 mm phantoms, the product's settings for every method).
var (
	locCases = flag.Int("overlay.cases", 2, "pattern-positive phantoms for TestLocalisation")
	locFull  = flag.Bool("overlay.full", false, "TestLocalisation on 1 mm phantoms with the product's settings (m = 64, occlusion stride 4)")
)

// freshSeed is a phantom cohort seed used for no training, fitting or
// held-out evaluation of the demo model (train.DefaultRecipe uses 1,
// 20261202 and 20261203).
const freshSeed = 20261210

// demoModelFolder loads the embedded demo model folder (package assets), or the model folder
// folder BRIGHTFOLD_OVERLAY_MODEL names (to measure a candidate model).
func demoModelFolder(t testing.TB) *inference.ModelFolder {
	t.Helper()
	if d := os.Getenv("BRIGHTFOLD_OVERLAY_MODEL"); d != "" {
		b, err := inference.LoadModelFolder(d)
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	b, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// positiveCases returns the first n pattern-positive cases of the fresh
// cohort, rendered at voxel mm and prepared for the card.
func positiveCases(t testing.TB, card *inference.Card, n int, voxel float64) ([]*phantom.Case, []*preprocess.Prepared) {
	t.Helper()
	var cs []*phantom.Case
	var ps []*preprocess.Prepared
	for i := 0; i < n; i++ {
		c, pr := positiveCase(t, card, i, voxel)
		cs, ps = append(cs, c), append(ps, pr)
	}
	return cs, ps
}

// On the demo model: the LRP ledger adds up (a consistency check of the
// implementation, error below 1 %) for the epsilon rule and the composite;
// the composite's input share, the part of the logit that reaches the
// voxels, lies within 0.8 to 1.2 (its configuration was chosen for that on
// seed 20261211: 0.90 to 1.02 there); and integrated gradients at m = 64
// add up to f(x) − f(baseline) within 1 % (Sundararajan et al. 2017,
// completeness).
func TestDemoModelChecks(t *testing.T) {
	b := demoModelFolder(t)
	ex, err := New(b, nil)
	if err != nil {
		t.Fatal(err)
	}
	_, ps := positiveCases(t, b.Card, 2, 2)
	for i, pr := range ps {
		for _, rule := range []LRPRule{RuleEpsilon, RuleComposite} {
			m := compute(t, ex, LRP, pr.Tensor, Options{Rule: rule})
			c := m.Checks
			t.Logf("case %d, LRP %s: logit %.4g; input share %.3g, bias %.3g, stabiliser %.3g; consistency error %.2g",
				i, rule, c["target_logit"], c["input_share"], c["bias_share"], c["stabiliser_share"], c["consistency_error"])
			if !(c["consistency_error"] < 0.01) {
				t.Errorf("case %d, LRP %s: ledger consistency error %.3g", i, rule, c["consistency_error"])
			}
			if rule == RuleComposite && !(c["input_share"] > 0.8 && c["input_share"] < 1.2) {
				t.Errorf("case %d, LRP composite: input share %.3g, want 0.8 to 1.2", i, c["input_share"])
			}
		}
	}
	for _, base := range []Baseline{BaselineZero, BaselineBlur} {
		m := compute(t, ex, IntegratedGradients, ps[0].Tensor, Options{Steps: 64, Baseline: base})
		c := m.Checks
		t.Logf("IG, %s baseline, m = 64: f(x) %.4g, f(x') %.4g, sum %.4g, completeness error %.2g",
			base, c["target_logit"], c["baseline_logit"], c["relevance_sum"], c["completeness_error"])
		if !(c["completeness_error"] < 0.01) {
			t.Errorf("IG %s baseline: completeness error %.3g at m = 64", base, c["completeness_error"])
		}
	}
}

// randomised returns a copy of model folder b whose weighted layers' weights and
// biases, from the top (the last in execution order) down to and including
// the k-th from the top, are redrawn from a normal distribution with the
// original tensor's standard deviation (Adebayo et al. 2018, section 3.1,
// cascading randomisation).
func randomised(t testing.TB, b *inference.ModelFolder, k int, seed uint64) (*inference.ModelFolder, []string) {
	t.Helper()
	m, err := onnx.Decode(b.Model)
	if err != nil {
		t.Fatal(err)
	}
	var layers []*onnx.Node
	for _, n := range m.Graph.Nodes {
		if n.OpType == "Conv" || n.OpType == "Gemm" {
			layers = append(layers, n)
		}
	}
	r := rand.New(rand.NewPCG(seed, 9))
	var names []string
	for i := len(layers) - 1; i >= len(layers)-k && i >= 0; i-- {
		names = append(names, layers[i].Name)
		for _, p := range layers[i].Inputs[1:] {
			in := m.Graph.Initializer(p)
			if in == nil || in.Tensor == nil {
				continue
			}
			var s, ss float64
			for _, v := range in.Tensor.Data {
				s += float64(v)
				ss += float64(v) * float64(v)
			}
			n := float64(len(in.Tensor.Data))
			sd := math.Sqrt(math.Max(ss/n-sq(s/n), 0))
			for j := range in.Tensor.Data {
				in.Tensor.Data[j] = float32(r.NormFloat64() * sd)
			}
		}
	}
	data, err := m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	card := *b.Card
	card.ModelSHA256 = testCard(data, 1).ModelSHA256
	nb, err := inference.NewModelFolder(&card, data)
	if err != nil {
		t.Fatal(err)
	}
	return nb, names
}

// Model-parameter randomisation test (Adebayo et al. 2018, "Sanity checks
// for saliency maps", section 3.1): after the top layers are re-initialised
// at random, a map that explains the model must change. The figure is
// Spearman's rank correlation between the trained model's map and the
// randomised model's, over the head voxels, signed and of the magnitudes
// (their Figure 2 shows both); the trained model's map against itself is 1.
// The assertion: randomising the top two weighted layers (the dense layer
// and the last convolution) brings the signed correlation's magnitude below
// 0.5 for every method (randomising the dense layer alone may just flip the
// sign of the map). Measured on the trained demo model: about 0.02, with the
// magnitude maps still correlated near 0.5 (the input's structure).
func TestCascadingRandomisation(t *testing.T) {
	b := demoModelFolder(t)
	ex, err := New(b, nil)
	if err != nil {
		t.Fatal(err)
	}
	_, ps := positiveCases(t, b.Card, 1, 2)
	in := ps[0].Tensor
	head := in.HeadMask
	methods := []struct {
		m   Method
		opt Options
	}{{LRP, Options{}}, {LRP, Options{Rule: RuleEpsilon}}, {GradientInput, Options{}}, {IntegratedGradients, Options{Steps: 16}}}
	orig := make([]*Map, len(methods))
	for i, c := range methods {
		orig[i] = compute(t, ex, c.m, in, c.opt)
	}
	var rows []string
	for k := 1; k <= 5; k++ {
		rb, names := randomised(t, b, k, uint64(k))
		rex, err := New(rb, nil)
		if err != nil {
			t.Fatal(err)
		}
		row := fmt.Sprintf("%-28s", strings.Join(names, "+"))
		for i, c := range methods {
			m := compute(t, rex, c.m, in, c.opt)
			rs, ra := spearman(masked(orig[i].Values, head, false), masked(m.Values, head, false)),
				spearman(masked(orig[i].Values, head, true), masked(m.Values, head, true))
			row += fmt.Sprintf(" | %6.3f %6.3f", rs, ra)
			if k == 2 && !(math.Abs(rs) < 0.5) {
				t.Errorf("%s %s: rank correlation %.3f after randomising %v; want |ρ| below 0.5", c.m, c.opt.Rule, rs, names)
			}
		}
		rows = append(rows, row)
	}
	t.Logf("Spearman rank correlation with the trained model's map (signed | magnitude), head voxels:\n"+
		"%-28s | LRP composite | LRP epsilon   | grad × input  | IG (m = 16)\n%s", "randomised layers", strings.Join(rows, "\n"))
}

// masked returns the values at the mask's voxels (magnitudes when abs).
func masked(v []float32, mask []bool, abs bool) []float32 {
	var out []float32
	for i, x := range v {
		if mask[i] {
			if abs {
				x = float32(math.Abs(float64(x)))
			}
			out = append(out, x)
		}
	}
	return out
}

// Spearman's rank correlation agrees with scipy.stats.spearmanr (average
// ranks for ties), computed by Debian's python3-scipy during the test.
func TestSpearmanAgainstScipy(t *testing.T) {
	refcheck.PythonModule(t, "scipy")
	r := rand.New(rand.NewPCG(1, 2))
	a, b := make([]float32, 200), make([]float32, 200)
	var sa, sb []string
	for i := range a {
		a[i] = float32(math.Round(r.NormFloat64() * 3)) // ties
		b[i] = a[i] + float32(r.NormFloat64())
		sa, sb = append(sa, fmt.Sprint(a[i])), append(sb, fmt.Sprint(b[i]))
	}
	var want float64
	script := filepath.Join(t.TempDir(), "rho.py")
	writeFile(t, script, "import json, sys\nfrom scipy.stats import spearmanr\n"+
		"a = [float(x) for x in sys.argv[1].split(',')]\nb = [float(x) for x in sys.argv[2].split(',')]\n"+
		"print(json.dumps(spearmanr(a, b).correlation))\n")
	refcheck.RunPython(t, script, &want, strings.Join(sa, ","), strings.Join(sb, ","))
	if got := spearman(a, b); math.Abs(got-want) > 1e-9 {
		t.Errorf("spearman %.12f, scipy %.12f", got, want)
	}
}

// Relevance mass accuracy (Arras et al. 2022, "CLEVR-XAI", section 4.2):
// the share of the positive relevance that falls inside the ground-truth
// mask, on the scan grid (the maps carried back through the inverse
// preprocessing transform), for pattern-positive phantoms and the
// positive-class logit. The goal docs/evaluation.md states, asserted on
// every case: LRP (the product's composite) and integrated gradients (zero
// baseline) put at least 3 times chance inside the mask, chance being the
// mask's share of the scan's voxels. The cases are the first -overlay.cases
// pattern-positive phantoms of seed 20261210 (2 by default, rendered at
// 2 mm with m = 16 so that the test stays near a minute; -overlay.full uses
// 1 mm and m = 64). On the 50-case table of docs/evaluation.md every case
// passes for both methods (means 11.4 and 6.4 × chance), so a failure here
// means the maps stopped pointing at the pattern. As a control that the threshold
// discriminates, the LRP map with its values shuffled over the voxels must
// fall below it. `make evaluate-maps` makes the full table.
func TestLocalisation(t *testing.T) {
	b := demoModelFolder(t)
	ex, err := New(b, nil)
	if err != nil {
		t.Fatal(err)
	}
	voxel, steps := 2.0, 16
	if *locFull {
		voxel, steps = 1, 64
	}
	methods := []struct {
		name string
		m    Method
		opt  Options
	}{
		{"LRP composite", LRP, Options{}},
		{fmt.Sprintf("integrated gradients, zero baseline, m = %d", steps), IntegratedGradients, Options{Steps: steps}},
	}
	r := rand.New(rand.NewPCG(freshSeed, 1))
	for i := 0; i < *locCases; i++ {
		c, pr := positiveCase(t, b.Card, i, voxel)
		mask, nMask := make([]bool, len(c.Mask.Data)), 0
		for j, v := range c.Mask.Data {
			if mask[j] = v > 0; mask[j] {
				nMask++
			}
		}
		chance := float64(nMask) / float64(len(mask))
		for k, md := range methods {
			_, onScan := mapOnScan(t, ex, pr, md.m, md.opt)
			a, err := MassAccuracy(onScan.Data, mask)
			if err != nil {
				t.Fatalf("case %d, %s: %v", i, md.name, err)
			}
			t.Logf("case %d, %s: mass accuracy %.4f, %.1f × chance (%.4f)", i, md.name, a, a/chance, chance)
			if !(a >= 3*chance) {
				t.Errorf("case %d, %s: mass accuracy %.4f is below 3 × chance (%.4f)", i, md.name, a, 3*chance)
			}
			if k > 0 {
				continue
			}
			shuffled := append([]float32(nil), onScan.Data...)
			r.Shuffle(len(shuffled), func(x, y int) { shuffled[x], shuffled[y] = shuffled[y], shuffled[x] })
			if s, err := MassAccuracy(shuffled, mask); err != nil || s >= 3*chance {
				t.Errorf("case %d: the shuffled LRP map scores %.4f (%v), not below 3 × chance: the threshold does not discriminate", i, s, err)
			}
		}
	}
}

// mapOnScan computes a map and carries it onto the scan grid.
func mapOnScan(t testing.TB, ex *Explainer, pr *preprocess.Prepared, method Method, opt Options) (*Map, *volume.Volume) {
	t.Helper()
	m, err := ex.Compute(context.Background(), method, pr.Tensor, opt)
	if err != nil {
		t.Fatal(err)
	}
	onScan, err := m.ToScan(pr.Transform)
	if err != nil {
		t.Fatal(err)
	}
	return m, onScan
}

// positiveCase returns the i-th pattern-positive case of the fresh cohort,
// rendered at voxel mm and prepared for the card.
func positiveCase(t testing.TB, card *inference.Card, i int, voxel float64) (*phantom.Case, *preprocess.Prepared) {
	return positiveCaseOf(t, card, freshSeed, i, voxel)
}

// positiveCaseOf returns the i-th pattern-positive case of cohort seed.
func positiveCaseOf(t testing.TB, card *inference.Card, seed uint64, i int, voxel float64) (*phantom.Case, *preprocess.Prepared) {
	t.Helper()
	n := -1
	for idx := 0; ; idx++ {
		if phantom.NewSubject(seed, idx, phantom.ShiftNone).Label != 1 {
			continue
		}
		if n++; n < i {
			continue
		}
		c, err := phantom.Generate(seed, idx, phantom.Options{VoxelMM: voxel})
		if err != nil {
			t.Fatal(err)
		}
		pr, err := inference.PrepareForCard(c.Volume, card)
		if err != nil {
			t.Fatal(err)
		}
		return c, pr
	}
}
