package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume/nifti"
)

// writePhantom writes one coarse phantom as NIfTI and returns its path and label.
func writePhantom(t *testing.T, dir string, seed uint64, i int, shift phantom.Shift) (string, *phantom.Case) {
	t.Helper()
	c, err := phantom.Generate(seed, i, phantom.Options{VoxelMM: 3, Shift: shift})
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, fmt.Sprintf("s%d-%s-%03d.nii.gz", seed, shift, i))
	if err := nifti.Write(p, c.Volume, nifti.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	return p, c
}

func runBF(t *testing.T, args ...string) (string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	if code := run(args, &env{stdout: &out, stderr: &errb}); code != 0 {
		t.Fatalf("brightfold %s: exit %d\n%s\n%s", strings.Join(args, " "), code, out.String(), errb.String())
	}
	return out.String(), errb.String()
}

// TestModelMakeTorch trains two small 3D CNNs in PyTorch on tensors made by
// `brightfold prepare`, exports them with torch.onnx.export, makes model
// folders with `brightfold model make`, and checks scores, fit check and
// every card figure against outside references (torch, R pROC,
// statsmodels, numpy).
func TestModelMakeTorch(t *testing.T) {
	if testing.Short() {
		t.Skip("trains two PyTorch models")
	}
	lib := refcheck.ORTLib(t)
	for _, m := range []string{"torch", "statsmodels", "nibabel"} {
		refcheck.PythonModule(t, m)
	}
	refcheck.Path(t, "/usr/bin/Rscript")
	script := filepath.Join(refcheck.RepoRoot(), "cmd", "brightfold", "testdata", "torch_models.py")
	dir := t.TempDir()
	spec := preprocess.DefaultSpec()
	spec.SpacingMm, spec.Shape = [3]float64{6, 6, 6}, [3]int{32, 32, 32}
	specPath := filepath.Join(dir, "spec.json")
	sb, _ := json.Marshal(spec)
	os.WriteFile(specPath, sb, 0o644)

	// torch's training cases (seed 41), never given to model make
	type tc struct {
		Tensor string `json:"tensor"`
		Label  int    `json:"label"`
	}
	var train []tc
	for i := 0; i < 48; i++ {
		p, c := writePhantom(t, dir, 41, i, phantom.ShiftNone)
		out := filepath.Join(dir, fmt.Sprintf("train-%03d.nii.gz", i))
		runBF(t, "prepare", p, "--spec", specPath, "--out", out)
		train = append(train, tc{out, c.Subject.Label})
	}
	b, _ := json.Marshal(train)
	os.WriteFile(filepath.Join(dir, "cases.json"), b, 0o644)
	var trained map[string]struct {
		Path  string  `json:"path"`
		Opset int     `json:"opset"`
		Acc   float64 `json:"train_accuracy"`
	}
	refcheck.RunPython(t, script, &trained, "train", dir)

	// the group's cases (seed 42): calibration and validation
	var rows []string
	var valPaths []string
	for i := 0; i < 60; i++ {
		p, c := writePhantom(t, dir, 42, i, phantom.ShiftNone)
		split := "calibration"
		if i%2 == 1 {
			split = "validation"
			valPaths = append(valPaths, p)
		}
		label := []string{"no_pattern", "atrophy_pattern"}[c.Subject.Label]
		rows = append(rows, fmt.Sprintf("%s,%s,%s,%s,%.0f,%s", filepath.Base(p), label, split, c.Subject.Site, c.Subject.Age, c.Subject.Sex))
	}
	man := filepath.Join(dir, "cases.csv")
	os.WriteFile(man, []byte("path,label,split,site,age,sex\n"+strings.Join(rows, "\n")+"\n"), 0o644)
	ct, _ := writePhantom(t, dir, 43, 0, phantom.ShiftCT)
	t2, _ := writePhantom(t, dir, 43, 1, phantom.ShiftT2)

	for _, name := range []string{"plain", "residual"} {
		name := name
		t.Run(name, func(t *testing.T) {
			mf := filepath.Join(dir, "mf-"+name)
			out, _ := runBF(t, "model", "make", trained[name].Path, "--cases", man, "--classes", "no_pattern,atrophy_pattern",
				"--out", mf, "--spec", specPath, "--seed", "5", "--ort-lib", lib, "--name", name)
			t.Logf("%s (opset %d, torch training accuracy %.2f):\n%s", name, trained[name].Opset, trained[name].Acc, out)
			folder, err := inference.LoadModelFolder(mf)
			if err != nil {
				t.Fatal(err)
			}
			card := folder.Card
			show, _ := runBF(t, "model", "show", mf, "--markdown")
			for _, sec := range []string{"Model details", "Intended use", "Factors", "Metrics", "Evaluation data", "Training data", "Quantitative analyses", "Ethical considerations", "Caveats and recommendations", "Research use only"} {
				if !strings.Contains(show, sec) {
					t.Errorf("model show lacks %q", sec)
				}
			}
			// score: ONNX Runtime's probabilities = torch softmax(logits / T) of the same tensor
			var items []tc
			scores := map[string]*scoreJSON{}
			for _, p := range append(append([]string{}, valPaths...), ct, t2) {
				js, _ := runBF(t, "score", p, "--model", mf, "--json", "--ort-lib", lib)
				var s scoreJSON
				if err := json.Unmarshal([]byte(js), &s); err != nil {
					t.Fatal(err)
				}
				scores[p] = &s
				if s.Prediction != nil {
					tp := filepath.Join(dir, name+"-"+filepath.Base(p))
					runBF(t, "prepare", p, "--model", mf, "--out", tp)
					items = append(items, tc{Tensor: tp})
				}
			}
			b, _ := json.Marshal(items)
			os.WriteFile(filepath.Join(dir, "score.json"), b, 0o644)
			var tprobs [][]float64
			refcheck.RunPython(t, script, &tprobs, "probs", dir, name, fmt.Sprint(card.Calibration.Temperature))
			k := 0
			worst := 0.0
			for _, p := range append(append([]string{}, valPaths...), ct, t2) {
				s := scores[p]
				if s.Prediction == nil {
					continue
				}
				for ci, cl := range card.Classes {
					worst = math.Max(worst, math.Abs(s.Prediction.Probabilities[cl]-tprobs[k][ci]))
				}
				k++
			}
			// torch 1.13 CPU float32 vs ONNX Runtime 1.30 float32: 1e-4 (the tolerance)
			if worst > 1e-4 {
				t.Errorf("ONNX Runtime vs torch softmax(logits/T): largest difference %.2g > 1e-4", worst)
			}
			t.Logf("ORT vs torch probabilities: largest difference %.2g over %d scans", worst, k)
			for _, p := range []string{ct, t2} {
				if v := scores[p].OOD.Verdict; v != "out-of-distribution" {
					t.Errorf("%s: fit check verdict %q, want out-of-distribution", filepath.Base(p), v)
				}
			}
			pass := 0
			for _, p := range valPaths {
				if scores[p].OOD.Verdict == "in-distribution" {
					pass++
				}
			}
			if pass*2 <= len(valPaths) {
				t.Errorf("fit check passes only %d of %d in-distribution validation phantoms", pass, len(valPaths))
			}
			t.Logf("fit check passes %d of %d validation phantoms", pass, len(valPaths))
			checkFiguresAgainstReferences(t, script, dir, card, valPaths, scores)
			if name == "residual" {
				relevanceOnResidual(t, dir, mf, lib, valPaths[0])
			}
			recalibrateAgainstStatsmodels(t, script, dir, mf, lib, man, valPaths, scores)
		})
	}
}

