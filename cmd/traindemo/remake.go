package main

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"

	"brightfold/inference"
	"brightfold/inference/modelmake"
	"brightfold/internal/manifest"
	"brightfold/internal/ortlib"
	"brightfold/internal/parallel"
	"brightfold/internal/phantom"
	"brightfold/internal/train"
	"brightfold/internal/volume/nifti"
)

// remake runs `model make` on the committed demo model with the demo
// recipe's cases: its validation and calibration phantoms (which no
// gradient step saw) as the calibration split and its held-out phantoms as
// the validation split, and compares the figures with the committed card
// (assets/demo-model/card.json): the held-out AUROC within tol, the
// temperature within 10·tol. nCal and nVal (0: the recipe's) shrink the
// run for a smoke test, which then cannot be expected to agree.
func remake(modelDir, work string, nCal, nVal, workers int, tol float64, logf func(string, ...any)) error {
	r := train.DemoRecipe()
	if nCal <= 0 {
		nCal = r.NVal + r.NCal
	}
	if nVal <= 0 {
		nVal = r.NTest
	}
	folder, err := inference.LoadModelFolder(modelDir)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(work, 0o755); err != nil {
		return err
	}
	type spec struct {
		seed        uint64
		index       int
		split, name string
	}
	var specs []spec
	for i := 0; i < nCal; i++ {
		specs = append(specs, spec{r.CohortSeed, r.NTrain + i, manifest.SplitCalibration, ""})
	}
	for i := 0; i < nVal; i++ {
		specs = append(specs, spec{r.TestSeed, i, manifest.SplitValidation, ""})
	}
	rows := make([]string, len(specs))
	err = parallel.EachErr(len(specs), workers, func(_, k int) error {
		s := specs[k]
		c, err := phantom.Generate(s.seed, s.index, phantom.Options{Workers: 1})
		if err != nil {
			return err
		}
		name := fmt.Sprintf("s%d-%s.nii.gz", s.seed, c.Subject.ID)
		p := filepath.Join(work, name)
		if _, err := os.Stat(p); err != nil {
			if err := nifti.Write(p, c.Volume, nifti.WriteOptions{}); err != nil {
				return err
			}
		}
		rows[k] = fmt.Sprintf("%s,%s,%s,%s", name, folder.Card.Classes[c.Subject.Label], s.split, c.Subject.Site)
		if k%50 == 0 {
			logf("phantoms: %d/%d", k, len(specs))
		}
		return nil
	})
	if err != nil {
		return err
	}
	man := filepath.Join(work, "cases.csv")
	if err := os.WriteFile(man, []byte("path,label,split,site\n"+strings.Join(rows, "\n")+"\n"), 0o644); err != nil {
		return err
	}
	m, err := manifest.Read(man, "")
	if err != nil {
		return err
	}
	lib, err := ortlib.Find("")
	if err != nil {
		return err
	}
	if err := inference.InitRuntime(lib); err != nil {
		return err
	}
	g, err := modelmake.Discover(modelDir, folder.Model, modelmake.Overrides{})
	if err != nil {
		return err
	}
	res, err := modelmake.Make(context.Background(), modelDir, folder.Model, g, m, modelmake.Options{Classes: folder.Card.Classes,
		Spec: folder.Card.Preprocessing, Name: folder.Card.Name, Version: folder.Card.Version, IntendedUse: folder.Card.IntendedUse,
		TrainingData: folder.Card.TrainingData, Seed: 1, Workers: workers, Log: logf})
	if err != nil {
		return err
	}
	return compareRemake(folder.Card, res.Card, tol, logf)
}

func compareRemake(old, made *inference.Card, tol float64, logf func(string, ...any)) error {
	var held float64 = math.NaN()
	for _, mt := range old.Validation {
		if mt.Name == "auroc" && strings.HasPrefix(mt.Split, "held-out") {
			held = mt.Value
		}
	}
	var now inference.Metric
	for _, mt := range made.Validation {
		if mt.Name == "auroc" && mt.Site == "" {
			now = mt
		}
	}
	logf("same model: %v (sha256 %s)", old.ModelSHA256 == made.ModelSHA256, made.ModelSHA256)
	logf("held-out AUROC: committed card %.4f, model make %.4f [%.4f, %.4f] (tolerance %.2g)", held, now.Value, now.CI95[0], now.CI95[1], tol)
	logf("temperature: committed card %.4f, model make %.4f", old.Calibration.Temperature, made.Calibration.Temperature)
	for _, mt := range made.Validation {
		if mt.Site == "" {
			logf("  %-22s %.4f %v", mt.Name, mt.Value, mt.CI95)
		}
	}
	if old.ModelSHA256 != made.ModelSHA256 || math.Abs(held-now.Value) > tol || math.Abs(old.Calibration.Temperature-made.Calibration.Temperature) > 10*tol {
		return fmt.Errorf("model make on the demo recipe's cases differs from the committed card beyond the tolerance")
	}
	return nil
}
