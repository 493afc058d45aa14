package modelmake

import (
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/notice"
	"brightfold/internal/register"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// Alignment asks Make to align every case to a template before the model
// grid is placed (the card's preprocessing.alignment).
type Alignment struct {
	Method string // preprocess.AlignRigid or preprocess.AlignAffine (default affine)
	Metric string // "ncc" (same contrast, default) or "mi"
	// TemplatePath is a given template (NIfTI), copied byte for byte into
	// the model folder. Empty with Build: the template is built.
	TemplatePath string
	// Build makes the template from the calibration cases with
	// register.BuildTemplate (align all to the first, average, realign to
	// the average, Rounds times).
	Build  bool
	Rounds int // 0 means 2
}

// Template file names inside the model folder.
const (
	TemplateFile   = "template.nii.gz"
	TemplateFileNC = "template.nii"
)

// setupAlignment loads or builds the template, puts it into the card (file
// name, sha256, method, metric) and into res.Files. Without opt.Align it
// does nothing.
func setupAlignment(ctx context.Context, card *inference.Card, m *manifest.Manifest, splits []string, opt Options, res *Result) error {
	al := opt.Align
	if al == nil {
		return nil
	}
	method, metric := al.Method, al.Metric
	if method == "" {
		method = preprocess.AlignAffine
	}
	if metric == "" {
		metric = "ncc"
	}
	if method != preprocess.AlignRigid && method != preprocess.AlignAffine {
		return inputerr.New("", "--align: want %s or %s, got %q", preprocess.AlignRigid, preprocess.AlignAffine, method)
	}
	ropt := register.Options{DOF: 12}
	if method == preprocess.AlignRigid {
		ropt.DOF = 6
	}
	var err error
	if ropt.Metric, err = register.ParseMetric(metric); err != nil {
		return inputerr.New("", "--metric: %v", err)
	}
	var name string
	var b []byte
	var tpl *volume.Volume
	switch {
	case al.TemplatePath != "" && al.Build:
		return inputerr.New(al.TemplatePath, "give --template or --build-template, not both")
	case al.TemplatePath != "":
		name, b, tpl, err = givenTemplate(al.TemplatePath)
	case al.Build:
		name = TemplateFile
		b, tpl, err = builtTemplate(ctx, m, splits, al.Rounds, ropt, opt, &res.Unreadable)
	default:
		return inputerr.New("", "alignment needs --template FILE or --build-template")
	}
	if err != nil {
		return err
	}
	card.Preprocessing.Alignment = &preprocess.Alignment{Method: method, Template: name, Metric: metric,
		TemplateSHA256: inference.FileSHA256(b)}
	card.SetAlignmentFiles(tpl, nil)
	res.Files = map[string][]byte{name: b}
	return nil
}

// givenTemplate reads a template file (bounded) and checks that it loads.
func givenTemplate(p string) (string, []byte, *volume.Volume, error) {
	name := TemplateFileNC
	if strings.HasSuffix(strings.ToLower(p), ".nii.gz") {
		name = TemplateFile
	} else if !strings.HasSuffix(strings.ToLower(p), ".nii") {
		return "", nil, nil, inputerr.New(p, "a template must be a NIfTI file (.nii or .nii.gz)")
	}
	f, err := os.Open(p)
	if err != nil {
		return "", nil, nil, inputerr.Wrap(p, err)
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, inference.MaxTemplateBytes+1))
	if err != nil {
		return "", nil, nil, inputerr.Wrap(p, err)
	}
	if len(b) > inference.MaxTemplateBytes {
		return "", nil, nil, inputerr.New(p, "larger than %d bytes", inference.MaxTemplateBytes)
	}
	v, err := volume.Load([]string{p}, volume.LoadOptions{})
	if err != nil {
		return "", nil, nil, err
	}
	return name, b, v, nil
}