type scoreJSON struct {
	Prediction *struct {
		Probability   float64            `json:"probability"`
		Probabilities map[string]float64 `json:"probabilities"`
	} `json:"prediction"`
	OOD struct {
		Verdict string `json:"verdict"`
	} `json:"ood"`
}

// checkFiguresAgainstReferences recomputes the card's overall validation
// figures from the scored probabilities with pROC, statsmodels and numpy.
func checkFiguresAgainstReferences(t *testing.T, script, dir string, card *inference.Card, val []string, scores map[string]*scoreJSON) {
	t.Helper()
	var in struct {
		P       []float64 `json:"p"`
		Conf    []float64 `json:"conf"`
		Correct []bool    `json:"correct"`
		Y       []int     `json:"y"`
	}
	for _, p := range val {
		s := scores[p]
		q := s.Prediction.Probability
		y := 0
		if strings.Contains(mustLabel(t, dir, p), "atrophy") {
			y = 1
		}
		in.P, in.Y = append(in.P, q), append(in.Y, y)
		in.Conf = append(in.Conf, math.Max(q, 1-q))
		in.Correct = append(in.Correct, (q >= 0.5) == (y == 1))
	}
	f := filepath.Join(dir, "figures.json")
	b, _ := json.Marshal(in)
	os.WriteFile(f, b, 0o644)
	var ref struct {
		AUC       []float64 `json:"auc"`
		Sens      []float64 `json:"sens"`
		Spec      []float64 `json:"spec"`
		ECE       float64   `json:"ece"`
		Brier     float64   `json:"brier"`
		Intercept []float64 `json:"intercept"`
		Slope     []float64 `json:"slope"`
	}
	refcheck.RunPython(t, script, &ref, "figures", f)
	got := map[string]inference.Metric{}
	for _, m := range card.Validation {
		if m.Site == "" {
			got[m.Name] = m
		}
	}
	check := func(name string, want []float64, tol float64, src string) {
		m, ok := got[name]
		if !ok {
			t.Errorf("card lacks %s", name)
			return
		}
		vals := append([]float64{m.Value}, m.CI95...)
		for i := range want {
			if i >= len(vals) || math.Abs(vals[i]-want[i]) > tol {
				t.Errorf("%s: card %v, %s %v", name, vals, src, want)
				return
			}
		}
		t.Logf("%-22s %.4f [%s]  n = %d %s (matches %s)", name, m.Value, ciText(m.CI95), m.N, m.Warning, src)
	}
	check("auroc", ref.AUC, 1e-6, "R pROC ci.auc(method = \"delong\")")
	sens := got["sensitivity"]
	check("sensitivity", []float64{sens.Value, ref.Sens[0], ref.Sens[1]}, 1e-9, "statsmodels proportion_confint(method = \"wilson\")")
	spec := got["specificity"]
	check("specificity", []float64{spec.Value, ref.Spec[0], ref.Spec[1]}, 1e-9, "statsmodels proportion_confint(method = \"wilson\")")
	// the card's figures come from batched ONNX Runtime runs, the reference's
	// from `score` one case at a time: float32 rounding differs by ~1e-7
	check("ece", []float64{ref.ECE}, 1e-6, "numpy, 15 equal-width bins")
	check("brier", []float64{ref.Brier}, 1e-6, "numpy mean squared difference")
	check("calibration_intercept", ref.Intercept, 1e-5, "statsmodels GLM Binomial with offset")
	check("calibration_slope", ref.Slope, 1e-5, "statsmodels Logit")
}

