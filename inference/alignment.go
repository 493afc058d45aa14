package inference

import (
	"context"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path"
	"path/filepath"
	"strings"

	"brightfold/inference/fitcheck"
	"brightfold/inference/preprocess"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats" // NIfTI templates
)

// CheckAlignment is the fit check of the alignment to the model's template.
const CheckAlignment = "alignment_quality"

// MaxTemplateBytes bounds a template or mask file in a model folder.
const MaxTemplateBytes = 256 << 20

// alignmentFiles are the template (and optional mask) a card's
// preprocessing.alignment names, loaded with the model folder.
type alignmentFiles struct {
	template, mask *volume.Volume
	raw            map[string][]byte // the files' bytes by name (folders read from disk)
}

// loadAlignment reads the template and mask files the card names from the
// model folder (dir inside fsys) and keeps them with the card.
func loadAlignment(fsys fs.FS, dir string, c *Card) error {
	al := c.Preprocessing.Alignment
	if !al.Active() {
		return nil
	}
	files := &alignmentFiles{raw: map[string][]byte{}}
	var err error
	if files.template, err = readFolderVolume(fsys, dir, al.Template, al.TemplateSHA256, files.raw); err != nil {
		return fmt.Errorf("card.json: preprocessing.alignment.template: %w", err)
	}
	if al.Mask != "" {
		if files.mask, err = readFolderVolume(fsys, dir, al.Mask, al.MaskSHA256, files.raw); err != nil {
			return fmt.Errorf("card.json: preprocessing.alignment.mask: %w", err)
		}
	}
	c.alignment = files
	return nil
}

// SetAlignmentFiles gives a card built in memory its template and mask
// (LoadModelFolder does this for cards read from a folder).
func (c *Card) SetAlignmentFiles(template, mask *volume.Volume) {
	c.alignment = &alignmentFiles{template: template, mask: mask}
}

// AlignmentTemplate returns the loaded template and mask (nil when the
// card does not align).
func (c *Card) AlignmentTemplate() (template, mask *volume.Volume) {
	if c.alignment == nil {
		return nil, nil
	}
	return c.alignment.template, c.alignment.mask
}

// readFolderVolume loads a NIfTI file of the model folder through a
// private temporary copy (the folder may be a zip), refusing a file whose
// sha256 differs from want (when want is given); the bytes go into raw.
func readFolderVolume(fsys fs.FS, dir, name, want string, raw map[string][]byte) (*volume.Volume, error) {
	b, err := readLimited(fsys, path.Join(dir, name), MaxTemplateBytes)
	if err != nil {
		return nil, err
	}
	if err := checkFileSHA256(name, b, want); err != nil {
		return nil, err
	}
	raw[name] = b
	ext := ".nii"
	if strings.HasSuffix(strings.ToLower(name), ".nii.gz") {
		ext = ".nii.gz"
	}
	tmp, err := os.MkdirTemp("", "brightfold-template-")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(tmp)
	p := filepath.Join(tmp, "template"+ext)
	if err := os.WriteFile(p, b, 0o600); err != nil {
		return nil, err
	}
	v, err := volume.Load([]string{p}, volume.LoadOptions{})
	if err != nil {
		return nil, fmt.Errorf("%s: %v", name, strings.ReplaceAll(err.Error(), p, name))
	}
	v.Source = name
	return v, nil
}

// PrepareForCardContext is PrepareForCard with a context that can stop the
// alignment to the template.
func PrepareForCardContext(ctx context.Context, v *volume.Volume, c *Card) (*preprocess.Prepared, error) {
	tpl, mask := c.AlignmentTemplate()
	pr, err := preprocess.PrepareAligned(ctx, v, c.Preprocessing, tpl, mask)
	if err != nil {
		return nil, err
	}
	pr.Tensor = pr.Tensor.ToLayout(c.Input.Layout)
	return pr, nil
}

// Plausible limits of an alignment of one adult head to a template (common
// practice for affine head registration, not a published standard): each
// scale within 0.75–1.33 (heads differ in size by about a quarter either
// way), shear at most 0.15, and for NCC a final correlation of at least 0.5.
const (
	alignMinScale = 0.75
	alignMaxScale = 1.33
	alignMaxShear = 0.15
	alignMinNCC   = 0.5
)

// alignmentChecks is the alignment-quality check of a prepared scan (none
// when the card does not align). It fails when the transform's scales or
// shear are outside plausible head sizes, or when the final metric falls
// below the card's calibration range (or, without one, below 0.5 for NCC).
func alignmentChecks(c *Card, pr *preprocess.Prepared) []fitcheck.Check {
	if pr == nil || pr.Alignment == nil {
		return nil
	}
	a := pr.Alignment
	var problems []string
	for i, s := range a.Parts.Scales {
		if !(s >= alignMinScale && s <= alignMaxScale) {
			problems = append(problems, fmt.Sprintf("it would have to be stretched by %.2f along the %s axis", s, [3]string{"left-right", "front-back", "up-down"}[i]))
		}
	}
	if a.Parts.Shear > alignMaxShear {
		problems = append(problems, fmt.Sprintf("it would have to be sheared by %.2f", a.Parts.Shear))
	}
	threshold := fmt.Sprintf("scales %.2f to %.2f, shear ≤ %.2f", alignMinScale, alignMaxScale, alignMaxShear)
	low := math.Inf(-1)
	if r := c.Preprocessing.Alignment.MetricRange; r != nil {
		low = r[0]
		threshold += fmt.Sprintf(", %s ≥ %s (lowest of the calibration cases)", a.Metric, FormatValue(low))
	} else if a.Metric == "ncc" {
		low = alignMinNCC
		threshold += fmt.Sprintf(", ncc ≥ %.2f", low)
	}
	if a.Value < low {
		problems = append(problems, fmt.Sprintf("after alignment it resembles the template less than any calibration scan did (%s %.3f)", a.Metric, a.Value))
	}
	ch := fitcheck.Check{Name: CheckAlignment, Value: a.Value, Threshold: threshold, Pass: len(problems) == 0, Required: true}
	if ch.Pass {
		ch.Severity = 0.5
		ch.Explanation = fmt.Sprintf("The scan was matched to the model's template (%s, %s %.3f, rotation %.0f°, size ratio %.2f).",
			a.Method, a.Metric, a.Value, a.Parts.RotationDeg, math.Cbrt(math.Abs(a.Parts.Determinant)))
	} else {
		ch.Severity = 2
		ch.Explanation = "The scan could not be matched to the model's template: " + strings.Join(problems, "; ") +
			". The result is unreliable; check that the scan shows a whole head of the kind the model expects."
	}
	return []fitcheck.Check{ch}
}
