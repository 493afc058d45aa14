package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/vbauerster/mpb/v8"
	"github.com/vbauerster/mpb/v8/decor"

	"brightfold/inference"
	"brightfold/inference/modelmake"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/manifest"
	"brightfold/internal/notice"
	"brightfold/internal/ortlib"
)

const modelMakeUsage = "usage: brightfold model make MODEL.onnx --cases CASES --classes NEG,POS --out DIR [--spec SPEC.json] [--spacing MM] [--shape X,Y,Z] [--intensity zscore-head|percentile-minmax] [--name N --version V] [--intended-use TEXT --training-data TEXT] [--seed S] [--template FILE | --build-template] [--align rigid|affine] [--metric ncc|mi]"

// runModelMake makes a model folder from an exported ONNX model and the
// group's labelled cases (package inference/modelmake).
func runModelMake(e *env, args []string) error {
	fs := newFlags(e, "model make")
	cases := fs.String("cases", "", "CSV manifest (path, label, optional split, site, age, sex, ...) or BIDS folder")
	labelCol := fs.String("label-column", "", "participants.tsv column holding the class names (BIDS folder)")
	classes := fs.String("classes", "", "class names in logit order, the positive class last (e.g. control,patient)")
	out := fs.String("out", "", "model folder to create (must not exist)")
	specPath := fs.String("spec", "", "preprocessing spec JSON (default: brightfold prepare --print-spec)")
	spacing := fs.Float64("spacing", 0, "model grid spacing in mm (overrides the spec)")
	shape := fs.String("shape", "", "model grid X,Y,Z voxels (default: the graph's input shape)")
	intensity := fs.String("intensity", "", "intensity normalisation: zscore-head or percentile-minmax (overrides the spec)")
	name := fs.String("name", "", "model name (default: the ONNX file's name)")
	version := fs.String("version", "1.0.0", "model version")
	intended := fs.String("intended-use", "Research use on scans like the group's validation cases. "+notice.Full, "intended use statement")
	training := fs.String("training-data", "Not stated by the user: the cases the model was trained on were not named to Brightfold.", "training data statement")
	seed := fs.Uint64("seed", 1, "seed of the stratified split and the bootstrap")
	valFrac := fs.Float64("validation-fraction", 0.5, "fraction of each class for validation when the manifest has no split column")
	skip := fs.Bool("skip-unreadable", false, "leave out scans that cannot be prepared (listed) instead of refusing")
	var ov modelmake.Overrides
	fs.StringVar(&ov.Input, "input", "", "graph input name (default: found)")
	fs.StringVar(&ov.Layout, "layout", "", "input layout NCDHW or NCXYZ (default NCDHW)")
	fs.StringVar(&ov.Logits, "logits", "", "logits tensor (default: found)")
	fs.StringVar(&ov.Features, "features", "", "penultimate features tensor (default: the input of the last Gemm/MatMul)")
	fs.StringVar(&ov.Activation, "activation", "", "softmax or sigmoid (default: by the number of logits)")
	ortLib := fs.String("ort-lib", "", "path of the ONNX Runtime library "+ortlib.FileName)
	threads := fs.Int("threads", 0, "ONNX Runtime intra-op threads (default: all cores)")
	align := templateFlags(fs)
	fs.Usage = func() { fmt.Fprintln(e.stderr, modelMakeUsage); fs.PrintDefaults() }
	pos, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 || *cases == "" || *classes == "" || *out == "" {
		return usageError("%s", modelMakeUsage)
	}
	if _, err := os.Stat(*out); err == nil {
		return inputerr.New(*out, "already exists; model make creates a new model folder (remove it or choose another --out)")
	}
	alignOpt, err := align.options()
	if err != nil {
		return err
	}
	model, err := readModelFile(pos[0])
	if err != nil {
		return err
	}
	g, err := modelmake.Discover(pos[0], model, ov)
	if err != nil {
		return err
	}
	spec, err := makeSpec(*specPath, *spacing, *shape, *intensity, g)
	if err != nil {
		return err
	}
	m, err := manifest.Read(*cases, *labelCol)
	if err != nil {
		return err
	}
	if _, err := modelmake.CheckManifest(m, splitList(*classes)); err != nil {
		return err
	}
	if err := modelmake.CheckGraph(pos[0], g, splitList(*classes)); err != nil {
		return err
	}
	if *name == "" {
		*name = strings.TrimSuffix(filepath.Base(pos[0]), filepath.Ext(pos[0]))
	}
	fmt.Fprintln(e.stderr, notice.Full)
	for _, n := range g.Notes {
		fmt.Fprintln(e.stderr, "graph: "+n)
	}
	lib, err := ortlib.Find(*ortLib)
	if err != nil {
		return inputerr.New(*ortLib, "%v", err)
	}
	if err := inference.InitRuntime(lib); err != nil {
		return err
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	prog, finish := progressReporter(e.stderr, len(m.Cases), "cases")
	opt := modelmake.Options{Classes: splitList(*classes), Spec: spec, Name: *name, Version: *version,
		IntendedUse: *intended, TrainingData: *training, Seed: *seed, ValidationFraction: *valFrac,
		SkipUnreadable: *skip, Threads: *threads, Progress: prog,
		Log: func(f string, a ...any) { fmt.Fprintf(e.stderr, f+"\n", a...) }, Align: alignOpt}
	t0 := time.Now()
	res, err := modelmake.Make(ctx, pos[0], model, g, m, opt)
	finish(err == nil)
	if err != nil {
		if ctx.Err() != nil {
			return inputerr.New(*out, "interrupted; nothing was written")
		}
		return err
	}
	for _, u := range res.Unreadable {
		fmt.Fprintln(e.stderr, "skipped (cannot be prepared): "+u)
	}
	if err := writeFolderWhole(*out, res.Card, res.Model, res.Files); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "%s\nwrote %s from %d cases in %.1f s (%.2f cases/s)\n", notice.Full, *out, len(res.Cases), time.Since(t0).Seconds(),
		float64(len(res.Cases))/time.Since(t0).Seconds())
	writeFigures(e.stdout, res.Card)
	return nil
}

