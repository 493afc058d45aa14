package main

import (
	"flag"
	"fmt"
	"os"

	"brightfold/inference/modelmake"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
)

// templateArgs are model make's alignment flags.
type templateArgs struct {
	template      *string
	build         *bool
	align, metric *string
}

// templateFlags declares --template, --build-template, --align and --metric.
func templateFlags(fs *flag.FlagSet) templateArgs {
	return templateArgs{
		template: fs.String("template", "", "align every scan to this template (NIfTI; copied into the model folder)"),
		build:    fs.Bool("build-template", false, "build a template from the calibration cases (align all to one, average, realign to the average twice) and align to it"),
		align:    fs.String("align", preprocess.AlignAffine, "alignment to the template: rigid (6 degrees of freedom) or affine (12)"),
		metric:   fs.String("metric", "ncc", "alignment metric: ncc (same contrast as the template) or mi (Mattes mutual information, other contrasts)"),
	}
}

// options checks the flags before any work and returns nil without
// --template and --build-template.
func (a templateArgs) options() (*modelmake.Alignment, error) {
	switch {
	case *a.template != "" && *a.build:
		return nil, usageError("give --template FILE or --build-template, not both")
	case *a.align != preprocess.AlignRigid && *a.align != preprocess.AlignAffine:
		return nil, usageError("--align: want %s or %s, got %q", preprocess.AlignRigid, preprocess.AlignAffine, *a.align)
	case *a.metric != "ncc" && *a.metric != "mi":
		return nil, usageError("--metric: want ncc or mi, got %q", *a.metric)
	case *a.template == "" && !*a.build:
		return nil, nil
	}
	if *a.template != "" {
		if _, err := os.Stat(*a.template); err != nil {
			return nil, inputerr.Wrap(*a.template, err)
		}
	}
	return &modelmake.Alignment{Method: *a.align, Metric: *a.metric, TemplatePath: *a.template, Build: *a.build}, nil
}

// alignmentText describes the card's alignment for model show.
func alignmentText(al *preprocess.Alignment) string {
	s := fmt.Sprintf("%s to %s (sha256 %s), metric %s", al.Method, al.Template, orNone(al.TemplateSHA256), orNone(al.Metric))
	if al.Mask != "" {
		s += fmt.Sprintf(", mask %s (sha256 %s)", al.Mask, orNone(al.MaskSHA256))
	}
	if r := al.MetricRange; r != nil {
		s += fmt.Sprintf("; calibration range %.4f to %.4f: %s", r[0], r[1], al.MetricRangeMethod)
	}
	return s
}

func orNone(s string) string {
	if s == "" {
		return "not recorded"
	}
	return s
}
