package preprocess

import (
	"context"
	"fmt"
	"math"
	"path"
	"strings"

	"brightfold/internal/register"
	"brightfold/internal/volume"
)

// Alignment methods of the card's preprocessing.alignment.method.
const (
	AlignNone   = "none"
	AlignRigid  = "rigid"  // 6 degrees of freedom
	AlignAffine = "affine" // 12 degrees of freedom
)

// Alignment is the card's preprocessing.alignment: the scan is first
// aligned to a template (a file inside the model folder) and the model grid
// is placed in the template's world instead of around the scan's own head.
type Alignment struct {
	Method   string `json:"method"`             // none, rigid or affine
	Template string `json:"template,omitempty"` // file name inside the model folder (NIfTI)
	Mask     string `json:"mask,omitempty"`     // optional template-grid mask file inside the model folder
	Metric   string `json:"metric,omitempty"`   // ncc (default, same contrast) or mi
	// MetricRange is the final metric's range over the calibration cases,
	// for the alignment-quality fit check; absent means fixed plausibility
	// limits only.
	MetricRange *[2]float64 `json:"metric_range,omitempty"`
	// MetricRangeMethod says how MetricRange was fitted.
	MetricRangeMethod string `json:"metric_range_method,omitempty"`
	// TemplateSHA256 and MaskSHA256 are the sha256 of the template and
	// mask files; when given, loading the model folder refuses a file that
	// does not match (model make always writes them).
	TemplateSHA256 string `json:"template_sha256,omitempty"`
	MaskSHA256     string `json:"mask_sha256,omitempty"`
}

// Active reports whether the card asks for alignment.
func (a *Alignment) Active() bool { return a != nil && a.Method != "" && a.Method != AlignNone }

// Options are the registration options the card states.
func (a *Alignment) Options(mask *volume.Volume) (register.Options, error) {
	o := register.Options{DOF: 12, Mask: mask}
	if a.Method == AlignRigid {
		o.DOF = 6
	}
	m := a.Metric
	if m == "" {
		m = "ncc"
	}
	var err error
	o.Metric, err = register.ParseMetric(m)
	return o, err
}

func (a *Alignment) validate() error {
	if a == nil {
		return nil
	}
	switch a.Method {
	case AlignNone, "":
		return nil
	case AlignRigid, AlignAffine:
	default:
		return fieldError("preprocessing.alignment.method", "want %q, %q or %q, got %q", AlignNone, AlignRigid, AlignAffine, a.Method)
	}
	if err := folderFileName("preprocessing.alignment.template", a.Template, true); err != nil {
		return err
	}
	if err := folderFileName("preprocessing.alignment.mask", a.Mask, false); err != nil {
		return err
	}
	if a.Metric != "" && a.Metric != "ncc" && a.Metric != "mi" {
		return fieldError("preprocessing.alignment.metric", "want \"ncc\" or \"mi\", got %q", a.Metric)
	}
	for _, h := range [][2]string{{"template_sha256", a.TemplateSHA256}, {"mask_sha256", a.MaskSHA256}} {
		if h[1] != "" && !isSHA256Hex(h[1]) {
			return fieldError("preprocessing.alignment."+h[0], "want 64 lower-case hex digits, got %q", h[1])
		}
	}
	if r := a.MetricRange; r != nil && !(r[0] <= r[1]) {
		return fieldError("preprocessing.alignment.metric_range", "want [low, high] with low ≤ high, got %v", *r)
	}
	return nil
}

// isSHA256Hex reports whether s is 64 lower-case hex digits.
func isSHA256Hex(s string) bool {
	if len(s) != 64 {
		return false
	}
	for _, r := range s {
		if !(r >= '0' && r <= '9' || r >= 'a' && r <= 'f') {
			return false
		}
	}
	return true
}