func readModelFile(p string) ([]byte, error) {
	st, err := os.Stat(p)
	if err != nil {
		return nil, inputerr.Wrap(p, err)
	}
	if st.Size() > inference.MaxModelBytes {
		return nil, inputerr.New(p, "larger than %d bytes", inference.MaxModelBytes)
	}
	b, err := os.ReadFile(p)
	if err != nil {
		return nil, inputerr.Wrap(p, err)
	}
	return b, nil
}

// makeSpec starts from --spec or the default and applies --spacing, --shape
// (or the graph's static spatial shape) and --intensity.
func makeSpec(path string, spacing float64, shape, intensity string, g modelmake.Graph) (preprocess.Spec, error) {
	s := preprocess.DefaultSpec()
	if path != "" {
		b, err := os.ReadFile(path)
		if err != nil {
			return s, inputerr.Wrap(path, err)
		}
		if s, err = preprocess.ParseSpec(b); err != nil {
			return s, inputerr.Wrap(path, err)
		}
	}
	if spacing != 0 {
		s.SpacingMm = [3]float64{spacing, spacing, spacing}
	}
	sp := g.Shape[2:]
	if sp[0] > 0 && sp[1] > 0 && sp[2] > 0 {
		if g.Layout == preprocess.LayoutNCXYZ {
			s.Shape = [3]int{int(sp[0]), int(sp[1]), int(sp[2])}
		} else {
			s.Shape = [3]int{int(sp[2]), int(sp[1]), int(sp[0])}
		}
	}
	if shape != "" {
		parts := strings.Split(shape, ",")
		if len(parts) != 3 {
			return s, usageError("--shape: want X,Y,Z, got %q", shape)
		}
		var want [3]int
		for i, p := range parts {
			v, err := strconv.Atoi(strings.TrimSpace(p))
			if err != nil {
				return s, usageError("--shape: %q is not a whole number", p)
			}
			want[i] = v
		}
		if s.Shape != want && sp[0] > 0 && sp[1] > 0 && sp[2] > 0 {
			return s, usageError("--shape %v disagrees with the graph's input shape %v", want, g.Shape)
		}
		s.Shape = want
	}
	switch intensity {
	case "":
	case preprocess.NormZScoreHead:
		s.Intensity = preprocess.Intensity{Method: intensity, Clip: 5}
	case preprocess.NormPercentileMinMax:
		s.Intensity = preprocess.Intensity{Method: intensity, LowPercentile: 1, HighPercentile: 99}
	default:
		return s, usageError("--intensity: want %s or %s, got %q", preprocess.NormZScoreHead, preprocess.NormPercentileMinMax, intensity)
	}
	if err := s.Validate(); err != nil {
		return s, usageError("%v", err)
	}
	return s, nil
}

func splitList(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

// writeFolderWhole writes the model folder into a temporary sibling and
// renames it into place, so that the folder appears complete or not at all.
func writeFolderWhole(dir string, card *inference.Card, model []byte, extra map[string][]byte) error {
	parent := filepath.Dir(filepath.Clean(dir))
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(dir)+".partial-")
	if err != nil {
		return inputerr.Wrap(dir, err)
	}
	if err := inference.WriteModelFolderFiles(tmp, card, model, extra); err != nil {
		os.RemoveAll(tmp)
		return fmt.Errorf("write %s: %w", dir, err)
	}
	if err := os.Chmod(tmp, 0o755); err != nil {
		os.RemoveAll(tmp)
		return err
	}
	if err := os.Rename(tmp, dir); err != nil {
		os.RemoveAll(tmp)
		return inputerr.Wrap(dir, err)
	}
	return nil
}

// progressReporter shows a progress bar with ETA on a terminal and plain
// lines (about every 10 %) otherwise. finish stops the bar.
func progressReporter(w io.Writer, total int, what string) (func(done, total int), func(ok bool)) {
	if f, ok := w.(*os.File); ok && isTerminal(f) {
		p := mpb.New(mpb.WithOutput(w), mpb.WithWidth(40))
		bar := p.AddBar(int64(total), mpb.PrependDecorators(decor.Name(what+" "), decor.CountersNoUnit("%d/%d")),
			mpb.AppendDecorators(decor.Percentage(), decor.Name(" ETA "), decor.AverageETA(decor.ET_STYLE_GO)))
		last := 0
		return func(done, _ int) {
				bar.IncrBy(done - last)
				last = done
			}, func(ok bool) {
				if !ok {
					bar.Abort(false)
				}
				p.Wait()
			}
	}
	t0 := time.Now()
	next := 0
	return func(done, total int) {
		if done < next && done != total {
			return
		}
		next = done + max(1, total/10)
		el := time.Since(t0).Seconds()
		eta := el / float64(done) * float64(total-done)
		fmt.Fprintf(w, "%s: %d/%d (%.0f s elapsed, about %.0f s left)\n", what, done, total, el, eta)
	}, func(bool) {}
}

func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
