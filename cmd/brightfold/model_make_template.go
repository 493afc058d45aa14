package main

import (
	"flag"

	"brightfold/inference/modelmake"
	"brightfold/inference/preprocess"
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

// options is nil without --template and --build-template.
func (a templateArgs) options() *modelmake.Alignment {
	if *a.template == "" && !*a.build {
		return nil
	}
	return &modelmake.Alignment{Method: *a.align, Metric: *a.metric, TemplatePath: *a.template, Build: *a.build}
}
