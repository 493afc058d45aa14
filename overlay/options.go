package overlay

// LRPRule selects the LRP rules.
type LRPRule string

// The LRP rule sets.
const (
	// RuleComposite (the default) applies the rules by layer position
	// (Montavon et al. 2019, section 10.1; Kohlbrenner et al. 2020): the
	// w² rule at the input layer (Options.Input; z^B and flat are
	// options), alpha1-beta0 in the convolutions above it, LRP-0 in the
	// dense layers, whose bias keeps its share of the logit.
	// Options.LowerConvs puts the epsilon rule (or, with Options.Gamma,
	// LRP-γ) in the upper convolutions instead. The configuration was
	// chosen among 15 on the first 50 pattern-positive 1 mm phantoms of the
	// tuning seed (study.RuleSearchSeed, 20261230) by a rule stated before
	// the run: input share near 1 (median within 0.95 to 1.05, 5th to 95th
	// percentile within 0.80 to 1.25), then the highest mass accuracy. There
	// the voxels carry a median 101.1 % of the logit (5th to 95th
	// percentile 97.0 to 104.1 %) at a mass accuracy of 0.0555, against
	// 0.0553 with z^B at the input layer (the default before; a difference
	// well inside the spread) and 0.0657 for the earlier default with
	// epsilon 0.25 in conv3–conv4, whose input share had a median of
	// 228 % and a 5th percentile of −262 %. No candidate near 1 localised
	// as well as that earlier default. docs/evaluation.md reports both
	// figures on other cases (make evaluate-maps).
	RuleComposite LRPRule = "composite"
	// RuleEpsilon applies the epsilon rule to every weighted layer.
	RuleEpsilon LRPRule = "epsilon"
	// RuleAlphaBeta applies z^B at the input layer and alpha1-beta0 to every
	// other weighted layer.
	RuleAlphaBeta LRPRule = "alpha1beta0"
)

// LRPBias is how the epsilon and LRP-0 layers of LRP treat a layer's bias
// (z^B and alpha1-beta0 leave it out by definition).
type LRPBias string

// The bias treatments.
const (
	// BiasAbsorb treats the bias as an input of its own (x_0 = 1, w_0j =
	// b_j; Bach et al. 2015, eq. 58 with the bias term): it keeps the share
	// b_j/z_j of R_j, which never reaches the voxels.
	BiasAbsorb LRPBias = "absorb"
	// BiasIgnore splits R_j among the inputs in proportion to x_i·w_ij
	// alone (z_j without the bias in the denominator), so that only the
	// stabiliser keeps relevance back from the voxels.
	BiasIgnore LRPBias = "ignore"
)

// LRPInput is the rule of the input layer (the weighted layer nearest the
// input) under the composite and alpha1-beta0 rule sets.
type LRPInput string

// The input-layer rules (Montavon et al. 2019, section 10.1 and Table 1;
// the flat rule is from Lapuschkin et al. 2019, from memory).
const (
	// InputZB is the z^B rule with the bounds of the card's intensity
	// normalisation.
	InputZB LRPInput = "zb"
	// InputW2 is the w² rule: R_i = Σ_j w_ij² R_j / Σ_i w_ij², blind to
	// the input's values.
	InputW2 LRPInput = "w2"
	// InputFlat is the flat rule: R_j spread evenly over its receptive
	// field.
	InputFlat LRPInput = "flat"
)

// Baseline is the integrated-gradients reference input.
type Baseline string

// The baselines.
const (
	// BaselineZero is the all-zero tensor (for z-score normalisation, the
	// head's mean intensity everywhere).
	BaselineZero Baseline = "zero"
	// BaselineBlur is the input blurred with a Gaussian of BlurSigmaMM
	// (Sturmfels et al. 2020 discuss blurred baselines).
	BaselineBlur Baseline = "blur"
)

// Options tune the methods; the zero value gives the defaults.
type Options struct {
	// Class is the class whose logit is explained; "" means the card's
	// positive class.
	Class string
	// Contrast explains the class's logit minus the mean of the other
	// logits (for two classes, the log-odds of a softmax model) instead of
	// the logit itself; a softmax ignores what all logits share, the
	// contrast does too.
	Contrast bool

	// Rule is the LRP rule set ("" means RuleComposite).
	Rule LRPRule
	// Epsilon is the epsilon rule's stabiliser as a multiple of the root
	// mean square of the layer's pre-activations (0 means 0.25, the value
	// Montavon et al. use for the middle layers).
	Epsilon float64

	// Bias is the epsilon and LRP-0 layers' bias treatment ("" means the
	// rule set's default, see RuleComposite).
	Bias LRPBias
	// LowerConvs is, for the composite, how many convolutions after the
	// first get alpha1-beta0; the convolutions above get the epsilon rule
	// (0 means all of them, a negative value none).
	LowerConvs int
	// Input is the input layer's rule ("" means InputW2 for the composite,
	// InputZB for alpha1-beta0).
	Input LRPInput
	// Gamma, when positive, gives the composite's convolutions above the
	// alpha1-beta0 ones LRP-γ with this γ instead of the epsilon rule.
	Gamma float64

	// Steps is the number of integrated-gradients steps m (0 means 64).
	Steps int
	// Tolerance, when positive, refines integrated gradients (tripling the
	// steps) while the completeness error exceeds it, up to MaxSteps (0
	// means 9 × Steps).
	Tolerance float64
	MaxSteps  int
	// Baseline is the integrated-gradients baseline ("" means zero).
	Baseline Baseline
	// BlurSigmaMM is the blurred baseline's Gaussian sigma in millimetres
	// (0 means 12).
	BlurSigmaMM float64

	// Patch is the occluding cube's side in model-grid voxels (0 means 8)
	// and Stride the step between patches (0 means Patch/2).
	Patch, Stride int
	// Fill is the value the occluded voxels get (0: the head's mean for
	// z-score normalisation).
	Fill float32

	// Batch is how many inputs one pass carries (integrated gradients and
	// occlusion; 0 means 8). A model with a fixed batch of 1 runs one at a time.
	Batch int
	// Progress, when set, is called with the passes done and the total
	// after each batch of the slow methods (integrated gradients, occlusion).
	Progress func(done, total int)
}

func (o Options) withDefaults() Options {
	if o.Rule == "" {
		o.Rule = RuleComposite
	}
	if o.Input == "" {
		o.Input = InputZB
		if o.Rule == RuleComposite {
			o.Input = InputW2
		}
	}
	if o.Bias == "" {
		o.Bias = BiasAbsorb
	}
	if o.Epsilon <= 0 {
		o.Epsilon = 0.25
	}
	if o.Steps <= 0 {
		o.Steps = 64
	}
	if o.MaxSteps <= 0 {
		o.MaxSteps = 9 * o.Steps
	}
	if o.Baseline == "" {
		o.Baseline = BaselineZero
	}
	if o.BlurSigmaMM <= 0 {
		o.BlurSigmaMM = 12
	}
	if o.Patch <= 0 {
		o.Patch = 8
	}
	if o.Stride <= 0 {
		o.Stride = max(1, o.Patch/2)
	}
	if o.Batch <= 0 {
		o.Batch = 8
	}
	return o
}

func (o Options) progress(done, total int) {
	if o.Progress != nil {
		o.Progress(done, total)
	}
}
