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
	json, showPaths, showProb             bool
	threads, volumeIndex                  int
	report                                caseReportOptions
}

// relevanceMethods are the --map values (package overlay; scoremap.go).
var relevanceMethods = []string{"none", "lrp", "ig", "gradinput", "occlusion"}

// runScore scores one scan with a model folder: prediction, calibrated
// probability and the fit check, as text or JSON, and result.json with --out.
func runScore(e *env, args []string) error {
	fs := newFlags(e, "score")
	var o scoreOptions
	fs.StringVar(&o.model, "model", "", "model folder `MODEL`: a folder or .zip with model.onnx and card.json (default: the embedded demo model folder)")
	fs.StringVar(&o.out, "out", "", "folder `DIR` for the result set (result.json, with --map the map files); created if needed, replaced whole")
	fs.StringVar(&o.mapMethod, "map", "none", "relevance map `METHOD`: "+strings.Join(relevanceMethods, "|"))
	fs.BoolVar(&o.json, "json", false, "print JSON instead of text")
	fs.BoolVar(&o.showPaths, "show-paths", false, "name the input by its path on the screen, in the JSON, result.json, relevance.json and the report (default: no path or file name, which may carry names)")
	fs.BoolVar(&o.showProb, "show-probability", false, "also print the probability when the fit check fails (labelled unreliable)")
	fs.StringVar(&o.ortLib, "ort-lib", "", "`PATH` of the ONNX Runtime library "+ortlib.FileName)
	fs.IntVar(&o.threads, "threads", 0, "`N` ONNX Runtime intra-op threads; more than the cores are cut to the cores (default: all cores)")
	fs.IntVar(&o.volumeIndex, "volume", 0, "volume `N` of a 4D NIfTI input to score (from 0)")
	fs.StringVar(&o.series, "series", "", "DICOM series `UID` (or key) to score when the input holds several")
	caseReportFlags(fs, &o.report)
	fs.Usage = commandHelp(fs, "score PATH [--model MODEL] [--map "+strings.Join(relevanceMethods, "|")+"] [--out DIR] [--json] [--report FILE.pdf [--session FILE] [--meeting]]")
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
	// cheap checks first: the inputs exist and are files or folders, and
	// --out can take a result set
	if paths, err = volume.CheckPaths(paths); err != nil {
		return err
	}
	if o.out != "" {
		if err := checkOutDir(o.out); err != nil {
			return err
		}
	}
	return scoreScan(e, o, paths)
}

// scoreScan scores the checked paths and writes the outputs.
func scoreScan(e *env, o scoreOptions, paths []string) error {
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
	rep := scoreReport(shownInput(o, paths), v, mf, res)
	if !o.showPaths && o.model != "" {
		rep.Model.Source = filepath.Base(o.model)
	}
	rep.TimingMs["load"] = loadMs
	var set *outSet
	if o.out != "" {
		if set, err = beginOutSet(o.out); err != nil {
			return err
		}
		defer set.abort()
	}
	if err := addMap(e, o, paths, v, mf, sess, res, rep, set); err != nil {
		return err
	}
	rep.TimingMs["total"] = msSince(t0)
	if set != nil {
		if err := writeResult(o, set.tmp, rep); err != nil {
			return err
		}
		if err := set.commit(); err != nil {
			return err
		}
	}
	if o.report.file != "" {
		if err := writeCaseReport(o, paths, v, mf, sess, res, rep); err != nil {
			return err
		}
	}
	if o.json {
		return report.EncodeScore(e.stdout, rep)
	}
	writeScoreText(e.stdout, rep, res, mf.Card, o.showProb)
	return nil
}

