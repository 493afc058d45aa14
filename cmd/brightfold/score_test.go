package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/internal/notice"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/dicom"
	"brightfold/internal/volume/nifti"
)

// tinyModelFolder copies the inference package's test model and its example card
// into a model folder folder.
func tinyModelFolder(t *testing.T) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "tiny")
	os.MkdirAll(dir, 0o755)
	src := filepath.Join(refcheck.RepoRoot(), "inference", "testdata")
	for from, to := range map[string]string{"tiny3d.onnx": "model.onnx", "card-example.json": "card.json"} {
		b, err := os.ReadFile(filepath.Join(src, from))
		if err != nil {
			t.Fatal(err)
		}
		os.WriteFile(filepath.Join(dir, to), b, 0o644)
	}
	return dir
}

// headNIfTI writes a 1 mm 64³ ellipsoid "head" like the ones the example
// card was fitted on.
func headNIfTI(t *testing.T) string {
	t.Helper()
	a := volume.Diag([3]float64{1, 1, 1}, [3]float64{-32, -32, -32})
	v, _ := volume.New([3]int{64, 64, 64}, a)
	for k := 0; k < 64; k++ {
		for j := 0; j < 64; j++ {
			for i := 0; i < 64; i++ {
				p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
				x, y, z := p[0]/18, p[1]/22, p[2]/17
				if x*x+y*y+z*z <= 1 {
					// deterministic texture standing in for noise
					v.Data[v.Index(i, j, k)] = float32(100 + 30*x + 20*y + 10*z + 4*math.Sin(float64(i*7+j*13+k*29)))
				}
			}
		}
	}
	p := filepath.Join(t.TempDir(), "HMRU-0001_T1w.nii.gz")
	if err := nifti.Write(p, v, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestScoreJSONAndResultFile(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	scan := headNIfTI(t)
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := runCLI("score", scan, "--model", mf, "--json", "--out", out, "--ort-lib", lib, "--threads", "1")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got map[string]any
	if err := json.Unmarshal([]byte(stdout), &got); err != nil {
		t.Fatalf("JSON: %v\n%s", err, stdout)
	}
	for _, k := range []string{"notice", "input", "model", "prediction", "ood", "timing_ms"} {
		if _, ok := got[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	if got["notice"] != notice.Full {
		t.Error("JSON notice missing")
	}
	in := got["input"].(map[string]any)
	if _, ok := in["path"]; ok || in["format"] != "nifti" || in["orientation"] != "RAS" {
		t.Errorf("input block: %v", in)
	}
	pred := got["prediction"].(map[string]any)
	for _, k := range []string{"label", "probability", "probabilities", "temperature"} {
		if _, ok := pred[k]; !ok {
			t.Errorf("prediction lacks %q", k)
		}
	}
	ood := got["ood"].(map[string]any)
	if v := ood["verdict"]; v != "in-distribution" && v != "out-of-distribution" {
		t.Errorf("verdict %v", v)
	}
	for _, c := range ood["checks"].([]any) {
		m := c.(map[string]any)
		for _, k := range []string{"name", "value", "threshold", "pass", "explanation"} {
			if _, ok := m[k]; !ok {
				t.Errorf("check %v lacks %q", m["name"], k)
			}
		}
	}
	b, err := os.ReadFile(filepath.Join(out, "result.json"))
	if err != nil {
		t.Fatal(err)
	}
	var res map[string]any
	json.Unmarshal(b, &res)
	if p, ok := res["input"].(map[string]any)["path"]; ok {
		t.Errorf("result.json path %v, want no path without --show-paths", p)
	}
	entries, _ := os.ReadDir(out)
	if len(entries) != 1 {
		t.Errorf("out folder holds %d entries (temporary files left?)", len(entries))
	}
	// text form: notice first and last, prediction, fit check, model
	code, stdout, stderr = runCLI("score", scan, "--model", mf, "--ort-lib", lib)
	if code != 0 {
		t.Fatalf("text: exit %d: %s", code, stderr)
	}
	lines := strings.Split(strings.TrimSpace(stdout), "\n")
	if lines[0] != notice.Full || lines[len(lines)-1] != notice.Full {
		t.Error("text form must start and end with the notice")
	}
	for _, want := range []string{"Probability:", "Fit check:", "tiny3d-test 0.1"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("text lacks %q:\n%s", want, stdout)
		}
	}
	// the probability, when shown, is called calibrated only when the card
	// rescales it
	if strings.Contains(stdout, "Prediction:") && !strings.Contains(stdout, "(calibrated, temperature") && !strings.Contains(stdout, "(calibration checked, not rescaled, temperature 1.00)") {
		t.Errorf("text does not say how the probability was calibrated:\n%s", stdout)
	}
}

// pydicomDir holds Debian python3-pydicom's test files.
const pydicomDir = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

// realScans are the reference scans of Debian's python3-nibabel and
// python3-pydicom test data that score must call out of distribution.
var realScans = []string{
	filepath.Join(nibabelDir, "anatomical.nii"), filepath.Join(nibabelDir, "example4d.nii.gz"),
	filepath.Join(nibabelDir, "example_nifti2.nii.gz"), filepath.Join(nibabelDir, "functional.nii"),
	filepath.Join(nibabelDir, "reoriented_anat_moved.nii"), filepath.Join(nibabelDir, "resampled_anat_moved.nii"),
	filepath.Join(nibabelDir, "standard.nii.gz"), filepath.Join(nibabelDir, "0.dcm"),
	filepath.Join(pydicomDir, "MR_small.dcm"), filepath.Join(pydicomDir, "CT_small.dcm"),
}

// Real scans from Debian's python3-nibabel and python3-pydicom test data are
// out of distribution for a model fitted on 1 mm synthetic heads, each with
// reasons (single slices and scans without a head come out with the failed
// preparation check and no prediction).
func TestScoreNibabelScansOutOfDistribution(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	for _, p := range realScans {
		name := filepath.Base(p)
		refcheck.Path(t, p)
		code, stdout, stderr := runCLI("score", p, "--model", mf, "--json", "--ort-lib", lib)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", name, code, stderr)
		}
		var got struct {
			OOD struct {
				Verdict string
				Checks  []struct {
					Name        string
					Pass        bool
					Explanation string
				}
			}
		}
		json.Unmarshal([]byte(stdout), &got)
		var failed []string
		for _, c := range got.OOD.Checks {
			if !c.Pass {
				failed = append(failed, c.Name)
			}
		}
		if got.OOD.Verdict != "out-of-distribution" || len(failed) == 0 {
			t.Errorf("%s: verdict %q", name, got.OOD.Verdict)
		}
		t.Logf("%s: out-of-distribution; failed %v", name, failed)
	}
}

func TestScoreAndModelFolderErrors(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	scan := headNIfTI(t)
	tampered := tinyModelFolder(t)
	m := filepath.Join(tampered, "model.onnx")
	b, _ := os.ReadFile(m)
	b[len(b)-5] ^= 0xff
	os.WriteFile(m, b, 0o644)
	flat, _ := volume.New([3]int{20, 20, 20}, volume.Identity())
	flatPath := filepath.Join(t.TempDir(), "flat.nii")
	if err := nifti.Write(flatPath, flat, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"score", filepath.Join(t.TempDir(), "missing.nii"), "--model", mf, "--ort-lib", lib}, "missing.nii"},
		{[]string{"score", scan, "--model", tampered, "--ort-lib", lib}, "sha256"},
		{[]string{"score", scan, "--model", mf, "--map", "lrp", "--ort-lib", lib}, "give --out DIR"},
		{[]string{"score", scan, "--model", mf, "--map", "fancy"}, "want one of"},
		{[]string{"score", scan, "--model", mf, "--ort-lib", filepath.Join(t.TempDir(), "nolib.so")}, "make setup"},
		{[]string{"score"}, "give a scan"},
		{[]string{"model", "check", tampered, "--ort-lib", lib}, "sha256"},
		{[]string{"model", "inspect"}, "usage"},
	}
	for _, c := range cases {
		code, _, stderr := runCLI(c.args...)
		if code != 2 || !strings.Contains(stderr, c.want) || strings.Count(strings.TrimSpace(stderr), "\n") > 0 {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 and one line with %q", c.args, code, stderr, c.want)
		}
	}
	// a scan the model cannot take (no head) is a result, not an error:
	// out-of-distribution, no prediction, the failed preparation check
	code, stdout, stderr := runCLI("score", flatPath, "--model", mf, "--ort-lib", lib, "--json")
	var flatRes struct {
		Prediction *struct{} `json:"prediction"`
		OOD        struct {
			Verdict string
			Checks  []struct {
				Name        string
				Pass        bool
				Explanation string
			}
		}
	}
	json.Unmarshal([]byte(stdout), &flatRes)
	last := flatRes.OOD.Checks[len(flatRes.OOD.Checks)-1]
	if code != 0 || flatRes.Prediction != nil || flatRes.OOD.Verdict != "out-of-distribution" || last.Name != "preparation" ||
		last.Pass || !strings.Contains(last.Explanation, "no head found") {
		t.Errorf("flat scan: exit %d, %+v\n%s", code, flatRes, stderr)
	}
	// the same scan gets the same result with --map: the map's absence is inside it
	flatOut := t.TempDir()
	code, _, stderr = runCLI("score", flatPath, "--model", mf, "--ort-lib", lib, "--map", "occlusion", "--out", flatOut)
	var flatSet struct {
		Prediction *struct{}
		OOD        struct{ Verdict string }
		Relevance  map[string]any
	}
	readJSON(t, filepath.Join(flatOut, "result.json"), &flatSet)
	if code != 0 || flatSet.Prediction != nil || flatSet.OOD.Verdict != "out-of-distribution" || !strings.Contains(fmt.Sprint(flatSet.Relevance["problem"]), "could not be prepared") {
		t.Errorf("flat scan with --map: exit %d, %+v, %s", code, flatSet, stderr)
	}
	code, stdout, stderr = runCLI("score", flatPath, "--model", mf, "--ort-lib", lib)
	if code != 0 || !strings.Contains(stdout, "Prediction:  none") || !strings.Contains(stdout, "OUT-OF-DISTRIBUTION") {
		t.Errorf("flat scan text: exit %d\n%s\n%s", code, stdout, stderr)
	}
	code, stdout, stderr = runCLI("model", "check", mf, "--ort-lib", lib)
	if code != 0 || !strings.Contains(stdout, "OK") || !strings.Contains(stdout, "ran one all-zero case") {
		t.Errorf("model folder check: exit %d\n%s\n%s", code, stdout, stderr)
	}
}

