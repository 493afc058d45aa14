package main

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"brightfold/inference"
	"brightfold/internal/notice"
	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
	"brightfold/internal/report"
	"brightfold/internal/volume"
)

// score --map writes relevance.nii.gz on the input scan's grid (dims and
// affine as the scan, notice.Short in the NIfTI-1 descrip field),
// relevance.json with the full notice, overlay.png, and the relevance block
// of result.json with the method's check.
func TestScoreMapOutputs(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tinyModelFolder(t)
	scan := headNIfTI(t)
	in, err := volume.Load([]string{scan}, volume.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ method, check string }{
		{"lrp", "input_share"}, {"ig", "completeness_error"}, {"gradinput", "relevance_sum"}, {"occlusion", "passes"},
	} {
		out := filepath.Join(t.TempDir(), c.method)
		code, stdout, stderr := runCLI("score", scan, "--model", mf, "--map", c.method, "--out", out, "--ort-lib", lib, "--threads", "1")
		if code != 0 {
			t.Fatalf("--map %s: exit %d: %s", c.method, code, stderr)
		}
		if !strings.Contains(stdout, "Relevance:") || !strings.HasSuffix(strings.TrimSpace(stdout), notice.Full) {
			t.Errorf("--map %s: text output:\n%s", c.method, stdout)
		}
		m, err := volume.Load([]string{filepath.Join(out, report.RelevanceFile)}, volume.LoadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if m.Dims != in.Dims || m.Affine != in.Affine || m.Meta.Description != notice.Short {
			t.Errorf("--map %s: map %v %v %q; scan %v %v", c.method, m.Dims, m.Affine, m.Meta.Description, in.Dims, in.Affine)
		}
		var res struct {
			Relevance map[string]any `json:"relevance"`
		}
		readJSON(t, filepath.Join(out, report.ResultFile), &res)
		r := res.Relevance
		if r["method"] != c.method || r["file"] != report.RelevanceFile || r["overlay"] != report.OverlayFile || r[c.check] == nil {
			t.Errorf("--map %s: relevance block %v", c.method, r)
		}
		if c.method == "lrp" && !(r["consistency_error"].(float64) < 0.01) {
			t.Errorf("LRP ledger consistency error %v", r["consistency_error"])
		}
		if c.method != "occlusion" && !strings.Contains(stdout, "The voxels carry") {
			t.Errorf("--map %s: text output lacks the input share:\n%s", c.method, stdout)
		}
		var side map[string]any
		readJSON(t, filepath.Join(out, report.RelevanceSidecar), &side)
		if _, ok := side["input_share"]; ok == (c.method == "occlusion") {
			t.Errorf("--map %s: sidecar input_share %v", c.method, side["input_share"])
		}
		if in, ok := side["input"]; side["notice"] != notice.Full || (ok && in != "") {
			t.Errorf("--map %s: sidecar notice %q, input %q", c.method, side["notice"], side["input"])
		}
		f, err := os.Open(filepath.Join(out, report.OverlayFile))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := png.Decode(f); err != nil {
			t.Errorf("--map %s: overlay.png: %v", c.method, err)
		}
		f.Close()
	}
}

func readJSON(t *testing.T, p string, v any) {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", p, err)
	}
}

// tanhModelFolder is the tiny model folder with its first Relu replaced by Tanh, an
// operator ONNX Runtime runs and the Go executor lacks.
func tanhModelFolder(t *testing.T) string {
	t.Helper()
	dir := tinyModelFolder(t)
	data, err := os.ReadFile(filepath.Join(dir, inference.ModelFile))
	if err != nil {
		t.Fatal(err)
	}
	m, err := onnx.Decode(data)
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range m.Graph.Nodes {
		if n.OpType == "Relu" {
			n.OpType = "Tanh"
			break
		}
	}
	if data, err = m.Encode(); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(filepath.Join(dir, inference.CardFile))
	if err != nil {
		t.Fatal(err)
	}
	card, err := inference.ParseCard(raw)
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data)
	card.ModelSHA256 = hex.EncodeToString(sum[:])
	if err := inference.WriteModelFolderDir(dir, card, data); err != nil {
		t.Fatal(err)
	}
	return dir
}

// A model with an operator the Go executor lacks: --map lrp, ig and
// gradinput exit 2 with one line naming the operator; --map occlusion works.
// --map without --out is a usage error.
func TestScoreMapUnsupportedModel(t *testing.T) {
	lib := refcheck.ORTLib(t)
	mf := tanhModelFolder(t)
	scan := headNIfTI(t)
	for _, m := range []string{"lrp", "ig", "gradinput"} {
		code, _, stderr := runCLI("score", scan, "--model", mf, "--map", m, "--out", t.TempDir(), "--ort-lib", lib)
		if code != 2 || !strings.Contains(stderr, "Tanh") || !strings.Contains(stderr, "occlusion") || strings.Count(strings.TrimSpace(stderr), "\n") > 0 {
			t.Errorf("--map %s on the Tanh model: exit %d, %q", m, code, stderr)
		}
	}
	out := t.TempDir()
	if code, _, stderr := runCLI("score", scan, "--model", mf, "--map", "occlusion", "--out", out, "--ort-lib", lib); code != 0 {
		t.Errorf("--map occlusion on the Tanh model: exit %d, %s", code, stderr)
	}
	if _, err := os.Stat(filepath.Join(out, report.RelevanceFile)); err != nil {
		t.Error(err)
	}
	if code, _, stderr := runCLI("score", scan, "--model", mf, "--map", "lrp"); code != 2 || !strings.Contains(stderr, "--out") {
		t.Errorf("--map without --out: exit %d, %q", code, stderr)
	}
}
