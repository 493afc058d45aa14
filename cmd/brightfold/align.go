package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"syscall"
	"time"

	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/register"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
	"brightfold/internal/volume/nifti"
)

// alignReport is transform.json and the --json output of `brightfold align`.
type alignReport struct {
	Notice     string            `json:"notice"`
	Matrix     volume.Affine     `json:"matrix"` // 4 rows, template RAS mm → scan RAS mm
	Convention string            `json:"convention"`
	Metric     string            `json:"metric"`
	Value      float64           `json:"value"`
	DOF        int               `json:"dof"`
	Overlap    float64           `json:"overlap"` // fraction of template samples inside the scan
	Parts      register.Parts    `json:"parts"`
	Stages     []register.Stage  `json:"stages"`
	Template   string            `json:"template"` // base name only
	Outputs    map[string]string `json:"outputs"`
	Seconds    float64           `json:"seconds"`
}

type alignOptions struct {
	to, mask, metric, out string
	dof                   int
	json                  bool
}

// runAlign aligns a scan to a template and writes the resampled scan and the transform.
func runAlign(e *env, args []string) error {
	fs := newFlags(e, "align")
	var o alignOptions
	fs.StringVar(&o.to, "to", "", "template volume (NIfTI or DICOM) to align to (required)")
	fs.IntVar(&o.dof, "dof", 12, "degrees of freedom: 6 (rigid) or 12 (affine)")
	fs.StringVar(&o.metric, "metric", "ncc", "similarity: ncc (same contrast) or mi (mutual information, different contrasts)")
	fs.StringVar(&o.mask, "mask", "", "optional template-space mask (nonzero voxels count)")
	fs.StringVar(&o.out, "out", "aligned", "output folder for aligned.nii.gz and transform.json")
	fs.BoolVar(&o.json, "json", false, "print the transform report as JSON")
	paths, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(paths) == 0 {
		return usageError("brightfold align: give a scan (NIfTI file or DICOM folder)")
	}
	if o.to == "" {
		return usageError("brightfold align: --to TEMPLATE is required")
	}
	if o.dof != 6 && o.dof != 12 {
		return usageError("brightfold align: --dof %d: want 6 (rigid) or 12 (affine)", o.dof)
	}
	metric, err := register.ParseMetric(o.metric)
	if err != nil {
		return usageError("brightfold align: --metric: %v", err)
	}
	scan, err := volume.Load(paths, volume.LoadOptions{})
	if err != nil {
		return err
	}
	tpl, err := volume.Load([]string{o.to}, volume.LoadOptions{})
	if err != nil {
		return err
	}
	opts := register.Options{DOF: o.dof, Metric: metric, Progress: alignProgress(e.stderr)}
	if o.mask != "" {
		if opts.Mask, err = volume.Load([]string{o.mask}, volume.LoadOptions{}); err != nil {
			return err
		}
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	t0 := time.Now()
	res, err := register.Register(ctx, tpl, scan, opts)
	switch {
	case errors.Is(err, context.Canceled):
		return inputerr.New(o.out, "alignment stopped before it finished; nothing written")
	case errors.Is(err, register.ErrNoOverlap):
		return inputerr.New(paths[0], "does not overlap the template %q enough to align", filepath.Base(o.to))
	case err != nil:
		return inputerr.Wrap(paths[0], fmt.Errorf("align to %q: %w", filepath.Base(o.to), err))
	}
	rep := alignReport{Notice: notice.Full, Matrix: res.Transform, Convention: register.Convention,
		Metric: metric.String(), Value: res.Value, DOF: o.dof, Overlap: res.Overlap,
		Parts: register.Decompose(res.Transform), Stages: res.Stages, Template: filepath.Base(o.to),
		Seconds: time.Since(t0).Seconds()}
	if err := writeAlignment(o.out, res, &rep); err != nil {
		return err
	}
	if o.json {
		enc := json.NewEncoder(e.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	printAlignment(e.stdout, &rep)
	return nil
}

// writeAlignment writes aligned.nii.gz and transform.json into dir, each atomically.
func writeAlignment(dir string, res *register.Result, rep *alignReport) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return inputerr.Wrap(dir, fmt.Errorf("create output folder: %w", err))
	}
	img, js := filepath.Join(dir, "aligned.nii.gz"), filepath.Join(dir, "transform.json")
	rep.Outputs = map[string]string{"aligned": "aligned.nii.gz", "transform": "transform.json"}
	if err := nifti.Write(img, res.Aligned, nifti.WriteOptions{Description: "Aligned to template. " + notice.Short}); err != nil {
		return inputerr.Wrap(img, err)
	}
	b, err := json.MarshalIndent(rep, "", "  ")
	if err != nil {
		return err
	}
	if err := atomicfile.WriteBytes(js, append(b, '\n')); err != nil {
		return inputerr.Wrap(js, err)
	}
	return nil
}

func alignProgress(w io.Writer) func(register.Stage) {
	return func(s register.Stage) {
		kind := map[int]string{6: "rigid", 12: "affine"}[s.DOF]
		if s.Skipped {
			fmt.Fprintf(w, "align: %g mm level, %s: skipped (too little overlap at this level)\n", s.LevelMM, kind)
			return
		}
		fmt.Fprintf(w, "align: %g mm level, %s: %d iterations, metric %.4f\n", s.LevelMM, kind, s.Iterations, s.Value)
	}
}

func printAlignment(w io.Writer, r *alignReport) {
	kind := map[int]string{6: "rigid", 12: "affine"}[r.DOF]
	fmt.Fprintf(w, "Aligned to %s (%s, %d degrees of freedom, metric %s) in %.1f s\n", r.Template, kind, r.DOF, r.Metric, r.Seconds)
	fmt.Fprintf(w, "  final %s %.4f, %.0f%% of the template inside the scan\n", r.Metric, r.Value, 100*r.Overlap)
	p := r.Parts
	fmt.Fprintf(w, "  rotation %.1f°, scales %.3f %.3f %.3f, shear %.3f, shift %.1f %.1f %.1f mm\n",
		p.RotationDeg, p.Scales[0], p.Scales[1], p.Scales[2], p.Shear, p.Translation[0], p.Translation[1], p.Translation[2])
	fmt.Fprintf(w, "  transform (%s):\n", r.Convention)
	for _, row := range r.Matrix {
		fmt.Fprintf(w, "    %10.5f %10.5f %10.5f %10.4f\n", row[0], row[1], row[2], row[3])
	}
	fmt.Fprintf(w, "  wrote %s and %s\n", r.Outputs["aligned"], r.Outputs["transform"])
	fmt.Fprintln(w, notice.Full)
}
