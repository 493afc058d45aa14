package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/ortlib"
	"brightfold/internal/report"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
)

type scoreOptions struct {
	model, out, mapMethod, ortLib, series string
	json, showPaths, hidePaths            bool
	threads, volumeIndex                  int
}

// relevanceMethods are the --map values (package overlay; scoremap.go).
var relevanceMethods = []string{"none", "lrp", "ig", "gradinput", "occlusion"}

// runScore scores one scan with a model folder: prediction, calibrated
// probability and the fit check, as text or JSON, and result.json with --out.
func runScore(e *env, args []string) error {
	fs := newFlags(e, "score")
	var o scoreOptions
	fs.StringVar(&o.model, "model", "", "model folder: a folder or .zip with model.onnx and card.json (default: the embedded demo model folder)")
	fs.StringVar(&o.out, "out", "", "folder to write result.json into (created if needed)")
	fs.StringVar(&o.mapMethod, "map", "none", "relevance map: "+strings.Join(relevanceMethods, "|"))
	fs.BoolVar(&o.json, "json", false, "print JSON instead of text")
	fs.BoolVar(&o.showPaths, "show-paths", false, "write the full input path into result.json (default: the file name only)")
	fs.BoolVar(&o.hidePaths, "hide-paths", false, "print only the input's file name, also on the screen")
	fs.StringVar(&o.ortLib, "ort-lib", "", "path of the ONNX Runtime library "+ortlib.FileName)
	fs.IntVar(&o.threads, "threads", 0, "ONNX Runtime intra-op threads (default: all cores)")
	fs.IntVar(&o.volumeIndex, "volume", 0, "volume of a 4D NIfTI input to score")
	fs.StringVar(&o.series, "series", "", "DICOM series UID to score when the input holds several")
	fs.Usage = func() {
		fmt.Fprintln(e.stderr, "usage: brightfold score PATH [--model MODEL] [--map "+strings.Join(relevanceMethods, "|")+"] [--out DIR] [--json]")
		fs.PrintDefaults()
	}
	paths, err := parseFlags(fs, args)
	if err != nil {
		return err
	}
	if len(paths) == 0 {
		return usageError("brightfold score: give a scan (a NIfTI file, DICOM files or a DICOM folder)")
	}
	if err := checkMap(o); err != nil {
		return err
	}
	if o.threads < 0 {
		return usageError("brightfold score: --threads must be 0 (all cores) or more, got %d", o.threads)
	}
	t0 := time.Now()
	mf, err := openModelFolder(o.model)
	if err != nil {
		return err
	}
	sess, err := openSession(mf, o.ortLib, o.threads)
	if err != nil {
		return err
	}
	defer sess.Close()
	tLoad := time.Now()
	v, err := volume.Load(paths, volume.LoadOptions{VolumeIndex: o.volumeIndex, SeriesUID: o.series})
	if err != nil {
		return err
	}
	loadMs := msSince(tLoad)
	res, err := sess.Score(v)
	var np *inference.NotPreparedError
	if errors.As(err, &np) {
		// a scan the model cannot take is a result: out-of-distribution, with reasons
		res, err = np.Result, nil
	}
	if err != nil {
		return err
	}
	input := strings.Join(paths, " ")
	rep := scoreReport(input, v, mf, res)
	rep.TimingMs["load"] = loadMs
	if o.mapMethod != "none" {
		if res.Prepared == nil {
			return inputerr.New(input, "--map %s: the scan could not be prepared for the model, so there is no relevance map", o.mapMethod)
		}
		if err := addRelevance(e, o, paths, v, mf, sess, res, rep); err != nil {
			return err
		}
	}
	rep.TimingMs["total"] = msSince(t0)
	if o.hidePaths {
		rep.Input.Path = baseNames(paths)
		if o.model != "" {
			rep.Model.Source = filepath.Base(o.model)
		}
	}
	if o.out != "" {
		if err := writeResult(o, paths, rep); err != nil {
			return err
		}
	}
	if o.json {
		return report.EncodeScore(e.stdout, rep)
	}
	writeScoreText(e.stdout, rep, res)
	return nil
}

func msSince(t time.Time) float64 { return float64(time.Since(t).Microseconds()) / 1000 }

// openModelFolder loads the model folder named by --model, or the embedded demo model folder.
func openModelFolder(p string) (*inference.ModelFolder, error) {
	if p == "" {
		return demoModelFolder()
	}
	return inference.LoadModelFolder(p)
}

// demoModelFolder is the model folder used without --model: the embedded demo model folder.
func demoModelFolder() (*inference.ModelFolder, error) {
	b, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
	if err != nil {
		return nil, fmt.Errorf("%s: %w", assets.DemoModelFolderName, err)
	}
	b.Source = assets.DemoModelFolderName
	return b, nil
}

