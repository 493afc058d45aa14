// Package inference loads model folders (model.onnx plus card.json), runs them
// on the CPU through ONNX Runtime, prepares scans exactly as a card states
// (with the sub-package preprocess), and turns logits into calibrated
// probabilities. The out-of-distribution checks live in the sub-package
// fitcheck. Research use only.
package inference

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"regexp"
	"strings"

	"brightfold/inference/preprocess"
)

// SchemaVersion names the card schema this package reads and writes. A card
// with any other "schema" value is refused. docs/card.md documents it.
const SchemaVersion = "brightfold-card/1"

// Card describes one model: what it does, what it expects, how its inputs are
// prepared, how its outputs are read and calibrated, and the reference the
// fit checks compare a scan with. JSON field names are the schema's.
type Card struct {
	Schema        string          `json:"schema"`
	Name          string          `json:"name"`
	Version       string          `json:"version"`
	Task          string          `json:"task"`
	Classes       []string        `json:"classes"`
	PositiveClass string          `json:"positive_class"`
	Input         InputSpec       `json:"input"`
	Preprocessing preprocess.Spec `json:"preprocessing"`
	Outputs       OutputSpec      `json:"outputs"`
	Calibration   Calibration     `json:"calibration"`
	OOD           OODReference    `json:"ood"`
	Validation    []Metric        `json:"validation"`
	ModelSHA256   string          `json:"model_sha256"`
	IntendedUse   string          `json:"intended_use"`
	TrainingData  string          `json:"training_data"`
	Cautions      []string        `json:"cautions"`
	// Provenance says how `brightfold model make` or `model recalibrate`
	// made the card (absent on cards written by hand or by the demo recipe).
	Provenance *Provenance `json:"provenance,omitempty"`

	alignment *alignmentFiles // template and mask of preprocessing.alignment (alignment.go)
}

// Provenance records how a card was made from a group's cases
// (makecard.go).
type Provenance struct {
	MadeBy string `json:"made_by"` // the command
	Cases  string `json:"cases"`   // the manifest or BIDS folder's name (no path)
	Seed   uint64 `json:"seed"`
	Split  string `json:"split"` // the rule that assigned cases to calibration and validation
	// Counts holds the cases used, by split and class.
	Counts  map[string]map[string]int `json:"counts"`
	Skipped int                       `json:"skipped"` // scans that could not be prepared (--skip-unreadable)
	Graph   []string                  `json:"graph"`   // what was found in the ONNX graph, and how
	// Parent, Site and Recalibration are set by `model recalibrate`.
	Parent        *ParentModel   `json:"parent,omitempty"`
	Recalibration *Recalibration `json:"recalibration,omitempty"`
}

// ParentModel names the model folder a recalibrated card came from.
type ParentModel struct {
	Name        string `json:"name"`
	Version     string `json:"version"`
	CardSHA256  string `json:"card_sha256"`  // sha256 of the parent's card.json bytes
	ModelSHA256 string `json:"model_sha256"` // the parent's model.onnx (unchanged)
}

// Recalibration is the record of `model recalibrate`: the closed test's
// likelihood-ratio tests, the chosen method and the figures before and
// after on the site's cases (in-sample for "after").
type Recalibration struct {
	Site    string            `json:"site"`
	N       int               `json:"n"`
	Counts  map[string]int    `json:"counts"`
	Method  string            `json:"method"`
	Tests   []RecalibrationLR `json:"tests"`
	Before  []Metric          `json:"before"`
	After   []Metric          `json:"after"`
	HowMade string            `json:"how"`
}

// RecalibrationLR is one likelihood-ratio test of the closed procedure.
type RecalibrationLR struct {
	Name      string  `json:"name"`
	Statistic float64 `json:"statistic"`
	DF        int     `json:"df"`
	P         float64 `json:"p"`
}

// InputSpec is the model's one input tensor. Shape has five entries in the
// layout's order; -1 marks a dynamic dimension (only the batch may be dynamic).
type InputSpec struct {
	Name     string  `json:"name"`
	Shape    []int64 `json:"shape"`
	Layout   string  `json:"layout"`
	DataType string  `json:"data_type"` // "float32"
}

// Output activations.
const (
	ActivationSoftmax = "softmax" // one logit per class
	ActivationSigmoid = "sigmoid" // one logit, for the positive class of two
)

