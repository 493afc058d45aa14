package main

import (
	"fmt"
	"io"
	"sort"
	"strings"

	"brightfold/inference"
	"brightfold/internal/notice"
)

// runModelShow prints a model folder's card as a model card in the sections
// of Mitchell et al. 2019 ("Model Cards for Model Reporting", FAT* '19).
func runModelShow(e *env, args []string) error {
	fs := newFlags(e, "model show")
	md := fs.Bool("markdown", false, "print Markdown instead of plain text")
	fs.Usage = func() {
		fmt.Fprintln(e.stderr, "usage: brightfold model show [MODEL] [--markdown]")
		fs.PrintDefaults()
	}
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 1 {
		return usageError("brightfold model show: give one model folder (or none for the embedded demo model folder)")
	}
	p := ""
	if len(pos) == 1 {
		p = pos[0]
	}
	mf, err := openModelFolder(p)
	if err != nil {
		return err
	}
	writeModelCard(e.stdout, mf, *md)
	return nil
}

// cardWriter writes headings, paragraphs and tables as Markdown or text.
type cardWriter struct {
	w  io.Writer
	md bool
}

func (c cardWriter) heading(s string) {
	if c.md {
		fmt.Fprintf(c.w, "\n## %s\n\n", s)
		return
	}
	fmt.Fprintf(c.w, "\n%s\n%s\n", s, strings.Repeat("=", len([]rune(s))))
}

func (c cardWriter) item(label, format string, args ...any) {
	text := fmt.Sprintf(format, args...)
	if c.md {
		fmt.Fprintf(c.w, "- **%s:** %s\n", label, text)
		return
	}
	fmt.Fprintf(c.w, "  %s: %s\n", label, text)
}

func (c cardWriter) para(s string) {
	if c.md {
		fmt.Fprintf(c.w, "%s\n\n", s)
		return
	}
	fmt.Fprintf(c.w, "  %s\n", s)
}

func writeModelCard(w io.Writer, mf *inference.ModelFolder, md bool) {
	c := mf.Card
	cw := cardWriter{w, md}
	if md {
		fmt.Fprintf(w, "# Model card: %s %s\n\n> %s\n", c.Name, c.Version, notice.Full)
	} else {
		fmt.Fprintf(w, "Model card: %s %s\n%s\n", c.Name, c.Version, notice.Full)
	}
	cw.heading("Model details")
	cw.item("Name and version", "%s %s", c.Name, c.Version)
	cw.item("Task", "%s", c.Task)
	cw.item("Classes", "%s (positive: %s; %s)", strings.Join(c.Classes, ", "), c.PositiveClass, c.Outputs.Activation)
	cw.item("Input", "%q %v %s, preprocessed to %d×%d×%d voxels at %g×%g×%g mm (%s), intensity %s", c.Input.Name, c.Input.Shape, c.Input.Layout,
		c.Preprocessing.Shape[0], c.Preprocessing.Shape[1], c.Preprocessing.Shape[2], c.Preprocessing.SpacingMm[0], c.Preprocessing.SpacingMm[1], c.Preprocessing.SpacingMm[2],
		c.Preprocessing.Orientation, c.Preprocessing.Intensity.Method)
	cw.item("model.onnx sha256", "%s", c.ModelSHA256)
	if al := c.Preprocessing.Alignment; al.Active() {
		cw.item("Alignment", "%s", alignmentText(al))
	}
	cw.item("Calibration", "temperature %.4g: %s", c.Calibration.Temperature, c.Calibration.Method)
	if l := c.Calibration.Logistic; l != nil {
		cw.item("Logistic recalibration", "logit ↦ %.4f + %.4f · logit (%s)", l.Intercept, l.Slope, l.FittedOn)
	}
	if pv := c.Provenance; pv != nil {
		cw.item("Made by", "%s from %s (seed %d)", pv.MadeBy, pv.Cases, pv.Seed)
		for _, g := range pv.Graph {
			cw.item("Graph", "%s", g)
		}
		if pv.Parent != nil {
			cw.item("Parent model folder", "%s %s (card sha256 %s)", pv.Parent.Name, pv.Parent.Version, pv.Parent.CardSHA256)
		}
	}
	cw.heading("Intended use")
	cw.para(c.IntendedUse)
	cw.heading("Factors")
	writeFactors(cw, c)
	cw.heading("Metrics")
	cw.para("Each figure is measured on the cases named beside it, with a 95 % interval where one is given (the method is named). " +
		"Sensitivity and specificity use a positive-class probability of 0.5. The fit check's thresholds state their own false-alarm target.")
	seen := map[string]bool{}
	for _, m := range c.Validation {
		if !seen[m.Name] {
			seen[m.Name] = true
			how := m.How
			if m.Interval != "" {
				how += "; interval: " + m.Interval
			}
			cw.item(m.Name, "%s", how)
		}
	}
	cw.heading("Evaluation data")
	writeEvaluationData(cw, c)
	cw.heading("Training data")
	cw.para(c.TrainingData)
	if c.OOD.Features.FittedOn != "" {
		cw.item("Fit check and temperature fitted on", "%s", c.OOD.Features.FittedOn)
	}
	cw.heading("Quantitative analyses")
	writeFigureTable(cw, c.Validation)
	if pv := c.Provenance; pv != nil && pv.Recalibration != nil {
		r := pv.Recalibration
		cw.para(fmt.Sprintf("Recalibration for site %s on %d cases: %s.", r.Site, r.N, r.Method))
		for _, t := range r.Tests {
			cw.item("Likelihood-ratio test", "%s: χ² = %.3f, %d df, p = %.4g", t.Name, t.Statistic, t.DF, t.P)
		}
		cw.para("Before recalibration:")
		writeFigureTable(cw, r.Before)
		cw.para("After recalibration (in-sample: the same cases):")
		writeFigureTable(cw, r.After)
	}
	cw.heading("Ethical considerations")
	cw.para("The probability is a model output, not a diagnosis; " + notice.Full + " " +
		"Patient identifiers are not stored in the model folder; the provenance names the case list's file, not its paths.")
	cw.heading("Caveats and recommendations")
	for _, s := range c.Cautions {
		if s != notice.Full {
			cw.item("Caution", "%s", s)
		}
	}
	cw.item("Recommendation", "check every scan's fit-check verdict; on a new site measure the figures on its own cases (brightfold model recalibrate)")
	if md {
		fmt.Fprintf(w, "\n> %s\n", notice.Full)
	} else {
		fmt.Fprintf(w, "\n%s\n", notice.Full)
	}
}