// addMap adds the --map relevance map to the result set, or, when the scan
// could not be prepared, the reason inside the result (the same scan gets
// the same result with and without --map).
func addMap(e *env, o scoreOptions, paths []string, v *volume.Volume, mf *inference.ModelFolder, sess *inference.Session, res *inference.Result, rep *report.Score, set *outSet) error {
	if o.mapMethod == "none" {
		return nil
	}
	if res.Prepared == nil {
		rep.Relevance = &report.Relevance{Method: o.mapMethod,
			Problem: "no map: the scan could not be prepared for the model, so the model was not run"}
		return nil
	}
	return addRelevance(e, o, set.tmp, paths, v, mf, sess, res, rep)
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

// shownInput is how every output of score names the input: its paths with
// --show-paths, else nothing (folder and file names often carry a
// patient's name or record number).
func shownInput(o scoreOptions, paths []string) string {
	if !o.showPaths {
		return ""
	}
	return strings.Join(paths, " ")
}

// writeResult writes result.json into dir (the set's temporary folder).
func writeResult(o scoreOptions, dir string, rep *report.Score) error {
	if _, err := report.WriteScore(dir, rep); err != nil {
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
	rep := report.NewScore(input, v, b, r)
	if rep.Prediction != nil && r.Verdict == fitcheck.OutOfDistribution {
		rep.Prediction.DoNotUse = "the fit check failed: the scan is unlike the training scans, so this probability is unreliable and must not be used"
	}
	return rep
}

// writeScoreText prints the result for a reader: notice first and last.
// When the fit check fails, the verdict and its causes lead and the
// prediction is withheld unless asked for (--show-probability), then
// labelled unreliable.
func writeScoreText(w io.Writer, rep *report.Score, r *inference.Result, card *inference.Card, showProb bool) {
	fmt.Fprintln(w, notice.Full)
	fmt.Fprintln(w)
	ood := rep.OOD.Verdict == fitcheck.OutOfDistribution
	if ood {
		writeFitText(w, rep, r)
		fmt.Fprintln(w)
	}
	in := rep.Input
	desc := fmt.Sprintf("%s, %d×%d×%d voxels, %.2f×%.2f×%.2f mm, %s", in.Format,
		in.Dims[0], in.Dims[1], in.Dims[2], in.SpacingMm[0], in.SpacingMm[1], in.SpacingMm[2], in.Orientation)
	if in.Path != "" {
		fmt.Fprintf(w, "Scan:        %s (%s)\n", in.Path, desc)
	} else {
		fmt.Fprintf(w, "Scan:        %s; path not shown (--show-paths shows it)\n", desc)
	}
	fmt.Fprintf(w, "Model:       %s %s (sha256 %.12s…)\n", rep.Model.Name, rep.Model.Version, rep.Model.SHA256)
	fmt.Fprintln(w)
	p := rep.Prediction
	switch {
	case p == nil:
		fmt.Fprintln(w, "Prediction:  none. The scan could not be prepared for the model, so the model was not run.")
	case ood && !showProb:
		fmt.Fprintln(w, "Probability: withheld, because the fit check failed (--show-probability prints it, labelled unreliable).")
	case ood:
		fmt.Fprintf(w, "Probability: UNRELIABLE (the fit check failed; do not use): %s that the scan shows %q; predicted %s\n",
			inference.FormatProbability(p.Probability), className(p.PositiveClass), className(p.Label))
	default:
		fmt.Fprintf(w, "Prediction:  %s\n", className(p.Label))
		fmt.Fprintf(w, "Probability: %s that the scan shows %q (%s, temperature %.2f)\n", inference.FormatProbability(p.Probability), className(p.PositiveClass), inference.CalibrationLabel(card), p.Temperature)
	}
	if !ood {
		fmt.Fprintln(w)
		writeFitText(w, rep, r)
	}
	for _, msg := range rep.Warnings {
		fmt.Fprintf(w, "Warning:     %s\n", msg)
	}
	writeRelevanceText(w, rep)
	fmt.Fprintf(w, "Time:        %.0f ms\n", rep.TimingMs["total"])
	fmt.Fprintln(w)
	fmt.Fprintln(w, notice.Full)
}

// className is a class name for a reader: underscores as spaces.
func className(s string) string { return strings.ReplaceAll(s, "_", " ") }

// writeFitText prints the fit-check verdict and the failed checks.
func writeFitText(w io.Writer, rep *report.Score, r *inference.Result) {
	failed := r.FailedChecks()
	if rep.OOD.Verdict == fitcheck.OutOfDistribution {
		fmt.Fprintln(w, "Fit check:   OUT-OF-DISTRIBUTION. This scan is unlike the scans the model was trained on; the model's output cannot be relied on.")
	} else {
		fmt.Fprintln(w, "Fit check:   in-distribution. The scan resembles the training scans in every required check.")
	}
	writeCausesText(w, r)
	fmt.Fprintf(w, "  (%d checks, %d failed, %s; fit score %s; --json lists every check with its value and threshold)\n",
		len(r.Checks), len(failed), inference.Plural(inference.CountCauses(r.Causes), "cause", "causes"), inference.FormatValue(r.FitScore))
}

// writeCausesText lists the causes of the failed checks (inference.GroupCauses),
// each with the sentences of the checks that saw it.
func writeCausesText(w io.Writer, r *inference.Result) {
	byName := map[string]fitcheck.Check{}
	for _, c := range r.Checks {
		byName[c.Name] = c
	}
	for _, cause := range r.Causes {
		if cause.Consequence {
			fmt.Fprintf(w, "  %s (%s, not counted as causes): %s\n", cause.Title, inference.Plural(len(cause.Checks), "check", "checks"), cause.Explanation)
		} else {
			fmt.Fprintf(w, "  * %s: %s Seen by %s:\n", inference.CauseTitle(cause), cause.Explanation, inference.Plural(len(cause.Checks), "check", "checks"))
		}
		for _, n := range cause.Checks {
			fmt.Fprintf(w, "    - %s: %s\n", inference.CheckTitle(n), byName[n].Explanation)
		}
	}
}
