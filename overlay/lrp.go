package overlay

import (
	"context"
	"fmt"
	"math"
	"strings"

	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

// nodeKind is how LRP treats a node on the path from the input to the logits.
type nodeKind int

const (
	kindSkip         nodeKind = iota // not on the relevance path
	kindIdentity                     // R_in = R_out (ReLU, Dropout, Identity)
	kindRoute                        // R_in = VJP(R_out): winner-take-all pooling, shape operators
	kindProportional                 // R_i = x_i·VJP(R/z)_i: average pooling, sums, elementwise affine
	kindWeighted                     // a linear layer with constant weights: by rule
)

var nodeKinds = map[string]nodeKind{
	"Relu": kindIdentity, "LeakyRelu": kindIdentity, "Identity": kindIdentity, "Dropout": kindIdentity,
	"MaxPool": kindRoute, "GlobalMaxPool": kindRoute, "ReduceMax": kindRoute,
	"Flatten": kindRoute, "Reshape": kindRoute, "Squeeze": kindRoute, "Unsqueeze": kindRoute,
	"Transpose": kindRoute, "Concat": kindRoute,
	"AveragePool": kindProportional, "GlobalAveragePool": kindProportional, "ReduceMean": kindProportional,
	"ReduceSum": kindProportional, "Add": kindProportional, "Sub": kindProportional,
	"Mul": kindProportional, "Div": kindProportional, "BatchNormalization": kindProportional,
	"Conv": kindWeighted, "Gemm": kindWeighted, "MatMul": kindWeighted,
}

// ruleKind is the rule of a weighted layer.
type ruleKind int

const (
	ruleZB        ruleKind = iota // z^B (Montavon et al. 2017, 2019) for the input layer
	ruleAlphaBeta                 // alpha = 1, beta = 0 (Bach et al. 2015)
	ruleEpsilon                   // epsilon rule (Bach et al. 2015)
	ruleZero                      // LRP-0: epsilon rule with a vanishing epsilon
	ruleGamma                     // LRP-γ (Montavon et al. 2019, section 10.1)
	ruleW2                        // w² (Montavon et al. 2017) for the input layer
	ruleFlat                      // flat (Lapuschkin et al. 2019) for the input layer
)

func (r ruleKind) String() string {
	return [...]string{"z^B", "alpha1-beta0", "epsilon", "LRP-0", "gamma", "w²", "flat"}[r]
}

// lrpStep is the plan for one node of the folded model.
type lrpStep struct {
	kind   nodeKind
	layer  *linearLayer // kindWeighted
	conv   bool
	first  bool // the weighted layer nearest the input
	convAt int  // index among the convolutions (kindWeighted, conv)
}

// lrpPlan is the LRP walk over the BatchNormalization-folded model.
type lrpPlan struct {
	exec          *exec.Executor
	input, logits string
	steps         []*lrpStep // aligned with exec.Nodes()
	dep           map[string]bool
	bounds        [2]float64
	folded, convs int
}

// newLRPPlan folds the model's batch normalisation into its convolutions
// and checks that every node between the input and the logits has a rule.
func newLRPPlan(m *onnx.Model, input, logits string, bounds [2]float64) (*lrpPlan, error) {
	fm, folded, err := onnx.FoldBatchNorm(m)
	if err != nil {
		return nil, fmt.Errorf("fold batch normalisation: %w", err)
	}
	ex, err := exec.NewExecutor(fm)
	if err != nil {
		return nil, err
	}
	p := &lrpPlan{exec: ex, input: input, logits: logits, bounds: bounds, folded: folded, dep: map[string]bool{input: true}}
	nodes := ex.Nodes()
	for _, n := range nodes {
		if anyIn(n.Inputs, p.dep) {
			for _, o := range n.Outputs {
				p.dep[o] = true
			}
		}
	}
	if !p.dep[logits] {
		return nil, fmt.Errorf("the logits %q do not depend on the input %q", logits, input)
	}
	need := map[string]bool{logits: true}
	p.steps = make([]*lrpStep, len(nodes))
	for i := len(nodes) - 1; i >= 0; i-- {
		n := nodes[i]
		p.steps[i] = &lrpStep{}
		if !anyIn(n.Outputs, need) || !anyIn(n.Inputs, p.dep) {
			continue
		}
		st, err := p.classify(fm, n)
		if err != nil {
			return nil, err
		}
		p.steps[i] = st
		for _, in := range n.Inputs {
			if p.dep[in] {
				need[in] = true
			}
		}
	}
	p.numberLayers()
	return p, nil
}

func anyIn(names []string, set map[string]bool) bool {
	for _, s := range names {
		if s != "" && set[s] {
			return true
		}
	}
	return false
}

// classify finds the rule family of node n, or says why LRP has none.
func (p *lrpPlan) classify(m *onnx.Model, n *onnx.Node) (*lrpStep, error) {
	kind, ok := nodeKinds[n.OpType]
	if !ok {
		return nil, fmt.Errorf("no LRP rule for %s", n.Describe())
	}
	depIn := 0
	for _, in := range n.Inputs {
		if p.dep[in] {
			depIn++
		}
	}
	switch {
	case kind == kindWeighted:
		return p.weighted(m, n)
	case (n.OpType == "Mul" || n.OpType == "Div") && (depIn != 1 || !p.dep[n.Input(0)] && n.OpType == "Div"):
		return nil, fmt.Errorf("no LRP rule for %s: it multiplies or divides by an input-dependent value", n.Describe())
	case kind == kindIdentity && !p.dep[n.Input(0)]:
		return nil, fmt.Errorf("no LRP rule for %s: its first input does not carry relevance", n.Describe())
	}
	return &lrpStep{kind: kind}, nil
}

// weighted plans a linear layer: input 0 carries relevance, the weight
// (input 1) and the bias (input 2, optional) are constants.
func (p *lrpPlan) weighted(m *onnx.Model, n *onnx.Node) (*lrpStep, error) {
	if !p.dep[n.Input(0)] || p.dep[n.Input(1)] || p.dep[n.Input(2)] {
		return nil, fmt.Errorf("no LRP rule for %s: only a layer with constant weights on an input-dependent first operand has one", n.Describe())
	}
	w := constTensor(m, n.Input(1))
	if w == nil {
		return nil, fmt.Errorf("no LRP rule for %s: its weight is not a float constant", n.Describe())
	}
	var b *onnx.Tensor
	if n.OpType != "MatMul" && n.Input(2) != "" {
		if b = constTensor(m, n.Input(2)); b == nil {
			return nil, fmt.Errorf("no LRP rule for %s: its bias is not a float constant", n.Describe())
		}
	}
	l, err := newLinearLayer(n, p.exec.Opset(), w, b)
	if err != nil {
		return nil, err
	}
	return &lrpStep{kind: kindWeighted, layer: l, conv: n.OpType == "Conv"}, nil
}

// constTensor returns the float tensor of an initializer or a Constant
// node's value, or nil.
func constTensor(m *onnx.Model, name string) *onnx.Tensor {
	if in := m.Graph.Initializer(name); in != nil {
		if in.Tensor != nil && in.Tensor.IsFloat() {
			return in.Tensor
		}
		return nil
	}
	if n := m.Graph.Producer(name); n != nil && n.OpType == "Constant" {
		if a := n.Attr("value"); a != nil && a.T != nil && a.T.IsFloat() {
			return a.T
		}
	}
	return nil
}

// numberLayers marks the first weighted layer and numbers the convolutions
// in execution order.
func (p *lrpPlan) numberLayers() {
	first := true
	for _, st := range p.steps {
		if st.kind != kindWeighted {
			continue
		}
		st.first, first = first, false
		if st.conv {
			st.convAt = p.convs
			p.convs++
		}
	}
}

// rule is the rule a weighted layer gets under options opt: for the
// composite, the Options.Input rule at the input layer, alpha1-beta0 in the next
// lowerConvs(opt) convolutions, epsilon or LRP-γ in the convolutions above
// (none by default), LRP-0 in dense layers (Montavon et al. 2019, section 10.1:
// LRP-γ-like rules low, LRP-ε in the middle, LRP-0 at the top).
func (p *lrpPlan) rule(st *lrpStep, opt Options) ruleKind {
	switch {
	case opt.Rule == RuleEpsilon:
		return ruleEpsilon
	case st.first && opt.Input == InputW2:
		return ruleW2
	case st.first && opt.Input == InputFlat:
		return ruleFlat
	case st.first:
		return ruleZB
	case opt.Rule == RuleAlphaBeta:
		return ruleAlphaBeta
	case !st.conv:
		return ruleZero
	case st.convAt <= p.lowerConvs(opt):
		return ruleAlphaBeta
	case opt.Gamma > 0:
		return ruleGamma
	}
	return ruleEpsilon
}

// lowerConvs is how many convolutions after the first the composite gives
// alpha1-beta0: Options.LowerConvs, or by default all of them (the
// configuration chosen on the tuning seed, see RuleComposite).
func (p *lrpPlan) lowerConvs(opt Options) int {
	switch {
	case opt.LowerConvs < 0:
		return 0
	case opt.LowerConvs > 0:
		return opt.LowerConvs
	}
	return p.convs - 1
}

// describe lists the layers under each rule, e.g. "z^B: conv1; alpha1-beta0: conv2; ...".
func (p *lrpPlan) describe(opt Options) string {
	var order []ruleKind
	names := map[ruleKind][]string{}
	for i, st := range p.steps {
		if st.kind != kindWeighted {
			continue
		}
		r := p.rule(st, opt)
		if names[r] == nil {
			order = append(order, r)
		}
		n := p.exec.Nodes()[i]
		label := n.Name
		if label == "" {
			label = n.OpType + " -> " + n.Outputs[0]
		}
		names[r] = append(names[r], label)
	}
	var parts []string
	for _, r := range order {
		label := r.String()
		switch r {
		case ruleEpsilon:
			label = fmt.Sprintf("epsilon (%.2g × RMS)", opt.Epsilon)
		case ruleGamma:
			label = fmt.Sprintf("gamma (%.2g)", opt.Gamma)
		}
		parts = append(parts, label+": "+strings.Join(names[r], ", "))
	}
	return fmt.Sprintf("%s rule; %s; biases in epsilon and LRP-0 layers: %s; %d batch normalisation(s) folded",
		opt.Rule, strings.Join(parts, "; "), opt.Bias, p.folded)
}

// ledger sums the relevance the rules absorb rather than pass on.
type ledger struct {
	bias float64 // taken by biases and constant operands
	stab float64 // taken by the stabilisers (and dropped where a denominator is zero)
}

// lrpResult is one LRP pass.
type lrpResult struct {
	input  *onnx.Tensor
	target float64
	ledger ledger
}

// run propagates the target logit of x back to the input.
func (p *lrpPlan) run(ctx context.Context, x *onnx.Tensor, tg target, opt Options) (*lrpResult, error) {
	tr, err := p.exec.Forward(map[string]*onnx.Tensor{p.input: x})
	if err != nil {
		return nil, err
	}
	z := tr.Value(p.logits)
	seed, err := tg.seed(z)
	if err != nil {
		return nil, err
	}
	r0 := onnx.New(z.Shape...)
	for i, s := range seed.Data {
		r0.Data[i] = s * z.Data[i]
	}
	res := &lrpResult{target: tg.scores(z)[0]}
	rel := map[string]*onnx.Tensor{p.logits: r0}
	owned := map[string]bool{p.logits: true}
	nodes := p.exec.Nodes()
	for i := len(nodes) - 1; i >= 0; i-- {
		st, n := p.steps[i], nodes[i]
		r := rel[n.Outputs[0]]
		if st.kind == kindSkip || r == nil {
			continue
		}
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		delete(rel, n.Outputs[0])
		ins, outs := tr.NodeInputs(n), tr.NodeOutputs(n)
		parts, err := p.step(st, n, ins, outs, r, opt, &res.ledger)
		if err != nil {
			return nil, fmt.Errorf("LRP at %s: %w", n.Describe(), err)
		}
		for j, part := range parts {
			if part != nil && p.dep[n.Inputs[j]] {
				addRelevance(rel, owned, n.Inputs[j], part)
			}
		}
	}
	res.input = rel[p.input]
	if res.input == nil {
		res.input = onnx.New(x.Shape...)
	}
	return res, nil
}

// addRelevance adds part to rel[name], copying before the first in-place sum.
func addRelevance(rel map[string]*onnx.Tensor, owned map[string]bool, name string, part *onnx.Tensor) {
	cur := rel[name]
	if cur == nil {
		rel[name], owned[name] = part, false
		return
	}
	if !owned[name] {
		cur = cur.Clone()
		rel[name], owned[name] = cur, true
	}
	for i, v := range part.Data {
		cur.Data[i] += v
	}
}

// step returns the relevance of each input of n given the relevance r of
// its first output.
func (p *lrpPlan) step(st *lrpStep, n *onnx.Node, ins, outs []*onnx.Tensor, r *onnx.Tensor, opt Options, lg *ledger) ([]*onnx.Tensor, error) {
	parts := make([]*onnx.Tensor, len(ins))
	switch st.kind {
	case kindIdentity:
		parts[0] = r
	case kindRoute:
		g, err := p.exec.VJP(n, ins, outs, []*onnx.Tensor{r})
		if err != nil {
			return nil, err
		}
		copy(parts, g)
	case kindProportional:
		return p.proportional(n, ins, outs, r, lg)
	case kindWeighted:
		x, z := ins[0], outs[0]
		var err error
		switch rk := p.rule(st, opt); rk {
		case ruleZB:
			parts[0], err = p.zB(st.layer, x, z, r, lg)
		case ruleAlphaBeta:
			parts[0], err = alphaBeta(st.layer, x, r, lg)
		case ruleGamma:
			parts[0], err = gammaRule(st.layer, x, z, r, opt.Gamma, opt.Bias, lg)
		case ruleW2, ruleFlat:
			parts[0], err = valueBlind(st.layer, x, r, rk == ruleFlat, lg)
		default:
			eps := opt.Epsilon
			if rk == ruleZero {
				eps = tinyEps
			}
			parts[0], err = epsilonRule(st.layer, x, z, r, eps, opt.Bias, lg)
		}
		if err != nil {
			return nil, err
		}
	}
	return parts, nil
}

// tinyEps is the relative stabiliser of the rules that need none but must
// not divide by zero (LRP-0, z^B, alpha1-beta0, proportional splits).
const tinyEps = 1e-9

// stabilised returns s = R / (z + eps·sign z), with eps relative to the
// root mean square of z, and books Σ (R − s·z), the part the stabiliser
// takes, in the ledger. s is 0 where the denominator is 0 (R is dropped).
func stabilised(r, z *onnx.Tensor, rel float64, lg *ledger) *onnx.Tensor {
	var ss float64
	for _, v := range z.Data {
		ss += float64(v) * float64(v)
	}
	eps := float32(rel * math.Sqrt(ss/float64(max(len(z.Data), 1))))
	s := onnx.New(z.Shape...)
	var taken float64
	for i, zv := range z.Data {
		d := zv + eps
		if zv < 0 {
			d = zv - eps
		}
		rv := r.Data[i]
		if q := rv / d; d != 0 && q-q == 0 { // finite
			s.Data[i] = q
		}
		taken += float64(rv) - float64(s.Data[i])*float64(zv)
	}
	lg.stab += taken
	return s
}

// epsilonRule: R_i = x_i Σ_j w_ij R_j / (z_j + ε sign z_j) (Bach et al.
// 2015, eq. 58). With BiasAbsorb the bias takes Σ_j s_j b_j; with
// BiasIgnore z_j is taken without the bias, so the inputs share all of R_j
// but what the stabiliser keeps.
func epsilonRule(l *linearLayer, x, z, r *onnx.Tensor, eps float64, bt LRPBias, lg *ledger) (*onnx.Tensor, error) {
	bias, err := l.cached("bias", x.Shape)
	if err != nil {
		return nil, err
	}
	if bias != nil && bt == BiasIgnore {
		z = subTensors(z, bias)
		bias = nil
	}
	s := stabilised(r, z, eps, lg)
	c, err := l.vjpFull(x, z, s)
	if err != nil {
		return nil, err
	}
	if bias != nil {
		lg.bias += dot(s.Data, bias.Data)
	}
	return mulTensors(x, c), nil
}

// alphaBeta is the alpha1-beta0 rule (Bach et al. 2015, eq. 60 with α = 1,
// β = 0; the z⁺ rule of Montavon et al. 2017): R_i = Σ_j (x_i w_ij)⁺ R_j /
// Σ_i (x_i w_ij)⁺, bias left out.
func alphaBeta(l *linearLayer, x, r *onnx.Tensor, lg *ledger) (*onnx.Tensor, error) {
	xp, xn := onnx.New(x.Shape...), onnx.New(x.Shape...)
	negative := false
	for i, v := range x.Data {
		if v > 0 {
			xp.Data[i] = v
		} else if v < 0 {
			xn.Data[i], negative = v, true
		}
	}
	zp, err := forward(l.pos, xp)
	if err != nil {
		return nil, err
	}
	if negative {
		zn, err := forward(l.neg, xn)
		if err != nil {
			return nil, err
		}
		zp = addTensors(zp, zn)
	}
	s := stabilised(r, zp, tinyEps, lg)
	c, err := l.vjpPos(xp, zp, s)
	if err != nil {
		return nil, err
	}
	out := mulTensors(xp, c)
	if negative {
		cn, err := l.vjpNeg(xn, zp, s)
		if err != nil {
			return nil, err
		}
		out = addTensors(out, mulTensors(xn, cn))
	}
	return out, nil
}

// gammaRule is LRP-γ (Montavon et al. 2019, section 10.1): R_i = Σ_j
// (x_i w_ij + γ (x_i w_ij)⁺) R_j / Σ_i (…), between LRP-0 (γ = 0) and
// alpha1-beta0 (γ → ∞). With BiasAbsorb the bias enters as an input of its
// own, b_j + γ b_j⁺, and keeps its share; with BiasIgnore it is left out of
// the denominator.
func gammaRule(l *linearLayer, x, z, r *onnx.Tensor, gamma float64, bt LRPBias, lg *ledger) (*onnx.Tensor, error) {
	bias, err := l.cached("bias", x.Shape)
	if err != nil {
		return nil, err
	}
	xp, xn := onnx.New(x.Shape...), onnx.New(x.Shape...)
	for i, v := range x.Data {
		if v > 0 {
			xp.Data[i] = v
		} else if v < 0 {
			xn.Data[i] = v
		}
	}
	zp, err := forward(l.pos, xp)
	if err != nil {
		return nil, err
	}
	zn, err := forward(l.neg, xn)
	if err != nil {
		return nil, err
	}
	g := float32(gamma)
	d, kept := onnx.New(z.Shape...), onnx.New(z.Shape...)
	for i, v := range z.Data {
		pos := zp.Data[i] + zn.Data[i]
		if bias == nil {
			d.Data[i] = v + g*pos
			continue
		}
		b := bias.Data[i]
		d.Data[i] = v - b + g*pos
		if bt == BiasAbsorb {
			kept.Data[i] = b + g*max(b, 0)
			d.Data[i] += kept.Data[i]
		}
	}
	s := stabilised(r, d, tinyEps, lg)
	c, err := l.vjpFull(x, z, s)
	if err != nil {
		return nil, err
	}
	cp, cn, err := l.vjpPosNeg(x, d, s)
	if err != nil {
		return nil, err
	}
	out := onnx.New(x.Shape...)
	for i, v := range x.Data {
		out.Data[i] = v*c.Data[i] + g*(xp.Data[i]*cp.Data[i]+xn.Data[i]*cn.Data[i])
	}
	lg.bias += dot(s.Data, kept.Data)
	return out, nil
}

// valueBlind is the w² rule (Montavon et al. 2017, section 4; Montavon
// et al. 2019, Table 1): R_i = Σ_j w_ij² R_j / Σ_i w_ij², or with flat the
// flat rule (every w_ij² replaced by 1; Lapuschkin et al. 2019). Neither
// looks at the input's values; the sums run over the real inputs only (a
// zero-padded border has fewer).
func valueBlind(l *linearLayer, x, r *onnx.Tensor, flat bool, lg *ledger) (*onnx.Tensor, error) {
	kind := "ones²"
	if flat {
		kind = "ones·1"
	}
	den, err := l.cached(kind, x.Shape)
	if err != nil {
		return nil, err
	}
	e, w, err := l.blind(flat)
	if err != nil {
		return nil, err
	}
	s := stabilised(r, den, tinyEps, lg)
	return vjp(e, w, nil, onnx.New(x.Shape...), den, s)
}

// zB is the z^B rule for an input layer whose inputs lie in [L, H]
// (Montavon et al. 2017, "Explaining nonlinear classification decisions
// with deep Taylor decomposition"; Montavon et al. 2019, eq. in section
// 10.1): R_i = Σ_j (x_i w_ij − L w⁺_ij − H w⁻_ij) R_j / Σ_i (…), which is
// (x_i − L)·[W⁺ᵀs]_i + (x_i − H)·[W⁻ᵀs]_i.
func (p *lrpPlan) zB(l *linearLayer, x, z, r *onnx.Tensor, lg *ledger) (*onnx.Tensor, error) {
	lo, hi := p.bounds[0], p.bounds[1]
	for _, v := range x.Data {
		if !(float64(v) >= lo) {
			lo = float64(v)
		}
		if !(float64(v) <= hi) {
			hi = float64(v)
		}
	}
	bias, err := l.cached("bias", x.Shape)
	if err != nil {
		return nil, err
	}
	onesPos, err := l.cached("ones+", x.Shape)
	if err != nil {
		return nil, err
	}
	onesNeg, err := l.cached("ones-", x.Shape)
	if err != nil {
		return nil, err
	}
	zb := onnx.New(z.Shape...)
	for i, v := range z.Data {
		lin := float64(v)
		if bias != nil {
			lin -= float64(bias.Data[i])
		}
		zb.Data[i] = float32(lin - lo*float64(onesPos.Data[i]) - hi*float64(onesNeg.Data[i]))
	}
	s := stabilised(r, zb, tinyEps, lg)
	cp, cn, err := l.vjpPosNeg(x, zb, s)
	if err != nil {
		return nil, err
	}
	out := onnx.New(x.Shape...)
	for i, v := range x.Data {
		out.Data[i] = float32((float64(v)-lo)*float64(cp.Data[i]) + (float64(v)-hi)*float64(cn.Data[i]))
	}
	return out, nil
}

// proportional splits R among the input-dependent operands in proportion to
// their contributions, R_i = x_i·VJP(R/z)_i: average pooling and means split
// in proportion to the inputs, a sum in proportion to its terms. Constant
// operands (a bias added, a batch normalisation's shift) take the rest.
func (p *lrpPlan) proportional(n *onnx.Node, ins, outs []*onnx.Tensor, r *onnx.Tensor, lg *ledger) ([]*onnx.Tensor, error) {
	z := outs[0]
	s := stabilised(r, z, tinyEps, lg)
	g, err := p.exec.VJP(n, ins, outs, []*onnx.Tensor{s})
	if err != nil {
		return nil, err
	}
	parts := make([]*onnx.Tensor, len(ins))
	passed, hasConst := 0.0, false
	for j, in := range ins {
		if in == nil || !in.IsFloat() {
			continue
		}
		if !p.dep[n.Inputs[j]] {
			hasConst = true
			continue
		}
		if j >= len(g) || g[j] == nil {
			continue
		}
		parts[j] = mulTensors(in, g[j])
		passed += sum(parts[j].Data)
	}
	if hasConst {
		lg.bias += dot(s.Data, z.Data) - passed
	}
	return parts, nil
}

func mulTensors(a, b *onnx.Tensor) *onnx.Tensor {
	out := onnx.New(a.Shape...)
	for i, v := range a.Data {
		out.Data[i] = v * b.Data[i]
	}
	return out
}

func subTensors(a, b *onnx.Tensor) *onnx.Tensor {
	out := onnx.New(a.Shape...)
	for i, v := range a.Data {
		out.Data[i] = v - b.Data[i]
	}
	return out
}

func addTensors(a, b *onnx.Tensor) *onnx.Tensor {
	out := onnx.New(a.Shape...)
	for i, v := range a.Data {
		out.Data[i] = v + b.Data[i]
	}
	return out
}

func dot(a, b []float32) float64 {
	var s float64
	for i, v := range a {
		s += float64(v) * float64(b[i])
	}
	return s
}

func sum(a []float32) float64 {
	var s float64
	for _, v := range a {
		s += float64(v)
	}
	return s
}