// OutputSpec names the output tensors: logits [N, K] and the penultimate
// features [N, F] (an intermediate tensor is exposed by adding it to the
// graph's outputs when the session is made).
type OutputSpec struct {
	Logits     string `json:"logits"`
	Features   string `json:"features"`
	Activation string `json:"activation"`
}

// Calibration is temperature scaling (Guo et al. 2017): probabilities are
// the activation of logits / Temperature.
type Calibration struct {
	Temperature float64 `json:"temperature"`
	Method      string  `json:"method"`
	FittedOn    string  `json:"fitted_on"`
	// FittedTemperature is the T that minimised the NLL of the fitting
	// cases; Temperature is it, or 1 when it did not lower the NLL of
	// held-out cases (0 in cards written before the check existed).
	FittedTemperature float64 `json:"fitted_temperature,omitempty"`
	// Decision says in a sentence which temperature is applied and why.
	Decision string `json:"decision,omitempty"`
	// Logistic, when set (two classes only, by `model recalibrate`), maps
	// the temperature-scaled positive-class logit ℓ to a + b·ℓ.
	Logistic *LogisticRecalibration `json:"logistic,omitempty"`
}

// LogisticRecalibration is logistic recalibration of the positive-class
// logit (Cox 1958): new logit = Intercept + Slope · logit.
type LogisticRecalibration struct {
	Intercept float64 `json:"intercept"`
	Slope     float64 `json:"slope"`
	FittedOn  string  `json:"fitted_on"`
}

// Range is a closed interval [Min, Max].
type Range struct {
	Min float64 `json:"min"`
	Max float64 `json:"max"`
}

// Contains reports whether Min ≤ x ≤ Max.
func (r Range) Contains(x float64) bool { return x >= r.Min && x <= r.Max }

// OODReference is what the fit checks compare a scan with.
type OODReference struct {
	Envelope   Envelope           `json:"envelope"`
	Intensity  IntensityReference `json:"intensity"`
	Features   FeatureReference   `json:"features"`
	Thresholds Thresholds         `json:"thresholds"`
}

// Envelope is the acquisition envelope of the training scans, read from
// headers and from the head mask.
type Envelope struct {
	Modalities       []string   `json:"modalities"`         // e.g. ["MR"]; an empty header modality is allowed
	SpacingMm        Range      `json:"spacing_mm"`         // every voxel spacing
	SliceThicknessMm Range      `json:"slice_thickness_mm"` // largest spacing (or the header's thickness when larger)
	MinFOVMm         [3]float64 `json:"min_fov_mm"`         // extent along R, A, S
	MinSlices        int        `json:"min_slices"`         // fewest voxels along any axis
	MaxAnisotropy    float64    `json:"max_anisotropy"`     // largest spacing / smallest spacing
	MaxObliquityDeg  float64    `json:"max_obliquity_deg"`  // voxel axes vs the closest world axes
	HeadVolumeMl     Range      `json:"head_volume_ml"`
	HeadAPOverLR     Range      `json:"head_ap_over_lr"` // head extent ratio, anterior-posterior / left-right
	HeadSIOverAP     Range      `json:"head_si_over_ap"` // superior-inferior / anterior-posterior
	NoiseRatio       Range      `json:"noise_ratio"`     // neighbour-difference noise / head interquartile range
	// HeadSkewSI bounds the skewness of the head mask along S (an
	// upside-down head flips its sign). Optional: cards fitted before it
	// existed leave it out and skip the check.
	HeadSkewSI *Range `json:"head_skew_si,omitempty"`
	FittedOn   string `json:"fitted_on"`
}

// IntensityReference is the reference profile of normalised head
// intensities, and the Hounsfield-unit signature limits.
type IntensityReference struct {
	Levels          []float64 `json:"levels"`    // quantile levels in (0, 1), increasing
	Quantiles       []float64 `json:"quantiles"` // reference quantiles at Levels
	FittedOn        string    `json:"fitted_on"`
	HUAirFraction   float64   `json:"hu_air_fraction"`   // flag CT when this fraction of voxels lies within 100 of −1000 ...
	HUBoneFraction  float64   `json:"hu_bone_fraction"`  // ... and this fraction of the rest lies in [+300, +3000]
	HUSignatureRule string    `json:"hu_signature_rule"` // how the two limits were chosen
}