// Patient identifiers of a DICOM series never reach the output, text or
// JSON or result.json (fictional identifiers of the demo scenario).
func TestScoreHidesIdentifiers(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	scan := headNIfTI(t)
	v, err := volume.Load([]string{scan}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(t.TempDir(), "dicom")
	err = dicom.WriteSeries(dir, v, dicom.WriteOptions{Seed: "HMRU-0001/T1", PatientName: "DEMO^SUBJECT0001",
		PatientID: "HMRU-0001-ID", PatientBirthDate: "19510203", StudyDate: "20261201", AccessionNumber: "ACC7781",
		InstitutionName: "Harbourside Memory Research Unit"})
	if err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "out")
	for _, args := range [][]string{
		{"score", dir, "--model", mf, "--ort-lib", lib},
		{"score", dir, "--model", mf, "--ort-lib", lib, "--json", "--out", out},
	} {
		code, stdout, stderr := runCLI(args...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, stderr)
		}
		res, _ := os.ReadFile(filepath.Join(out, "result.json"))
		for _, id := range []string{"DEMO^SUBJECT0001", "HMRU-0001-ID", "19510203", "20261201", "ACC7781", "Harbourside"} {
			if strings.Contains(stdout+stderr+string(res), id) {
				t.Errorf("%v: output contains identifier %q", args, id)
			}
		}
	}
}