// folderFileName accepts a plain file name inside the model folder.
func folderFileName(field, name string, required bool) error {
	if name == "" {
		if required {
			return fieldError(field, "a template file inside the model folder is required")
		}
		return nil
	}
	if name != path.Base(name) || strings.ContainsAny(name, `/\`) || name == "." || name == ".." {
		return fieldError(field, "want a file name inside the model folder, got %q", name)
	}
	return nil
}

// AlignmentInfo is what the alignment found for one scan.
type AlignmentInfo struct {
	Method string `json:"method"`
	// Transform maps template RAS mm to scan RAS mm (register.Convention).
	Transform volume.Affine  `json:"transform"`
	Metric    string         `json:"metric"`
	Value     float64        `json:"value"`
	Overlap   float64        `json:"overlap"`
	Parts     register.Parts `json:"parts"`
}

// PrepareAligned aligns v to the template (with the optional mask) as the
// spec's alignment states and prepares it on a model grid placed in the
// template's world; without alignment it is Prepare.
func PrepareAligned(ctx context.Context, v *volume.Volume, p Spec, template, mask *volume.Volume) (*Prepared, error) {
	if !p.Alignment.Active() {
		return Prepare(v, p)
	}
	if template == nil {
		return nil, fmt.Errorf("the card asks for alignment to %q but no template was loaded", p.Alignment.Template)
	}
	opts, err := p.Alignment.Options(mask)
	if err != nil {
		return nil, err
	}
	if err := checkVolume(v); err != nil {
		return nil, err
	}
	res, err := register.Register(ctx, template, v, opts)
	if err != nil {
		return nil, fmt.Errorf("alignment to the model's template: %w", err)
	}
	pr, err := PrepareWithTransform(v, p, template, res.Transform)
	if err != nil {
		return nil, err
	}
	pr.Alignment = &AlignmentInfo{Method: p.Alignment.Method, Transform: res.Transform, Metric: opts.Metric.String(),
		Value: res.Value, Overlap: res.Overlap, Parts: register.Decompose(res.Transform)}
	return pr, nil
}

// PrepareWithTransform prepares v through a known alignment a (template
// world → scan world): the scan is resampled onto the template grid, then
// prepared as the spec states, and the transform's grid is expressed in the
// scan's world (GridAffine = a·grid in the template's world), so that
// relevance maps go back to the scan through the inverse of the whole
// chain. Interpolation happens twice (scan → template grid → model grid).
func PrepareWithTransform(v *volume.Volume, p Spec, template *volume.Volume, a volume.Affine) (*Prepared, error) {
	aligned, err := register.Apply(v, template, a)
	if err != nil {
		return nil, err
	}
	pr, err := Prepare(aligned, p)
	if err != nil {
		return nil, err
	}
	scanInv, err := v.Affine.Inverse()
	if err != nil {
		return nil, fmt.Errorf("scan affine: %w", err)
	}
	grid := a.Mul(pr.Transform.GridAffine)
	pr.Transform = Transform{GridToScan: scanInv.Mul(grid), GridAffine: grid, GridDims: p.Shape, ScanDims: v.Dims, ScanAffine: v.Affine}
	pr.InsideFOV = insideFraction(pr.Transform)
	// the raw-scan threshold is the card's rule on the scan's own voxels, not the resampled ones
	rlo, rhi := percentilePair(v.Data, p.HeadMask.LowPercentile, p.HeadMask.HighPercentile)
	pr.ScanHeadThreshold = rlo + p.HeadMask.Fraction*(rhi-rlo)
	return pr, nil
}

// insideFraction is the fraction of model-grid voxel centres that fall
// inside the scan's voxel centres.
func insideFraction(t Transform) float64 {
	m := t.GridToScan
	d := t.GridDims
	in := 0
	for k := 0; k < d[2]; k++ {
		for j := 0; j < d[1]; j++ {
			for i := 0; i < d[0]; i++ {
				q := m.Apply([3]float64{float64(i), float64(j), float64(k)})
				ok := true
				for r := 0; r < 3; r++ {
					ok = ok && q[r] >= -0.5 && q[r] <= float64(t.ScanDims[r])-0.5
				}
				if ok {
					in++
				}
			}
		}
	}
	return float64(in) / math.Max(1, float64(d[0]*d[1]*d[2]))
}
