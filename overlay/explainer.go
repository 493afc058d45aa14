package overlay

import (
	"context"
	"errors"
	"fmt"
	"math"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

// Explainer computes relevance maps for one model folder. It is made once per
// model folder (it compiles the model for the Go executor and plans the LRP rules)
// and is safe for concurrent use.
type Explainer struct {
	card    *inference.Card
	session *inference.Session // for occlusion; may be nil

	input, logits string
	exec          *exec.Executor // the model as given; nil when it cannot run
	execErr       error
	maxBatch      int // largest batch the executor may run (1 for a fixed batch)

	lrp    *lrpPlan
	lrpErr error
}

// New prepares an Explainer for model folder b. s is the model folder's ONNX Runtime
// session, which occlusion needs; it may be nil (occlusion is then
// unavailable). A model the Go executor cannot run is not an error: the
// executor methods are switched off with the reason (see Available).
func New(b *inference.ModelFolder, s *inference.Session) (*Explainer, error) {
	if b == nil || b.Card == nil {
		return nil, errors.New("overlay: no model folder")
	}
	m, err := onnx.Decode(b.Model)
	if err != nil {
		return nil, fmt.Errorf("overlay: decode %s: %w", inference.ModelFile, err)
	}
	e := &Explainer{card: b.Card, session: s, input: b.Card.Input.Name, logits: b.Card.Outputs.Logits, maxBatch: 1}
	e.exec, e.execErr = exec.NewExecutor(m)
	if e.execErr != nil {
		e.execErr = fmt.Errorf("the Go executor cannot run this model: %w", e.execErr)
		e.lrpErr = e.execErr
		return e, nil
	}
	if in := e.exec.Inputs(); len(in) == 1 && in[0].HasShape && len(in[0].Shape) > 0 {
		if d := in[0].Shape[0]; !d.Known || d.Param != "" {
			e.maxBatch = 64
		}
	}
	e.lrp, e.lrpErr = newLRPPlan(m, e.input, e.logits, zbBounds(b.Card.Preprocessing.Intensity))
	return e, nil
}

// Card is the model folder's card.
func (e *Explainer) Card() *inference.Card { return e.card }

// Available lists every method with whether it can run on this model folder and,
// when not, the reason (for example the operator the Go executor lacks).
func (e *Explainer) Available() []Availability {
	var out []Availability
	for _, m := range Methods() {
		a := Availability{Method: m, Available: true}
		if err := e.unavailable(m); err != nil {
			a.Available, a.Reason = false, err.Error()
		}
		out = append(out, a)
	}
	return out
}

// unavailable returns why m cannot run, or nil.
func (e *Explainer) unavailable(m Method) error {
	switch {
	case m == Occlusion && e.session == nil:
		return errors.New("occlusion needs an ONNX Runtime session for the model folder")
	case m == Occlusion:
		return nil
	case m == LRP && e.lrpErr != nil:
		return fmt.Errorf("LRP is off for this model: %w", e.lrpErr)
	case e.execErr != nil:
		return fmt.Errorf("%s is off for this model: %w", m.Title(), e.execErr)
	}
	return nil
}

// Map is a relevance map on the model grid.
type Map struct {
	Method Method
	// Rule describes the rule or settings, e.g. "composite: z^B at the
	// input, alpha1-beta0 in conv2, epsilon (0.25 RMS) in conv3, conv4, LRP-0 in fc".
	Rule string
	// Class is the class whose logit is explained; Target is that logit f(x).
	Class  string
	Target float64
	// Grid is the model grid's size along x, y, z; Values holds one value per
	// grid voxel in grid order (x fastest).
	Grid   [3]int
	Values []float32
	// Additive is true when the values are shares of the target that add up
	// (LRP, integrated gradients, gradient × input); occlusion values are
	// score drops averaged over the patches covering a voxel.
	Additive bool
	// Checks are the method's own checks by name (for example
	// "conservation_error"), as they go into the score JSON.
	Checks map[string]float64
	// Settings are the parameters used (steps, baseline, patch, ...).
	Settings map[string]any
	// Passes is the number of model evaluations (forward passes) used.
	Passes int
}

// Sum is the sum of the map's values.
func (m *Map) Sum() float64 {
	var s float64
	for _, v := range m.Values {
		s += float64(v)
	}
	return s
}

// Compute makes the map of method for the prepared model input t (one case,
// in the card's layout, as inference.PrepareForCard returns it). It stops
// early with ctx's error when ctx is cancelled.
func (e *Explainer) Compute(ctx context.Context, method Method, t *preprocess.Tensor, opt Options) (*Map, error) {
	if err := e.unavailable(method); err != nil {
		return nil, err
	}
	if t == nil || len(t.Data) == 0 {
		return nil, errors.New("overlay: no input tensor")
	}
	if t.Layout != e.card.Input.Layout {
		return nil, fmt.Errorf("overlay: tensor layout %s, the card says %s", t.Layout, e.card.Input.Layout)
	}
	tg, err := e.target(opt.Class, opt.Contrast)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	opt = opt.withDefaults()
	var m *Map
	switch method {
	case LRP:
		m, err = e.computeLRP(ctx, t, tg, opt)
	case GradientInput:
		m, err = e.computeGradInput(ctx, t, tg)
	case IntegratedGradients:
		m, err = e.computeIG(ctx, t, tg, opt)
	case Occlusion:
		m, err = e.computeOcclusion(ctx, t, tg, opt)
	default:
		return nil, fmt.Errorf("overlay: unknown method %q", method)
	}
	if err != nil {
		return nil, err
	}
	m.Method, m.Class, m.Grid = method, tg.class, t.Grid
	if m.Settings == nil {
		m.Settings = map[string]any{}
	}
	m.Settings["target"] = "logit"
	if tg.contrast {
		m.Settings["target"] = "logit minus the mean of the other logits"
	}
	return m, nil
}

// target is the explained score of each case: sign·logits[index], or with
// contrast, logits[index] minus the mean of the other logits.
type target struct {
	class    string
	index    int
	sign     float32
	contrast bool
}

// weight is the score's coefficient of logit j of n.
func (tg target) weight(j, n int) float32 {
	switch {
	case j == tg.index:
		return tg.sign
	case tg.contrast && n > 1:
		return -1 / float32(n-1)
	}
	return 0
}

// target resolves a class name ("" = the card's positive class) to a logit.
// For a one-logit sigmoid model the positive class's score is the logit z
// and the other class's is −z (the log-odds of that class).
func (e *Explainer) target(class string, contrast bool) (target, error) {
	c := e.card
	if class == "" {
		class = c.PositiveClass
	}
	k := -1
	for i, name := range c.Classes {
		if name == class {
			k = i
		}
	}
	if k < 0 {
		return target{}, fmt.Errorf("overlay: class %q is not one of the model's classes %v", class, c.Classes)
	}
	if c.Outputs.Activation == inference.ActivationSigmoid {
		sign := float32(1)
		if k != c.PositiveIndex() {
			sign = -1
		}
		return target{class: class, index: 0, sign: sign}, nil
	}
	return target{class: class, index: k, sign: 1, contrast: contrast}, nil
}

// seed returns the one-hot gradient seed of the target for logits of the
// given shape (batch first).
func (tg target) seed(logits *onnx.Tensor) (*onnx.Tensor, error) {
	n := 1
	if len(logits.Shape) > 0 {
		n = logits.Shape[0]
	}
	per := logits.Len() / max(n, 1)
	if tg.index >= per {
		return nil, fmt.Errorf("overlay: logits %v have no entry %d", logits.Shape, tg.index)
	}
	s := onnx.New(logits.Shape...)
	for b := 0; b < n; b++ {
		for j := 0; j < per; j++ {
			s.Data[b*per+j] = tg.weight(j, per)
		}
	}
	return s, nil
}

// scores returns the target score of each case of a logits tensor.
func (tg target) scores(logits *onnx.Tensor) []float64 {
	n := 1
	if len(logits.Shape) > 0 {
		n = logits.Shape[0]
	}
	per := logits.Len() / max(n, 1)
	out := make([]float64, n)
	for b := range out {
		out[b] = tg.score(logits.Data[b*per : (b+1)*per])
	}
	return out
}

// score is the target's score from one case's logits.
func (tg target) score(logits []float32) float64 {
	var s float64
	for j, z := range logits {
		s += float64(tg.weight(j, len(logits))) * float64(z)
	}
	return s
}

// zbBounds are the lowest and highest values the card's intensity
// normalisation can give (NaN when it does not bound them).
func zbBounds(in preprocess.Intensity) [2]float64 {
	switch {
	case in.Method == preprocess.NormPercentileMinMax:
		return [2]float64{0, 1}
	case in.Method == preprocess.NormZScoreHead && in.Clip > 0:
		return [2]float64{-in.Clip, in.Clip}
	}
	return [2]float64{math.NaN(), math.NaN()}
}

// graphInput wraps the case's values as the executor's input tensor.
func graphInput(t *preprocess.Tensor) *onnx.Tensor {
	shape := make([]int, len(t.Shape))
	for i, d := range t.Shape {
		shape[i] = int(d)
	}
	shape[0] = 1
	return onnx.FromData(t.Data, shape...)
}

// toGrid returns values laid out as t (the card's layout) in grid order.
func toGrid(t *preprocess.Tensor, values []float32) []float32 {
	c := *t
	c.Data = values
	out := c.GridValues()
	if &out[0] == &values[0] {
		out = append([]float32(nil), values...)
	}
	return out
}
