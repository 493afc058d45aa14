package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/ortlib"
)

// runModelFolder dispatches `brightfold model check|make|show|recalibrate`.
func runModelFolder(e *env, args []string) error {
	if len(args) > 0 && isHelpArg(args[0]) {
		fmt.Fprintln(e.stdout, "usage: brightfold model check|make|show|recalibrate ... (brightfold model SUBCOMMAND --help lists its options)\n"+notice.Full)
		return nil
	}
	if len(args) > 0 {
		switch args[0] {
		case "make":
			return runModelMake(e, args[1:])
		case "show":
			return runModelShow(e, args[1:])
		case "recalibrate":
			return runModelRecalibrate(e, args[1:])
		}
	}
	if len(args) == 0 || args[0] != "check" {
		return usageError("usage: brightfold model check|make|show|recalibrate ... (brightfold model make --help)")
	}
	fs := newFlags(e, "model check")
	ortLib := fs.String("ort-lib", "", "`PATH` of the ONNX Runtime library "+ortlib.FileName)
	noRun := fs.Bool("no-run", false, "check the card and graph only; do not load the model in ONNX Runtime")
	asJSON := fs.Bool("json", false, "print the card and what was found as JSON")
	fs.Usage = commandHelp(fs, "model check [MODEL] [--ort-lib PATH] [--no-run] [--json]")
	paths, err := parseFlags(fs, args[1:])
	if err != nil {
		return err
	}
	if len(paths) > 1 {
		return usageError("brightfold model check: give one model folder (a folder or .zip with model.onnx and card.json), or none for the embedded demo model folder")
	}
	var b *inference.ModelFolder
	if len(paths) == 1 {
		b, err = inference.LoadModelFolder(paths[0])
	} else {
		b, err = demoModelFolder()
	}
	if err != nil {
		return err
	}
	ran := "not run (--no-run)"
	if !*noRun {
		if ran, err = trialRun(b, *ortLib); err != nil {
			return err
		}
	}
	if *asJSON {
		return writeModelFolderJSON(e.stdout, b, ran)
	}
	writeModelFolderText(e.stdout, b, ran)
	return nil
}

// trialRun makes the session and runs one all-zero case, proving that ONNX
// Runtime accepts the model and gives the card's outputs.
func trialRun(b *inference.ModelFolder, lib string) (string, error) {
	s, err := openSession(b, lib, 1)
	if err != nil {
		return "", err
	}
	defer s.Close()
	c := b.Card
	p := c.Preprocessing.Shape
	t := &preprocess.Tensor{Data: make([]float32, p[0]*p[1]*p[2]), Shape: append([]int64{1}, c.Input.Shape[1:]...),
		Layout: c.Input.Layout, Grid: p}
	out, err := s.Run([]*preprocess.Tensor{t})
	if inputerr.Is(err) {
		return "", err // names the model folder and the problem already
	}
	if err != nil {
		return "", fmt.Errorf("%s: ONNX Runtime could not run the model: %w", b.Source, err)
	}
	if len(out[0].Features) != c.OOD.Features.Dim {
		return "", usageError("%s: card.json: ood.features.dim: the model gives %d features, the card says %d", b.Source, len(out[0].Features), c.OOD.Features.Dim)
	}
	return fmt.Sprintf("ran one all-zero case in ONNX Runtime: %d logits, %d features", len(out[0].Logits), len(out[0].Features)), nil
}