func ciText(ci []float64) string {
	if len(ci) != 2 {
		return "—"
	}
	return fmt.Sprintf("%.4f, %.4f", ci[0], ci[1])
}

// mustLabel reads a case's label from the manifest.
func mustLabel(t *testing.T, dir, p string) string {
	b, err := os.ReadFile(filepath.Join(dir, "cases.csv"))
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(l, filepath.Base(p)+",") {
			return strings.Split(l, ",")[1]
		}
	}
	t.Fatalf("%s not in the manifest", p)
	return ""
}

// relevanceOnResidual runs every relevance method on the residual net (LRP
// passes Add nodes by the proportional rule of overlay/lrp.go: each summand
// gets the share of the relevance it contributed, R_i = x_i·R/z).
func relevanceOnResidual(t *testing.T, dir, mf, lib, scan string) {
	t.Helper()
	for _, m := range []string{"lrp", "ig", "gradinput", "occlusion"} {
		js, _ := runBF(t, "score", scan, "--model", mf, "--json", "--ort-lib", lib, "--map", m, "--out", filepath.Join(dir, "map-"+m))
		var s struct {
			Relevance map[string]any `json:"relevance"`
		}
		if err := json.Unmarshal([]byte(js), &s); err != nil || s.Relevance == nil {
			t.Fatalf("--map %s: no relevance in the JSON (%v)", m, err)
		}
		delete(s.Relevance, "file")
		delete(s.Relevance, "overlay")
		t.Logf("residual net, %s: %v", m, s.Relevance)
		ce, ok := s.Relevance["conservation_error"].(float64)
		if !ok {
			ce, ok = s.Relevance["consistency_error"].(float64)
		}
		if m == "lrp" && (!ok || ce > 1e-3) {
			t.Errorf("LRP through the Add skips: conservation error %.2g (Bach et al. 2015, eq. 2)", ce)
		}
	}
}

