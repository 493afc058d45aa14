package study

import (
	"bytes"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// demoSession opens the embedded demo model folder in the real ONNX Runtime.
func demoSession(t *testing.T) *inference.Session {
	t.Helper()
	if err := inference.InitRuntime(refcheck.ORTLib(t)); err != nil {
		t.Fatal(err)
	}
	b, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
	if err != nil {
		t.Fatal(err)
	}
	s, err := inference.NewSession(b, inference.SessionOptions{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// TestEvaluateEndToEnd runs the evaluation on a small full-size cohort (six
// in-distribution phantoms and one of each shift) through ONNX Runtime,
// writes its outputs and has sklearn's roc_auc_score (Debian
// python3-sklearn) and numpy/scipy recompute every AUROC and ECE from the
// cases CSV.
func TestEvaluateEndToEnd(t *testing.T) {
	refcheck.PythonModule(t, "sklearn")
	refcheck.PythonModule(t, "scipy")
	sess := demoSession(t)
	cfg := Config{Seed: DefaultSeed, N: 6, PerShift: 1, Workers: 2}
	ev, err := Run(sess, assets.DemoModelFolderName, cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	if want := cfg.N + len(phantom.Shifts()); len(ev.Cases) != want {
		t.Fatalf("%d cases, want %d", len(ev.Cases), want)
	}
	for _, c := range ev.Cases {
		if !c.Prepared() {
			t.Logf("%s (%s) not prepared: %s", c.ID, c.Shift, c.NotPrepared)
			continue
		}
		if len(c.Logits) != 2 || len(c.Severities) < 15 || (c.Verdict == fitcheck.OutOfDistribution) != (c.FitScore > 1) {
			t.Errorf("%s (%s): logits %v, %d checks, verdict %s with fit score %v", c.ID, c.Shift, c.Logits, len(c.Severities), c.Verdict, c.FitScore)
		}
	}
	f := ev.Figures
	if f.HeldOut.N != cfg.N || f.FalseAlarms.N != cfg.N || len(f.Shifts) != len(phantom.Shifts()) {
		t.Fatalf("figures over %d held-out, %d false-alarm cases and %d shifts", f.HeldOut.N, f.FalseAlarms.N, len(f.Shifts))
	}
	// The header envelope alone flags these two shifts, whatever the model:
	// 6 mm slices, and Hounsfield units with the CT modality.
	for _, s := range f.Shifts {
		if (s.Shift == phantom.ShiftThick || s.Shift == phantom.ShiftCT) && s.Flagged != s.N {
			t.Errorf("%s: %d of %d flagged", s.Shift, s.Flagged, s.N)
		}
	}
	dir := t.TempDir()
	if err := WriteOutputs(dir, sess.ModelFolder().Card, ev); err != nil {
		t.Fatal(err)
	}
	ref, err := CheckWithSklearn(filepath.Join(dir, CasesFile))
	if err != nil {
		t.Fatal(err)
	}
	ev.Reference = Compare(ev.Figures, ref)
	if !ev.Reference.OK() {
		t.Fatalf("disagreement with sklearn: %v", ev.Reference.Mismatches)
	}
	if ev.Reference.AUROCs < 1+len(f.Shifts)*15 {
		t.Errorf("only %d AUROCs compared", ev.Reference.AUROCs)
	}
	var tab bytes.Buffer
	WriteTable(&tab, ev)
	t.Logf("\n%s", tab.String())
}

// TestInMemoryMatchesFile: a phantom scored in memory gives the result of
// the same phantom written as NIfTI and loaded as `brightfold score` loads
// it (volume.Load, then Session.Score).
func TestInMemoryMatchesFile(t *testing.T) {
	sess := demoSession(t)
	sub := phantom.NewSubject(DefaultSeed, 0, phantom.ShiftNone)
	c, err := scoreSubject(sess, sub, 0)
	if err != nil {
		t.Fatal(err)
	}
	ph, err := phantom.Render(sub, phantom.Options{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "t1.nii")
	if err := nifti.Write(p, ph.Volume, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	v, err := volume.Load([]string{p}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := sess.Score(v)
	if err != nil {
		t.Fatal(err)
	}
	if r.Prediction.Probability != c.Probability || r.FitScore != c.FitScore || r.Verdict != c.Verdict {
		t.Errorf("from file: p %v fit %v %s; in memory: p %v fit %v %s",
			r.Prediction.Probability, r.FitScore, r.Verdict, c.Probability, c.FitScore, c.Verdict)
	}
}

// TestReferenceScansOutOfDistribution: no real scan of Debian's nibabel test
// data (nor pydicom's CT_small.dcm and MR_small.dcm) comes out
// in-distribution for the demo model, which was trained on synthetic
// phantoms only. Every file Brightfold loads must be out-of-distribution
// with at least one failed required check and its sentence, whether or not
// the scan could be prepared for the model; the named scans must load; a
// file that is not a volume (CIFTI) is refused with its name.
func TestReferenceScansOutOfDistribution(t *testing.T) {
	refcheck.Path(t, filepath.Join(NibabelDataDir, "anatomical.nii"))
	refcheck.Path(t, filepath.Join(PydicomDataDir, "CT_small.dcm"))
	sess := demoSession(t)
	res, err := ScoreReal(sess, ReferenceScans())
	if err != nil {
		t.Fatal(err)
	}
	mustLoad := map[string]bool{"anatomical.nii": true, "example4d.nii.gz": true, "example_nifti2.nii.gz": true,
		"functional.nii": true, "standard.nii.gz": true, "reoriented_anat_moved.nii": true, "resampled_anat_moved.nii": true,
		"0.dcm": true, "1.dcm": true, "CT_small.dcm": true, "MR_small.dcm": true}
	for _, r := range res {
		if r.Status == StatusNotLoaded {
			if mustLoad[r.Scan.Name] || !strings.Contains(r.Error, r.Scan.Name) {
				t.Errorf("%s: not loaded: %s", r.Scan.Name, r.Error)
			}
			t.Logf("%s: not loaded: %s", r.Scan.Name, r.Error)
			continue
		}
		delete(mustLoad, r.Scan.Name)
		var reasons []string
		for _, c := range r.Failed {
			if c.Required && strings.TrimSpace(c.Explanation) != "" {
				reasons = append(reasons, c.Explanation)
			}
		}
		if r.Verdict != fitcheck.OutOfDistribution || len(reasons) == 0 || !(r.FitScore > 1) {
			t.Errorf("%s (%s): verdict %s, fit score %v, failed required checks %q", r.Scan.Name, r.Status, r.Verdict, r.FitScore, reasons)
			continue
		}
		t.Logf("%s (%s): %s, %d failed checks; first: %s", r.Scan.Name, r.Status, r.Verdict, len(reasons), reasons[0])
	}
	for n := range mustLoad {
		t.Errorf("%s: not among the evaluated reference scans", n)
	}
}
