package modelmake

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/manifest"
	"brightfold/internal/refcheck"
)

func demoModel(t *testing.T) []byte {
	b, err := os.ReadFile(filepath.Join(refcheck.RepoRoot(), "assets", "demo-model", "model.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestDiscoverDemoModel finds in the demo model what its hand-written card
// (assets/demo-model/card.json) states.
func TestDiscoverDemoModel(t *testing.T) {
	g, err := Discover("demo", demoModel(t), Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	folder, err := inference.LoadModelFolder(filepath.Join(refcheck.RepoRoot(), "assets", "demo-model"))
	if err != nil {
		t.Fatal(err)
	}
	c := folder.Card
	if g.Input != c.Input.Name || g.Logits != c.Outputs.Logits || g.Features != c.Outputs.Features || g.Activation != c.Outputs.Activation ||
		g.NumLogits != 2 || g.FeatureDim != c.OOD.Features.Dim || g.Layout != c.Input.Layout || fmt.Sprint(g.Shape) != fmt.Sprint(c.Input.Shape) {
		t.Fatalf("found %+v, the card says input %q %v, logits %q, features %q (%d)", g, c.Input.Name, c.Input.Shape, c.Outputs.Logits, c.Outputs.Features, c.OOD.Features.Dim)
	}
	if _, err := Discover("x", []byte("not onnx"), Overrides{}); err == nil {
		t.Fatal("garbage accepted")
	}
}

// TestSplitStratified: each class splits in the asked fraction, the same
// seed gives the same split, given split values are kept.
func TestSplitStratified(t *testing.T) {
	m := &manifest.Manifest{}
	var labels []int
	for i := 0; i < 41; i++ {
		c := manifest.Case{Path: fmt.Sprint(i), Label: []string{"a", "b"}[min(i%3, 1)]}
		if i == 0 {
			c.Split = manifest.SplitCalibration
		}
		m.Cases = append(m.Cases, c)
		labels = append(labels, min(i%3, 1))
	}
	opt := Options{Seed: 3, ValidationFraction: 0.5}
	a, b := assignSplits(m, labels, opt), assignSplits(m, labels, opt)
	if fmt.Sprint(a) != fmt.Sprint(b) {
		t.Fatal("same seed, different split")
	}
	if a[0] != manifest.SplitCalibration {
		t.Fatal("given split not kept")
	}
	nv := [2]int{}
	n := [2]int{}
	for i := 1; i < len(a); i++ {
		n[labels[i]]++
		if a[i] == manifest.SplitValidation {
			nv[labels[i]]++
		}
	}
	for k := 0; k < 2; k++ {
		if d := float64(nv[k]) - 0.5*float64(n[k]); d < -0.5 || d > 0.5 {
			t.Fatalf("class %d: %d of %d to validation", k, nv[k], n[k])
		}
	}
	if c := assignSplits(m, labels, Options{Seed: 4, ValidationFraction: 0.5}); fmt.Sprint(c) == fmt.Sprint(a) {
		t.Fatal("another seed gives the same split")
	}
}

// TestMakeCancelled: a cancelled run returns the context's error and
// nothing else.
func TestMakeCancelled(t *testing.T) {
	model, g, m := missingScans(t, 24)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := Make(ctx, "demo", model, g, m, Options{Classes: []string{"no", "yes"}, Spec: preprocess.DefaultSpec(), Name: "x", Version: "1", IntendedUse: "x", TrainingData: "x"})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v, want context.Canceled", err)
	}
}

// TestMakeUnreadable: scans that cannot be read are listed in one refusal.
func TestMakeUnreadable(t *testing.T) {
	model, g, m := missingScans(t, 20)
	_, err := Make(context.Background(), "demo", model, g, m, Options{Classes: []string{"no", "yes"}, Spec: preprocess.DefaultSpec(), Name: "x", Version: "1", IntendedUse: "x", TrainingData: "x"})
	if err == nil || !strings.Contains(err.Error(), "20 scan(s) cannot be prepared") || !strings.Contains(err.Error(), "--skip-unreadable") {
		t.Fatalf("got %v", err)
	}
	_, err = Make(context.Background(), "demo", model, g, m, Options{Classes: []string{"no", "yes"}, Spec: preprocess.DefaultSpec(), SkipUnreadable: true, Name: "x", Version: "1", IntendedUse: "x", TrainingData: "x"})
	if err == nil || !strings.Contains(err.Error(), "usable cases") {
		t.Fatalf("with --skip-unreadable and nothing left: got %v", err)
	}
}

// missingScans initialises ONNX Runtime and returns the demo model, its
// graph and a manifest of n scans that do not exist, labelled no/yes.
func missingScans(t *testing.T, n int) ([]byte, Graph, *manifest.Manifest) {
	t.Helper()
	if err := inference.InitRuntime(refcheck.ORTLib(t)); err != nil {
		t.Fatal(err)
	}
	model := demoModel(t)
	g, err := Discover("demo", model, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	m := &manifest.Manifest{Source: "m.csv"}
	for i := 0; i < n; i++ {
		m.Cases = append(m.Cases, manifest.Case{Path: fmt.Sprintf("/nonexistent/%d.nii", i), Label: []string{"no", "yes"}[i%2]})
	}
	return model, g, m
}