// recalibrateAgainstStatsmodels recalibrates the residual model on its
// validation cases as a new site and checks the likelihood-ratio statistics
// against statsmodels, and that model.onnx is untouched.
func recalibrateAgainstStatsmodels(t *testing.T, script, dir, mf, lib, man string, val []string, scores map[string]*scoreJSON) {
	t.Helper()
	b, _ := os.ReadFile(man)
	var rows []string
	for i, l := range strings.Split(strings.TrimSpace(string(b)), "\n") {
		f := strings.Split(l, ",")
		if i == 0 {
			rows = append(rows, l)
		} else if f[2] == "validation" {
			f[3] = "harbour-north"
			rows = append(rows, strings.Join(f, ","))
		}
	}
	site := filepath.Join(dir, "site.csv")
	os.WriteFile(site, []byte(strings.Join(rows, "\n")+"\n"), 0o644)
	out := mf + "-north"
	txt, _ := runBF(t, "model", "recalibrate", mf, "--cases", site, "--out", out, "--ort-lib", lib)
	t.Logf("recalibrate:\n%s", txt)
	a, _ := os.ReadFile(filepath.Join(mf, "model.onnx"))
	c, _ := os.ReadFile(filepath.Join(out, "model.onnx"))
	if !bytes.Equal(a, c) {
		t.Error("recalibrate changed model.onnx")
	}
	folder, err := inference.LoadModelFolder(out)
	if err != nil {
		t.Fatal(err)
	}
	rec := folder.Card.Provenance.Recalibration
	var in struct {
		P       []float64 `json:"p"`
		Conf    []float64 `json:"conf"`
		Correct []bool    `json:"correct"`
		Y       []int     `json:"y"`
	}
	for _, p := range val {
		q := scores[p].Prediction.Probability
		y := 0
		if strings.Contains(mustLabel(t, dir, p), "atrophy") {
			y = 1
		}
		in.P, in.Y, in.Conf, in.Correct = append(in.P, q), append(in.Y, y), append(in.Conf, math.Max(q, 1-q)), append(in.Correct, (q >= 0.5) == (y == 1))
	}
	f := filepath.Join(dir, "recal.json")
	jb, _ := json.Marshal(in)
	os.WriteFile(f, jb, 0o644)
	var ref struct {
		Full      float64 `json:"lr_full_vs_none"`
		Intercept float64 `json:"lr_full_vs_intercept"`
	}
	refcheck.RunPython(t, script, &ref, "figures", f)
	// statsmodels Logit / GLM log-likelihoods (Vergouwe et al. 2017's tests)
	if math.Abs(rec.Tests[0].Statistic-ref.Full) > 1e-4 {
		t.Errorf("LR intercept+slope vs none: %.6f, statsmodels %.6f", rec.Tests[0].Statistic, ref.Full)
	}
	if len(rec.Tests) > 1 && math.Abs(rec.Tests[1].Statistic-ref.Intercept) > 1e-4 {
		t.Errorf("LR intercept+slope vs intercept: %.6f, statsmodels %.6f", rec.Tests[1].Statistic, ref.Intercept)
	}
	if folder.Card.Provenance.Parent == nil || folder.Card.Provenance.Parent.ModelSHA256 != folder.Card.ModelSHA256 {
		t.Error("recalibrated card lacks its parent")
	}
}

// TestModelMakeRefusals checks the one-line refusals (exit 2).
func TestModelMakeRefusals(t *testing.T) {
	dir := t.TempDir()
	onnxPath := filepath.Join(refcheck.RepoRoot(), "assets", "demo-model", "model.onnx")
	var rows []string
	for i := 0; i < 12; i++ {
		rows = append(rows, fmt.Sprintf("c%d.nii.gz,%s", i, []string{"a", "b"}[i%2]))
	}
	man := filepath.Join(dir, "m.csv")
	os.WriteFile(man, []byte("path,label\n"+strings.Join(rows, "\n")+"\n"), 0o644)
	bad := filepath.Join(dir, "bad.csv")
	os.WriteFile(bad, []byte("path,label\nx.nii,a\ny.nii,zzz\n"), 0o644)
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"model", "make", onnxPath, "--cases", bad, "--classes", "a,b", "--out", filepath.Join(dir, "o1")}, "not one of --classes"},
		{[]string{"model", "make", onnxPath, "--cases", man, "--classes", "a,b", "--out", filepath.Join(dir, "o2")}, "at least 10 per class"},
		{[]string{"model", "make", onnxPath, "--cases", man, "--classes", "a,b", "--out", dir}, "already exists"},
		{[]string{"model", "make", man, "--cases", man, "--classes", "a,b", "--out", filepath.Join(dir, "o3")}, "not an ONNX model"},
	} {
		var out, errb bytes.Buffer
		code := run(c.args, &env{stdout: &out, stderr: &errb})
		msg := strings.TrimSpace(errb.String())
		if code != 2 || !strings.Contains(msg, c.want) {
			t.Errorf("%v: exit %d, %q; want exit 2 with %q", c.args[1:], code, msg, c.want)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "o2")); err == nil {
		t.Error("a refused model make left a folder")
	}
}