// FeatureReference holds the class means of the penultimate features and
// the shared precision matrix (inverse covariance) for the Mahalanobis score
// of Lee et al. 2018.
type FeatureReference struct {
	Dim        int         `json:"dim"`
	ClassMeans [][]float64 `json:"class_means"` // one row per class, in Classes order
	Precision  [][]float64 `json:"precision"`   // Dim × Dim
	Shrinkage  float64     `json:"shrinkage"`   // Ledoit-Wolf shrinkage intensity used
	Method     string      `json:"method"`
	FittedOn   string      `json:"fitted_on"`
}

// Threshold is the limit of one score. Direction "max" fails a value above
// Value; "min" fails a value below it. Retention is the fraction of the
// fitting cases that pass.
type Threshold struct {
	Value     float64 `json:"value"`
	Direction string  `json:"direction"`
	Retention float64 `json:"retention"`
	Required  bool    `json:"required"`
	FittedOn  string  `json:"fitted_on"`
}

// Fails reports whether x is outside the threshold (NaN always fails).
func (t Threshold) Fails(x float64) bool {
	if math.IsNaN(x) {
		return true
	}
	if t.Direction == "min" {
		return x < t.Value
	}
	return x > t.Value
}

// Thresholds are the model-level and intensity-profile limits.
type Thresholds struct {
	MSP         Threshold `json:"msp"`         // maximum softmax probability (Hendrycks & Gimpel 2017), direction min
	Energy      Threshold `json:"energy"`      // energy score (Liu et al. 2020), direction max
	Mahalanobis Threshold `json:"mahalanobis"` // Lee et al. 2018, direction max
	Wasserstein Threshold `json:"wasserstein"` // intensity profile distance, direction max
}

// Metric is one validation figure.
type Metric struct {
	Name  string  `json:"name"`
	Value float64 `json:"value"`
	N     int     `json:"n"`
	Split string  `json:"split"`
	How   string  `json:"how"`
	// CI95 is the 95 % interval when one was computed; Interval says how.
	CI95     []float64 `json:"ci95,omitempty"`
	Interval string    `json:"interval,omitempty"`
	Site     string    `json:"site,omitempty"`    // the site the figure is restricted to
	Warning  string    `json:"warning,omitempty"` // e.g. fewer than 20 cases of a class
}

// ParseCard decodes a card, refusing unknown fields and trailing data, then validates it.
func ParseCard(data []byte) (*Card, error) {
	var probe struct {
		Schema *string `json:"schema"`
	}
	if err := json.Unmarshal(data, &probe); err != nil {
		return nil, fmt.Errorf("card.json: %w", err)
	}
	if probe.Schema == nil {
		return nil, fmt.Errorf("card.json: schema: missing (want %q)", SchemaVersion)
	}
	if *probe.Schema != SchemaVersion {
		return nil, fmt.Errorf("card.json: schema: unknown version %q (this build reads %q)", *probe.Schema, SchemaVersion)
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var c Card
	if err := dec.Decode(&c); err != nil {
		return nil, fmt.Errorf("card.json: %w", err)
	}
	if dec.More() {
		return nil, fmt.Errorf("card.json: trailing data after the card")
	}
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("card.json: %w", err)
	}
	return &c, nil
}