func writeFactors(cw cardWriter, c *inference.Card) {
	sites := map[string]bool{}
	for _, m := range c.Validation {
		if m.Site != "" {
			sites[m.Site] = true
		}
	}
	names := make([]string, 0, len(sites))
	for s := range sites {
		names = append(names, s)
	}
	sort.Strings(names)
	if len(names) > 0 {
		cw.item("Sites", "%s (figures by site below)", strings.Join(names, ", "))
	} else {
		cw.item("Sites", "no site was given; figures are not broken down by site")
	}
	e := c.OOD.Envelope
	cw.item("Acquisition envelope", "modalities %s; voxel spacing %.2g–%.2g mm; head volume %.0f–%.0f mL (fitted on %s)",
		strings.Join(e.Modalities, ", "), e.SpacingMm.Min, e.SpacingMm.Max, e.HeadVolumeMl.Min, e.HeadVolumeMl.Max, e.FittedOn)
	cw.item("Fit check", "scans outside the envelope, with an unfamiliar intensity profile or unfamiliar features are flagged out-of-distribution")
}

func writeEvaluationData(cw cardWriter, c *inference.Card) {
	splits := map[string]int{}
	var order []string
	for _, m := range c.Validation {
		if _, ok := splits[m.Split]; !ok {
			order = append(order, m.Split)
		}
		splits[m.Split] = m.N
	}
	for _, s := range order {
		cw.item("Cases", "%s", s)
	}
	if pv := c.Provenance; pv != nil {
		for _, split := range []string{"calibration", "validation"} {
			var parts []string
			for _, cl := range c.Classes {
				parts = append(parts, fmt.Sprintf("%s %d", cl, pv.Counts[split][cl]))
			}
			cw.item("Split "+split, "%s", strings.Join(parts, ", "))
		}
		cw.item("Split rule", "%s", pv.Split)
		if pv.Skipped > 0 {
			cw.item("Skipped", "%d scans could not be prepared", pv.Skipped)
		}
	}
}

// writeFigureTable prints each figure with its interval, site and warning.
func writeFigureTable(cw cardWriter, ms []inference.Metric) {
	if cw.md {
		fmt.Fprintln(cw.w, "| figure | site | value | 95 % interval | n | cases |")
		fmt.Fprintln(cw.w, "|---|---|---|---|---|---|")
	}
	for _, m := range ms {
		ci := "—"
		if len(m.CI95) == 2 {
			ci = fmt.Sprintf("%.3f to %.3f", m.CI95[0], m.CI95[1])
		}
		site := m.Site
		if site == "" {
			site = "all"
		}
		warn := ""
		if m.Warning != "" {
			warn = " ⚠ " + m.Warning
		}
		if cw.md {
			fmt.Fprintf(cw.w, "| %s | %s | %.3f | %s | %d | %s%s |\n", m.Name, site, m.Value, ci, m.N, m.Split, warn)
		} else {
			fmt.Fprintf(cw.w, "  %-22s %-8s %7.3f  [%s]  n = %d%s\n", m.Name, site, m.Value, ci, m.N, warn)
		}
	}
	if cw.md {
		fmt.Fprintln(cw.w)
	}
}

// writeFigures prints the validation figures after model make.
func writeFigures(w io.Writer, c *inference.Card) {
	fmt.Fprintf(w, "temperature %.4g (%s)\n", c.Calibration.Temperature, c.Calibration.Method)
	writeFigureTable(cardWriter{w: w}, c.Validation)
}
