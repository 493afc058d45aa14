package preprocess

import (
	"fmt"
	"math"
)

// Layouts of the model input tensor. Grid axes x, y, z are the model grid's
// R, A, S axes (see Preprocessing).
const (
	// LayoutNCDHW is [N, C, z, y, x]: x varies fastest, the NIfTI memory order.
	LayoutNCDHW = "NCDHW"
	// LayoutNCXYZ is [N, C, x, y, z]: z varies fastest, the order of a C-order
	// array indexed [x, y, z].
	LayoutNCXYZ = "NCXYZ"
)

// Spec states how a scan becomes the model input. The model grid has
// axes along the scan's own voxel axes permuted and flipped to the closest RAS
// orientation (no rotation), Spacing millimetres between voxel centres, Shape
// voxels, and its centre at the head's centre of mass.
type Spec struct {
	Orientation   string     `json:"orientation"`   // "RAS"
	SpacingMm     [3]float64 `json:"spacing_mm"`    // along the grid's x (R), y (A), z (S)
	Shape         [3]int     `json:"shape"`         // grid voxels along x, y, z
	Crop          string     `json:"crop"`          // "head-centre"
	Antialias     string     `json:"antialias"`     // "block-mean" or "none"
	Interpolation string     `json:"interpolation"` // "trilinear"
	HeadMask      HeadMask   `json:"head_mask"`
	Intensity     Intensity  `json:"intensity"`
	Alignment     *Alignment `json:"alignment,omitempty"` // align to a template first (align.go)
}

// HeadMask is the rule that separates head from background on raw values:
// a voxel is head when its value exceeds
// P(LowPercentile) + Fraction·(P(HighPercentile) − P(LowPercentile)),
// percentiles taken over the scan's finite voxels.
type HeadMask struct {
	Method         string  `json:"method"` // "percentile-fraction"
	LowPercentile  float64 `json:"low_percentile"`
	HighPercentile float64 `json:"high_percentile"`
	Fraction       float64 `json:"fraction"`
}

// Intensity normalisation methods.
const (
	// NormZScoreHead subtracts the mean and divides by the standard deviation
	// of the head voxels; then clips to ±Clip when Clip > 0.
	NormZScoreHead = "zscore-head"
	// NormPercentileMinMax clips to the head voxels' LowPercentile and
	// HighPercentile and maps that range to [0, 1].
	NormPercentileMinMax = "percentile-minmax"
)

// Intensity is the intensity normalisation.
type Intensity struct {
	Method         string  `json:"method"`
	LowPercentile  float64 `json:"low_percentile,omitempty"`
	HighPercentile float64 `json:"high_percentile,omitempty"`
	Clip           float64 `json:"clip,omitempty"`
}

// MaxGridVoxels bounds the model grid (512³) so that a card cannot ask for a
// huge allocation.
const MaxGridVoxels = 512 * 512 * 512

// Validate checks the preprocessing parameters.
func (p Spec) Validate() error {
	if p.Orientation != "RAS" {
		return fieldError("preprocessing.orientation", "only \"RAS\" is supported, got %q", p.Orientation)
	}
	n := 1
	for i := 0; i < 3; i++ {
		s := p.SpacingMm[i]
		if !(s >= 0.1 && s <= 20) {
			return fieldError(fmt.Sprintf("preprocessing.spacing_mm[%d]", i), "want 0.1 to 20 mm, got %v", s)
		}
		d := p.Shape[i]
		if d < 4 || d > 512 {
			return fieldError(fmt.Sprintf("preprocessing.shape[%d]", i), "want 4 to 512 voxels, got %d", d)
		}
		n *= d
	}
	if n > MaxGridVoxels {
		return fieldError("preprocessing.shape", "%v exceeds %d voxels", p.Shape, MaxGridVoxels)
	}
	if p.Crop != "head-centre" {
		return fieldError("preprocessing.crop", "only \"head-centre\" is supported, got %q", p.Crop)
	}
	if p.Antialias != "block-mean" && p.Antialias != "none" {
		return fieldError("preprocessing.antialias", "want \"block-mean\" or \"none\", got %q", p.Antialias)
	}
	if p.Interpolation != "trilinear" {
		return fieldError("preprocessing.interpolation", "only \"trilinear\" is supported, got %q", p.Interpolation)
	}
	if err := p.HeadMask.validate(); err != nil {
		return err
	}
	if err := p.Alignment.validate(); err != nil {
		return err
	}
	return p.Intensity.validate()
}

func validPercentile(x float64) bool { return x >= 0 && x <= 100 }

func (h HeadMask) validate() error {
	if h.Method != "percentile-fraction" {
		return fieldError("preprocessing.head_mask.method", "only \"percentile-fraction\" is supported, got %q", h.Method)
	}
	if !validPercentile(h.LowPercentile) || !validPercentile(h.HighPercentile) || h.LowPercentile >= h.HighPercentile {
		return fieldError("preprocessing.head_mask", "percentiles must satisfy 0 ≤ low < high ≤ 100, got %v, %v", h.LowPercentile, h.HighPercentile)
	}
	if !(h.Fraction > 0 && h.Fraction < 1) {
		return fieldError("preprocessing.head_mask.fraction", "want 0 < fraction < 1, got %v", h.Fraction)
	}
	return nil
}

func (in Intensity) validate() error {
	switch in.Method {
	case NormZScoreHead:
		if !(in.Clip >= 0) || math.IsInf(in.Clip, 0) {
			return fieldError("preprocessing.intensity.clip", "want 0 (none) or a positive number, got %v", in.Clip)
		}
	case NormPercentileMinMax:
		if !validPercentile(in.LowPercentile) || !validPercentile(in.HighPercentile) || in.LowPercentile >= in.HighPercentile {
			return fieldError("preprocessing.intensity", "percentiles must satisfy 0 ≤ low < high ≤ 100, got %v, %v", in.LowPercentile, in.HighPercentile)
		}
	default:
		return fieldError("preprocessing.intensity.method", "want %q or %q, got %q", NormZScoreHead, NormPercentileMinMax, in.Method)
	}
	return nil
}

// fieldError names the card field path at fault (the spec is the card's
// "preprocessing" object).
func fieldError(path, format string, args ...any) error {
	return fmt.Errorf("%s: %s", path, fmt.Sprintf(format, args...))
}
