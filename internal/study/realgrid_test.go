package study

import (
	"fmt"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/fitcheck"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

// headerChecks are the checks that read only the header (and the
// volume's shape); imageChecks read the head mask and noise; modelChecks
// are the intensity profile and the model's features.
var (
	headerChecks = []string{inference.CheckModality, inference.CheckSpacing, inference.CheckSliceThickness, inference.CheckFOV,
		inference.CheckSlices, inference.CheckAnisotropy, inference.CheckOrientation, inference.CheckSingleVolume}
	modelChecks = []string{inference.CheckIntensityProfile, inference.CheckMahalanobis}
)

// The strongest real-scan test this machine allows. Every real scan of the
// evaluation is small or a single slice, so the header checks stop it and
// the intensity and feature checks are never the ones that must see it.
// Here nibabel's anatomical.nii (a real T1-weighted MR scan, 33×41×25 at
// 2 mm, Debian python3-nibabel test data) is resampled by scipy
// (testdata/resample_anatomical.py) onto the demo model's grid, 160×192×160
// at 1 mm along RAS, so that every header check passes; once at its own
// size and once enlarged 1.85 times about its centre so that the head's
// volume reaches the training range. The real scan's contrast, texture and
// noise differ from the phantoms': the verdict must be out-of-distribution
// and the intensity profile or the feature distance must fail, with no
// header check failing.
func TestRealScanOnModelGrid(t *testing.T) {
	src := refcheck.Path(t, filepath.Join(NibabelDataDir, "anatomical.nii"))
	refcheck.PythonModule(t, "nibabel")
	refcheck.PythonModule(t, "scipy")
	sess := demoSession(t)
	for _, scale := range []float64{1, 1.85} {
		out := filepath.Join(t.TempDir(), fmt.Sprintf("anatomical-1mm-x%g.nii", scale))
		var info map[string]any
		refcheck.RunPython(t, filepath.Join("testdata", "resample_anatomical.py"), &info, src, out, fmt.Sprint(scale))
		v, err := volume.Load([]string{out}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		r, notPrepared, err := Score(sess, v)
		if err != nil {
			t.Fatal(err)
		}
		if notPrepared != "" {
			t.Fatalf("scale %g: not prepared: %s", scale, notPrepared)
		}
		var lines []string
		failed := map[string]bool{}
		for _, c := range r.Checks {
			lines = append(lines, fmt.Sprintf("%-24s %-5v value %.4g, threshold %s", c.Name, c.Pass, c.Value, c.Threshold))
			if c.Required && !c.Pass {
				failed[c.Name] = true
			}
		}
		t.Logf("anatomical.nii on the 1 mm grid, head enlarged ×%g (%v): %s, fit score %.3g, P(%s) %.3f\n%s",
			scale, info["input_dims"], r.Verdict, r.FitScore, sess.ModelFolder().Card.PositiveClass, r.Prediction.Probability, strings.Join(lines, "\n"))
		for _, name := range headerChecks {
			if failed[name] {
				t.Errorf("scale %g: header check %s failed; the resampled scan should pass every header check", scale, name)
			}
		}
		if r.Verdict != fitcheck.OutOfDistribution {
			t.Errorf("scale %g: a real MR scan, unlike every phantom, was judged %s", scale, r.Verdict)
		}
		if !slices.ContainsFunc(modelChecks, func(n string) bool { return failed[n] }) {
			t.Errorf("scale %g: neither the intensity profile nor the feature distance caught the real scan", scale)
		}
	}
}