// Without --model, score uses the embedded demo model folder: the reference scans
// of Debian's nibabel and pydicom test data are out of distribution with
// reasons, a CT-like phantom is flagged, and an in-distribution phantom gets
// a prediction.
func TestScoreDemoModelFolder(t *testing.T) {
	lib := refcheck.ORTLib(t)
	type result struct {
		Model      struct{ Name string }
		Prediction *struct{ Probability float64 }
		OOD        struct {
			Verdict string
			Checks  []struct {
				Name string
				Pass bool
			}
		}
	}
	score := func(p string) result {
		code, stdout, stderr := runCLI("score", p, "--json", "--ort-lib", lib)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", p, code, stderr)
		}
		var r result
		if err := json.Unmarshal([]byte(stdout), &r); err != nil {
			t.Fatal(err)
		}
		return r
	}
	for _, p := range realScans {
		refcheck.Path(t, p)
		if r := score(p); r.OOD.Verdict != "out-of-distribution" {
			t.Errorf("%s: demo model verdict %q", filepath.Base(p), r.OOD.Verdict)
		}
	}
	dir := t.TempDir()
	for _, tc := range []struct {
		shift phantom.Shift
		want  string
	}{{phantom.ShiftNone, ""}, {phantom.ShiftCT, "out-of-distribution"}} {
		c, err := phantom.Generate(777001, 3, phantom.Options{Shift: tc.shift})
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(dir, string(tc.shift)+".nii.gz")
		if err := nifti.Write(p, c.Volume, nifti.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		r := score(p)
		if r.Prediction == nil || r.Model.Name == "" {
			t.Errorf("%s phantom: no prediction or model name", tc.shift)
		}
		if tc.want != "" && r.OOD.Verdict != tc.want {
			t.Errorf("%s phantom: verdict %q, want %q", tc.shift, r.OOD.Verdict, tc.want)
		}
		t.Logf("%s phantom: verdict %s", tc.shift, r.OOD.Verdict)
		if r.OOD.Verdict == "in-distribution" {
			// card 1.3.0 keeps T = 1 (its fitted T did not help held-out
			// cases): the probability is not called calibrated
			mf, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
			if err != nil {
				t.Fatal(err)
			}
			_, text, _ := runCLI("score", p, "--ort-lib", lib)
			if want := "(" + inference.CalibrationLabel(mf.Card) + ", temperature"; !strings.Contains(text, want) {
				t.Errorf("%s phantom: text lacks %q:\n%s", tc.shift, want, text)
			}
		}
	}
}