// MarshalCard encodes a card as indented JSON.
func MarshalCard(c *Card) ([]byte, error) {
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// fieldError names the field path at fault.
func fieldError(path, format string, args ...any) error {
	return fmt.Errorf("%s: %s", path, fmt.Sprintf(format, args...))
}

var sha256Hex = regexp.MustCompile(`^[0-9a-f]{64}$`)

// Validate checks the card's own consistency (not yet against the graph).
func (c *Card) Validate() error {
	if c.Schema != SchemaVersion {
		return fieldError("schema", "unknown version %q (this build reads %q)", c.Schema, SchemaVersion)
	}
	for _, f := range []struct{ path, v string }{
		{"name", c.Name}, {"version", c.Version}, {"task", c.Task},
		{"intended_use", c.IntendedUse}, {"training_data", c.TrainingData},
	} {
		if strings.TrimSpace(f.v) == "" {
			return fieldError(f.path, "missing")
		}
	}
	if !sha256Hex.MatchString(c.ModelSHA256) {
		return fieldError("model_sha256", "want 64 lower-case hex digits, got %q", c.ModelSHA256)
	}
	if err := c.validateClasses(); err != nil {
		return err
	}
	if err := c.Preprocessing.Validate(); err != nil {
		return err
	}
	if err := c.validateInput(); err != nil {
		return err
	}
	if err := c.validateOutputs(); err != nil {
		return err
	}
	if t := c.Calibration.Temperature; !(t > 0) || math.IsInf(t, 0) || t > 1e3 {
		return fieldError("calibration.temperature", "must be a positive finite number up to 1000, got %v", t)
	}
	if l := c.Calibration.Logistic; l != nil && (len(c.Classes) != 2 || !finite(l.Intercept) || !finite(l.Slope) || math.Abs(l.Intercept) > 1e3 || math.Abs(l.Slope) > 1e3) {
		return fieldError("calibration.logistic", "needs exactly 2 classes and finite intercept and slope up to 1000 in size")
	}
	return c.OOD.validate(len(c.Classes))
}

func (c *Card) validateClasses() error {
	if len(c.Classes) < 2 || len(c.Classes) > 1000 {
		return fieldError("classes", "want 2 to 1000 classes, got %d", len(c.Classes))
	}
	seen := map[string]bool{}
	for i, n := range c.Classes {
		if n == "" || seen[n] {
			return fieldError(fmt.Sprintf("classes[%d]", i), "empty or repeated class %q", n)
		}
		seen[n] = true
	}
	if c.PositiveIndex() < 0 {
		return fieldError("positive_class", "%q is not one of classes %v", c.PositiveClass, c.Classes)
	}
	return nil
}

// PositiveIndex is the index of the positive class in Classes, or -1.
func (c *Card) PositiveIndex() int {
	for i, n := range c.Classes {
		if n == c.PositiveClass {
			return i
		}
	}
	return -1
}

func (c *Card) validateInput() error {
	in := c.Input
	if in.Name == "" {
		return fieldError("input.name", "missing")
	}
	if in.DataType != "float32" {
		return fieldError("input.data_type", "only float32 is supported, got %q", in.DataType)
	}
	if in.Layout != preprocess.LayoutNCDHW && in.Layout != preprocess.LayoutNCXYZ {
		return fieldError("input.layout", "want %q or %q, got %q", preprocess.LayoutNCDHW, preprocess.LayoutNCXYZ, in.Layout)
	}
	if len(in.Shape) != 5 {
		return fieldError("input.shape", "want 5 dimensions (N, C and three spatial), got %d", len(in.Shape))
	}
	if n := in.Shape[0]; n != -1 && n < 1 {
		return fieldError("input.shape[0]", "batch must be -1 (dynamic) or positive, got %d", n)
	}
	if in.Shape[1] != 1 {
		return fieldError("input.shape[1]", "only one channel is supported, got %d", in.Shape[1])
	}
	want := c.Preprocessing.Shape
	spatial := [3]int64{int64(want[2]), int64(want[1]), int64(want[0])}
	if in.Layout == preprocess.LayoutNCXYZ {
		spatial = [3]int64{int64(want[0]), int64(want[1]), int64(want[2])}
	}
	for i, s := range spatial {
		if in.Shape[2+i] != s {
			return fieldError(fmt.Sprintf("input.shape[%d]", 2+i),
				"%d disagrees with preprocessing.shape %v in layout %s", in.Shape[2+i], want, in.Layout)
		}
	}
	return nil
}

func (c *Card) validateOutputs() error {
	o := c.Outputs
	if o.Logits == "" {
		return fieldError("outputs.logits", "missing")
	}
	if o.Features == "" {
		return fieldError("outputs.features", "missing")
	}
	if o.Features == o.Logits {
		return fieldError("outputs.features", "same tensor as outputs.logits")
	}
	switch o.Activation {
	case ActivationSoftmax:
	case ActivationSigmoid:
		if len(c.Classes) != 2 {
			return fieldError("outputs.activation", "sigmoid needs exactly 2 classes, got %d", len(c.Classes))
		}
	default:
		return fieldError("outputs.activation", "want %q or %q, got %q", ActivationSoftmax, ActivationSigmoid, o.Activation)
	}
	return nil
}

// NumLogits is the logit count the card implies: one per class for softmax,
// one for sigmoid.
func (c *Card) NumLogits() int {
	if c.Outputs.Activation == ActivationSigmoid {
		return 1
	}
	return len(c.Classes)
}

func (o OODReference) validate(classes int) error {
	e := o.Envelope
	for _, r := range []struct {
		path string
		r    Range
	}{
		{"ood.envelope.spacing_mm", e.SpacingMm}, {"ood.envelope.slice_thickness_mm", e.SliceThicknessMm},
		{"ood.envelope.head_volume_ml", e.HeadVolumeMl}, {"ood.envelope.head_ap_over_lr", e.HeadAPOverLR},
		{"ood.envelope.head_si_over_ap", e.HeadSIOverAP}, {"ood.envelope.noise_ratio", e.NoiseRatio},
	} {
		if !finite(r.r.Min) || !finite(r.r.Max) || r.r.Min > r.r.Max {
			return fieldError(r.path, "want finite min ≤ max, got [%v, %v]", r.r.Min, r.r.Max)
		}
	}
	for _, r := range []struct {
		path string
		r    *Range
	}{{"ood.envelope.head_skew_si", e.HeadSkewSI}} {
		if r.r != nil && (!finite(r.r.Min) || !finite(r.r.Max) || r.r.Min > r.r.Max) {
			return fieldError(r.path, "want finite min ≤ max, got [%v, %v]", r.r.Min, r.r.Max)
		}
	}
	if len(e.Modalities) == 0 {
		return fieldError("ood.envelope.modalities", "missing")
	}
	in := o.Intensity
	if len(in.Levels) < 2 || len(in.Levels) != len(in.Quantiles) || len(in.Levels) > 10000 {
		return fieldError("ood.intensity", "levels (%d) and quantiles (%d) must have the same length, 2 to 10000", len(in.Levels), len(in.Quantiles))
	}
	for i := range in.Levels {
		if !(in.Levels[i] > 0 && in.Levels[i] < 1) || (i > 0 && in.Levels[i] <= in.Levels[i-1]) {
			return fieldError(fmt.Sprintf("ood.intensity.levels[%d]", i), "levels must increase strictly inside (0, 1)")
		}
		if !finite(in.Quantiles[i]) || (i > 0 && in.Quantiles[i] < in.Quantiles[i-1]) {
			return fieldError(fmt.Sprintf("ood.intensity.quantiles[%d]", i), "quantiles must be finite and non-decreasing")
		}
	}
	if err := o.Features.validate(classes); err != nil {
		return err
	}
	for _, t := range []struct {
		path string
		t    Threshold
		dir  string
	}{
		{"ood.thresholds.msp", o.Thresholds.MSP, "min"}, {"ood.thresholds.energy", o.Thresholds.Energy, "max"},
		{"ood.thresholds.mahalanobis", o.Thresholds.Mahalanobis, "max"}, {"ood.thresholds.wasserstein", o.Thresholds.Wasserstein, "max"},
	} {
		if t.t.Direction != t.dir {
			return fieldError(t.path+".direction", "want %q, got %q", t.dir, t.t.Direction)
		}
		if !finite(t.t.Value) {
			return fieldError(t.path+".value", "not finite")
		}
	}
	return nil
}

func (f FeatureReference) validate(classes int) error {
	if f.Dim < 1 || f.Dim > 4096 {
		return fieldError("ood.features.dim", "want 1 to 4096, got %d", f.Dim)
	}
	if len(f.ClassMeans) != classes {
		return fieldError("ood.features.class_means", "want %d rows (one per class), got %d", classes, len(f.ClassMeans))
	}
	for i, m := range f.ClassMeans {
		if len(m) != f.Dim || !allFinite(m) {
			return fieldError(fmt.Sprintf("ood.features.class_means[%d]", i), "want %d finite values", f.Dim)
		}
	}
	if len(f.Precision) != f.Dim {
		return fieldError("ood.features.precision", "want %d×%d, got %d rows", f.Dim, f.Dim, len(f.Precision))
	}
	for i, r := range f.Precision {
		if len(r) != f.Dim || !allFinite(r) {
			return fieldError(fmt.Sprintf("ood.features.precision[%d]", i), "want %d finite values", f.Dim)
		}
		for j := 0; j < i; j++ {
			if d := math.Abs(r[j] - f.Precision[j][i]); d > 1e-6*(1+math.Abs(r[j])) {
				return fieldError(fmt.Sprintf("ood.features.precision[%d][%d]", i, j), "matrix is not symmetric")
			}
		}
	}
	return nil
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

func allFinite(xs []float64) bool {
	for _, x := range xs {
		if !finite(x) {
			return false
		}
	}
	return true
}