// builtTemplate builds a template from the calibration cases and encodes
// it as NIfTI (notice in descrip).
//
// The cases it left out (opt.SkipUnreadable) are appended to skipped.
func builtTemplate(ctx context.Context, m *manifest.Manifest, splits []string, rounds int, ropt register.Options, opt Options, skipped *[]string) ([]byte, *volume.Volume, error) {
	var idx []int
	for i, s := range splits {
		if s != manifest.SplitValidation {
			idx = append(idx, i)
		}
	}
	opt.Log("building the template from %d calibration cases (%d registrations per round)", len(idx), len(idx))
	load := func(i int) (*volume.Volume, error) {
		return volume.Load([]string{m.Cases[idx[i]].Path}, volume.LoadOptions{})
	}
	// with --skip-unreadable a case that cannot be loaded or aligned is left
	// out of the template and listed (runCases lists it again if it cannot
	// be prepared either); without, the first one stops the build
	skip := func(i int, err error) bool {
		if !opt.SkipUnreadable {
			return false
		}
		name := filepath.Base(m.Cases[idx[i]].Path)
		opt.Log("template: leaving out %s (%v)", name, err)
		*skipped = append(*skipped, fmt.Sprintf("%s: %v", name, err))
		return true
	}
	tpl, err := register.BuildTemplate(ctx, len(idx), load, register.TemplateOptions{Registration: ropt, Rounds: rounds,
		Skip: skip,
		Progress: func(round, i, n int) {
			if i == n-1 {
				opt.Log("template round %d: cases aligned", round+1)
			}
		}})
	if err != nil {
		if ctx.Err() != nil {
			return nil, nil, err
		}
		return nil, nil, inputerr.Wrap(m.Source, fmt.Errorf("build template (use --skip-unreadable to leave out scans that cannot be prepared): %w", err))
	}
	tmp, err := os.MkdirTemp("", "brightfold-template-")
	if err != nil {
		return nil, nil, err
	}
	defer os.RemoveAll(tmp)
	p := filepath.Join(tmp, TemplateFile)
	desc := fmt.Sprintf("Template of %d cases. %s", len(idx)-len(*skipped), notice.Short)
	if err := nifti.Write(p, tpl, nifti.WriteOptions{Description: desc}); err != nil {
		return nil, nil, err
	}
	b, err := os.ReadFile(p)
	if err != nil {
		return nil, nil, err
	}
	return b, tpl, nil
}

// alignValue is the final registration metric of a prepared case (0 when
// the card does not align).
func alignValue(pr *preprocess.Prepared) float64 {
	if pr == nil || pr.Alignment == nil {
		return 0
	}
	return pr.Alignment.Value
}

// fitMetricRange sets the card's alignment metric_range to the lowest and
// highest final metric of the calibration cases. The rule: a new scan
// exchangeable with the n calibration cases falls below the lowest of them
// with probability exactly 1/(n+1) (its rank among the n+1 values is
// uniform; a distribution-free order-statistic fact), which the card states.
func fitMetricRange(card *inference.Card, cases []Case) {
	al := card.Preprocessing.Alignment
	if !al.Active() {
		return
	}
	var v []float64
	for _, c := range cases {
		if c.Split != manifest.SplitValidation {
			v = append(v, c.AlignValue)
		}
	}
	if len(v) == 0 {
		return
	}
	sort.Float64s(v)
	al.MetricRange = &[2]float64{v[0], v[len(v)-1]}
	al.MetricRangeMethod = fmt.Sprintf("lowest and highest final %s of the %d calibration cases after %s alignment; "+
		"a new scan like them falls below the lowest with probability 1/(n+1) = %.3f (rank of an exchangeable case, distribution-free)",
		al.Metric, len(v), al.Method, 1/float64(len(v)+1))
}

// mergeListed appends to a the entries of b that a lacks (a case the
// template build left out and that could not be prepared either is listed
// once).
func mergeListed(a, b []string) []string {
	seen := make(map[string]bool, len(a))
	for _, s := range a {
		seen[s] = true
	}
	for _, s := range b {
		if !seen[s] {
			a, seen[s] = append(a, s), true
		}
	}
	return a
}