// openSession finds and loads ONNX Runtime and makes the model folder's session.
func openSession(b *inference.ModelFolder, libFlag string, threads int) (*inference.Session, error) {
	lib, err := ortlib.Find(libFlag)
	if err != nil {
		return nil, inputerr.New(libFlag, "%v", err)
	}
	if err := inference.InitRuntime(lib); err != nil {
		return nil, err
	}
	return inference.NewSession(b, inference.SessionOptions{IntraOpThreads: threads})
}

func baseNames(paths []string) string {
	names := make([]string, len(paths))
	for i, p := range paths {
		names[i] = filepath.Base(p)
	}
	return strings.Join(names, " ")
}

// writeResult writes DIR/result.json; the input path is reduced to file
// names unless --show-paths.
func writeResult(o scoreOptions, paths []string, rep *report.Score) error {
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return inputerr.Wrap(o.out, fmt.Errorf("create output folder: %w", err))
	}
	c := *rep
	if !o.showPaths {
		c.Input.Path = baseNames(paths)
		if o.model != "" {
			c.Model.Source = filepath.Base(o.model)
		}
	}
	if _, err := report.WriteScore(o.out, &c); err != nil {
		var pe *os.PathError
		if errors.As(err, &pe) {
			return inputerr.Wrap(o.out, err)
		}
		return err
	}
	return nil
}

// scoreReport is the JSON form of a result.
func scoreReport(input string, v *volume.Volume, b *inference.ModelFolder, r *inference.Result) *report.Score {
	return report.NewScore(input, v, b, r)
}

// writeScoreText prints the result for a reader: notice first and last.
func writeScoreText(w io.Writer, rep *report.Score, r *inference.Result) {
	fmt.Fprintln(w, notice.Full)
	fmt.Fprintln(w)
	in := rep.Input
	fmt.Fprintf(w, "Scan:        %s (%s, %d×%d×%d voxels, %.2f×%.2f×%.2f mm, %s)\n", in.Path, in.Format,
		in.Dims[0], in.Dims[1], in.Dims[2], in.SpacingMm[0], in.SpacingMm[1], in.SpacingMm[2], in.Orientation)
	fmt.Fprintf(w, "Model:       %s %s (sha256 %.12s…)\n", rep.Model.Name, rep.Model.Version, rep.Model.SHA256)
	fmt.Fprintln(w)
	if p := rep.Prediction; p != nil {
		fmt.Fprintf(w, "Prediction:  %s\n", p.Label)
		fmt.Fprintf(w, "Probability: %s that the scan shows %q (calibrated with temperature %.2f)\n", inference.FormatProbability(p.Probability), p.PositiveClass, p.Temperature)
	} else {
		fmt.Fprintln(w, "Prediction:  none. The scan could not be prepared for the model, so the model was not run.")
	}
	fmt.Fprintln(w)
	failed := r.FailedChecks()
	if rep.OOD.Verdict == fitcheck.OutOfDistribution {
		fmt.Fprintln(w, "Fit check:   OUT-OF-DISTRIBUTION. This scan is unlike the scans the model was trained on; do not rely on the probability.")
	} else {
		fmt.Fprintln(w, "Fit check:   in-distribution. The scan resembles the training scans in every required check.")
	}
	writeCausesText(w, r)
	fmt.Fprintf(w, "  (%d checks, %d failed, %s; fit score %s; --json lists every check with its value and threshold)\n",
		len(r.Checks), len(failed), inference.Plural(len(r.Causes), "cause", "causes"), inference.FormatValue(r.FitScore))
	for _, msg := range rep.Warnings {
		fmt.Fprintf(w, "Warning:     %s\n", msg)
	}
	writeRelevanceText(w, rep)
	fmt.Fprintf(w, "Time:        %.0f ms\n", rep.TimingMs["total"])
	fmt.Fprintln(w)
	fmt.Fprintln(w, notice.Full)
}

// writeCausesText lists the causes of the failed checks (inference.GroupCauses),
// each with the sentences of the checks that saw it.
func writeCausesText(w io.Writer, r *inference.Result) {
	byName := map[string]fitcheck.Check{}
	for _, c := range r.Checks {
		byName[c.Name] = c
	}
	for _, cause := range r.Causes {
		tag := ""
		if !cause.Required {
			tag = " (advisory)"
		}
		fmt.Fprintf(w, "  * %s%s: %s Seen by %s:\n", cause.Title, tag, cause.Explanation, inference.Plural(len(cause.Checks), "check", "checks"))
		for _, n := range cause.Checks {
			fmt.Fprintf(w, "    - %s: %s\n", inference.CheckTitle(n), byName[n].Explanation)
		}
	}
}