func writeModelFolderText(w io.Writer, b *inference.ModelFolder, ran string) {
	c := b.Card
	fmt.Fprintln(w, notice.Full)
	fmt.Fprintln(w)
	fmt.Fprintf(w, "ModelFolder:        %s: OK (%s)\n", b.Source, c.Schema)
	fmt.Fprintf(w, "Model:         %s %s\n", c.Name, c.Version)
	fmt.Fprintf(w, "Task:          %s\n", c.Task)
	fmt.Fprintf(w, "Classes:       %s (positive: %s; %s)\n", strings.Join(c.Classes, ", "), c.PositiveClass, c.Outputs.Activation)
	fmt.Fprintf(w, "sha256:        %s (matches card)\n", b.SHA256)
	g := b.Graph
	fmt.Fprintf(w, "Graph:         %d nodes, %d parameters, opset %d, producer %q\n", g.NodeCount, g.ParameterSize, g.Opset, g.Producer)
	fmt.Fprintf(w, "  inputs:      %s\n", strings.Join(g.Inputs, "; "))
	fmt.Fprintf(w, "  outputs:     %s\n", strings.Join(g.Outputs, "; "))
	if len(g.AddedOutputs) > 0 {
		fmt.Fprintf(w, "  added:       %s (intermediate tensor exposed as an output)\n", strings.Join(g.AddedOutputs, ", "))
	}
	fmt.Fprintf(w, "  batch:       %s\n", map[bool]string{true: "dynamic (cases are batched)", false: "fixed"}[g.BatchDynamic])
	p := c.Preprocessing
	fmt.Fprintf(w, "Input:         %q %v %s %s\n", c.Input.Name, c.Input.Shape, c.Input.Layout, c.Input.DataType)
	fmt.Fprintf(w, "Preprocessing: %s, %g×%g×%g mm, %d×%d×%d voxels, crop %s, antialias %s, %s, head mask P%g + %g·(P%g − P%g), intensity %s\n",
		p.Orientation, p.SpacingMm[0], p.SpacingMm[1], p.SpacingMm[2], p.Shape[0], p.Shape[1], p.Shape[2], p.Crop, p.Antialias,
		p.Interpolation, p.HeadMask.LowPercentile, p.HeadMask.Fraction, p.HeadMask.HighPercentile, p.HeadMask.LowPercentile, p.Intensity.Method)
	fmt.Fprintf(w, "Outputs:       logits %q, features %q\n", c.Outputs.Logits, c.Outputs.Features)
	fmt.Fprintf(w, "Calibration:   temperature %.4g (%s; %s)\n", c.Calibration.Temperature, c.Calibration.Method, c.Calibration.FittedOn)
	o := c.OOD
	fmt.Fprintf(w, "Fit check:     envelope %s; spacing %.3g–%.3g mm; head %.0f–%.0f mL; %d feature dims, %d classes; %d intensity levels\n",
		strings.Join(o.Envelope.Modalities, ","), o.Envelope.SpacingMm.Min, o.Envelope.SpacingMm.Max,
		o.Envelope.HeadVolumeMl.Min, o.Envelope.HeadVolumeMl.Max, o.Features.Dim, len(o.Features.ClassMeans), len(o.Intensity.Levels))
	for _, t := range []struct {
		name string
		t    inference.Threshold
	}{{"msp", o.Thresholds.MSP}, {"energy", o.Thresholds.Energy}, {"mahalanobis", o.Thresholds.Mahalanobis}, {"wasserstein", o.Thresholds.Wasserstein}} {
		fmt.Fprintf(w, "  %-12s %s %.4g, retention %.3f, required %v\n", t.name, t.t.Direction, t.t.Value, t.t.Retention, t.t.Required)
	}
	for _, m := range c.Validation {
		fmt.Fprintf(w, "Validation:    %s = %.4g (n = %d, %s)\n", m.Name, m.Value, m.N, m.Split)
	}
	fmt.Fprintf(w, "Intended use:  %s\n", c.IntendedUse)
	fmt.Fprintf(w, "Training data: %s\n", c.TrainingData)
	for _, s := range c.Cautions {
		fmt.Fprintf(w, "Caution:       %s\n", s)
	}
	fmt.Fprintf(w, "ONNX Runtime:  %s\n", ran)
	fmt.Fprintln(w)
	fmt.Fprintln(w, notice.Full)
}

func writeModelFolderJSON(w io.Writer, b *inference.ModelFolder, ran string) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(map[string]any{"notice": notice.Full, "model": b.Source, "ok": true, "sha256": b.SHA256,
		"graph": b.Graph, "onnx_runtime": ran, "card": b.Card})
}
