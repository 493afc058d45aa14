package inference

import (
	"archive/zip"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"brightfold/inference/fitcheck"
	"brightfold/inference/internal/scantest"
	"brightfold/inference/preprocess"
	"brightfold/internal/inputerr"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

const tinyModel = "testdata/tiny3d.onnx"

// The tiny test model's feature tensor is the Flatten output, an
// intermediate tensor (see testdata/make_test_model.py).
const tinyFeatures = "/flat/Flatten_output_0"

func readTiny(t testing.TB) []byte {
	b, err := os.ReadFile(tinyModel)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func sha(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// placeholderOOD is a valid but unfitted reference for a card whose OOD
// block FitReference will replace.
func placeholderOOD(dim int) OODReference {
	prec := make([][]float64, dim)
	for i := range prec {
		prec[i] = make([]float64, dim)
		prec[i][i] = 1
	}
	th := func(dir string) Threshold { return Threshold{Value: 0, Direction: dir} }
	return OODReference{
		Envelope:   Envelope{Modalities: []string{"MR"}},
		Intensity:  IntensityReference{Levels: []float64{0.25, 0.75}, Quantiles: []float64{0, 0}},
		Features:   FeatureReference{Dim: dim, ClassMeans: [][]float64{make([]float64, dim), make([]float64, dim)}, Precision: prec},
		Thresholds: Thresholds{MSP: th("min"), Energy: th("max"), Mahalanobis: th("max"), Wasserstein: th("max")},
	}
}

func tinyCard(model []byte) *Card {
	return &Card{
		Schema: SchemaVersion, Name: "tiny3d-test", Version: "0.1", Task: "test fixture: two arbitrary classes from a 16³ grid",
		Classes: []string{"small", "large"}, PositiveClass: "large",
		Input:         InputSpec{Name: "scan", Shape: []int64{-1, 1, 16, 16, 16}, Layout: preprocess.LayoutNCDHW, DataType: "float32"},
		Preprocessing: scantest.Spec(),
		Outputs:       OutputSpec{Logits: "logits", Features: tinyFeatures, Activation: ActivationSoftmax},
		Calibration:   Calibration{Temperature: 1, Method: "none yet"},
		OOD:           placeholderOOD(8),
		ModelSHA256:   sha(model),
		IntendedUse:   "tests only", TrainingData: "untrained fixed random weights; synthetic ellipsoids in the tests",
		Cautions: []string{"not a medical model"},
	}
}

var ortOnce sync.Once

func initORT(t testing.TB) {
	lib := refcheck.ORTLib(t)
	var err error
	ortOnce.Do(func() { err = InitRuntime(lib) })
	if err != nil {
		t.Fatal(err)
	}
}

// syntheticHead is a 1 mm head-like volume: an ellipsoid of given semi-axes
// with a brightness ramp, a darker core and Rician-like noise.
func syntheticHead(rng *rand.Rand, semi [3]float64, noise float64) *volume.Volume {
	v := scantest.EllipsoidHead([3]int{64, 64, 64}, [3]float64{rng.NormFloat64() * 2, rng.NormFloat64() * 2, rng.NormFloat64() * 2}, semi)
	for i, x := range v.Data {
		v.Data[i] = float32(math.Abs(float64(x) + noise*rng.NormFloat64()))
	}
	v.Meta.Modality = "MR"
	return v
}

func cohort(rng *rand.Rand, n int) ([]*volume.Volume, []int) {
	var vs []*volume.Volume
	var ls []int
	for i := 0; i < n; i++ {
		s := 1 + 0.12*rng.NormFloat64()
		vs = append(vs, syntheticHead(rng, [3]float64{18 * s, 22 * s, 17 * s}, 4+rng.Float64()))
		l := 0
		if s > 1 {
			l = 1
		}
		ls = append(ls, l)
	}
	return vs, ls
}

// tinySession is a one-thread session on the tiny model with an unfitted card.
func tinySession(t *testing.T) *Session {
	t.Helper()
	initORT(t)
	model := readTiny(t)
	b, err := NewModelFolder(tinyCard(model), model)
	if err != nil {
		t.Fatal(err)
	}
	s, err := NewSession(b, SessionOptions{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// fittedTinyModelFolder fits a reference for the tiny model on synthetic heads
// and writes a model folder folder.
func fittedTinyModelFolder(t *testing.T) (dir string, card *Card) {
	t.Helper()
	s := tinySession(t)
	defer s.Close()
	card = s.ModelFolder().Card
	model := s.ModelFolder().Model
	rng := rand.New(rand.NewPCG(5, 6))
	vs, ls := cohort(rng, 40)
	var cases []FitCase
	for i, v := range vs {
		pr, err := PrepareForCard(v, card)
		if err != nil {
			t.Fatal(err)
		}
		out, err := s.Run([]*preprocess.Tensor{pr.Tensor})
		if err != nil {
			t.Fatal(err)
		}
		cases = append(cases, FitCase{Facts: MeasureCase(v, pr, DefaultLevels()), Output: out[0], Label: ls[i]})
	}
	ref, cal, metrics, err := FitReference(card, cases[:28], cases[28:], FitOptions{TrainDescription: "28 synthetic heads", ValidationDescription: "12 synthetic heads"})
	if err != nil {
		t.Fatal(err)
	}
	card.OOD, card.Calibration, card.Validation = ref, cal, metrics
	dir = filepath.Join(t.TempDir(), "tiny-model")
	if err := WriteModelFolderDir(dir, card, model); err != nil {
		t.Fatal(err)
	}
	return dir, card
}

// The tiny model through ONNX Runtime agrees with PyTorch's own outputs
// (python3-torch 1.13, testdata/make_test_model.py) for logits and for the
// intermediate feature tensor that the loader adds to the graph outputs.
func TestTinyModelMatchesPyTorch(t *testing.T) {
	refcheck.PythonModule(t, "torch")
	initORT(t)
	var ref struct {
		FeatureName string      `json:"feature_name"`
		Inputs      [][]float32 `json:"inputs"`
		Logits      [][]float64 `json:"logits"`
		Features    [][]float64 `json:"features"`
	}
	fresh := filepath.Join(t.TempDir(), "fresh.onnx")
	refcheck.RunPython(t, "testdata/make_test_model.py", &ref, fresh)
	if fb, err := os.ReadFile(fresh); err != nil || sha(fb) != sha(readTiny(t)) {
		t.Errorf("re-running make_test_model.py does not reproduce %s byte for byte", tinyModel)
	}
	if ref.FeatureName != tinyFeatures {
		t.Fatalf("feature tensor %q, want %q", ref.FeatureName, tinyFeatures)
	}
	model := readTiny(t)
	b, err := NewModelFolder(tinyCard(model), model)
	if err != nil {
		t.Fatal(err)
	}
	if len(b.Graph.AddedOutputs) != 1 || b.Graph.AddedOutputs[0] != tinyFeatures || !b.Graph.BatchDynamic {
		t.Fatalf("graph check: %+v", b.Graph)
	}
	s, err := NewSession(b, SessionOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var ts []*preprocess.Tensor
	for _, in := range ref.Inputs {
		ts = append(ts, &preprocess.Tensor{Data: in, Shape: []int64{1, 1, 16, 16, 16}, Layout: preprocess.LayoutNCDHW, Grid: [3]int{16, 16, 16}})
	}
	batched, err := s.Run(ts)
	if err != nil {
		t.Fatal(err)
	}
	for i := range ts {
		single, err := s.Run(ts[i : i+1])
		if err != nil {
			t.Fatal(err)
		}
		for k, z := range batched[i].Logits {
			if math.Abs(z-ref.Logits[i][k]) > 1e-4 || math.Abs(z-single[0].Logits[k]) > 1e-5 {
				t.Errorf("case %d logit %d: batched %v, single %v, PyTorch %v", i, k, z, single[0].Logits[k], ref.Logits[i][k])
			}
		}
		for k, f := range batched[i].Features {
			if math.Abs(f-ref.Features[i][k]) > 1e-4 {
				t.Errorf("case %d feature %d: ORT %v, PyTorch %v", i, k, f, ref.Features[i][k])
			}
		}
	}
}

func TestModelFolderFitScoreAndZip(t *testing.T) {
	dir, card := fittedTinyModelFolder(t)
	if card.Calibration.Temperature <= 0 || card.OOD.Thresholds.Mahalanobis.Value <= 0 {
		t.Fatalf("fitted card: %+v", card.Calibration)
	}
	zipPath := filepath.Join(t.TempDir(), "tiny.zip")
	writeZip(t, zipPath, dir, "tiny-model/")
	for _, p := range []string{dir, zipPath} {
		b, err := LoadModelFolder(p)
		if err != nil {
			t.Fatalf("%s: %v", p, err)
		}
		if b.Card.Name != "tiny3d-test" || len(b.Graph.AddedOutputs) != 1 {
			t.Fatalf("%s: %+v", p, b.Graph)
		}
	}
	b, _ := LoadModelFolder(dir)
	s, err := NewSession(b, SessionOptions{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	rng := rand.New(rand.NewPCG(77, 78))
	ins, _ := cohort(rng, 20)
	res, err := s.ScoreMany(ins)
	if err != nil {
		t.Fatal(err)
	}
	in := 0
	for _, r := range res {
		if r.Verdict == fitcheck.InDistribution {
			in++
		}
		if math.Abs(r.Prediction.Probabilities["small"]+r.Prediction.Probabilities["large"]-1) > 1e-9 {
			t.Fatal("probabilities do not sum to 1")
		}
		for _, c := range r.Checks {
			if c.Explanation == "" || c.Name == "" {
				t.Fatalf("check without name or sentence: %+v", c)
			}
		}
	}
	t.Logf("fresh in-distribution synthetic heads kept: %d of %d", in, len(res))
	if in < 14 {
		t.Errorf("only %d of 20 fresh in-distribution heads passed the fit check", in)
	}
	// CT-like: air at −1000 HU around a head of soft tissue with a bone shell;
	// the header says MR.
	ct := syntheticHead(rng, [3]float64{18, 22, 17}, 0)
	for i, x := range ct.Data {
		switch {
		case x == 0:
			ct.Data[i] = -1000
		case x < 90:
			ct.Data[i] = 1100
		default:
			ct.Data[i] = 35
		}
	}
	r, err := s.Score(ct)
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict != fitcheck.OutOfDistribution || checkByName(r, CheckHUSignature).Pass {
		t.Errorf("CT-like volume: verdict %s, HU check %+v", r.Verdict, checkByName(r, CheckHUSignature))
	}
	// thick slices: 5 mm along k
	thick := syntheticHead(rng, [3]float64{18, 22, 17}, 4)
	thick = preprocess.BlockMean(thick, [3]int{1, 1, 5})
	r, err = s.Score(thick)
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict != fitcheck.OutOfDistribution || checkByName(r, CheckSliceThickness).Pass {
		t.Errorf("thick slices: verdict %s, %+v", r.Verdict, checkByName(r, CheckSliceThickness))
	}
	// the header says CT
	ctHeader := syntheticHead(rng, [3]float64{18, 22, 17}, 4)
	ctHeader.Meta.Modality = "CT"
	r, _ = s.Score(ctHeader)
	if c := checkByName(r, CheckModality); c.Pass || !strings.Contains(c.Explanation, "CT") {
		t.Errorf("CT header: %+v", c)
	}
}

func checkByName(r *Result, name string) fitcheck.Check {
	for _, c := range r.Checks {
		if c.Name == name {
			return c
		}
	}
	return fitcheck.Check{Name: "missing " + name}
}

func writeZip(t *testing.T, zipPath, dir, prefix string) {
	t.Helper()
	f, err := os.Create(zipPath)
	if err != nil {
		t.Fatal(err)
	}
	zw := zip.NewWriter(f)
	for _, n := range []string{ModelFile, CardFile} {
		b, err := os.ReadFile(filepath.Join(dir, n))
		if err != nil {
			t.Fatal(err)
		}
		w, _ := zw.Create(prefix + n)
		w.Write(b)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
}

// Each refusal names the field or reason.
func TestModelFolderRefusals(t *testing.T) {
	model := readTiny(t)
	good := tinyCard(model)
	cases := []struct {
		name, want string
		edit       func(c *Card, m []byte) []byte
	}{
		{"tampered model", "sha256", func(c *Card, m []byte) []byte {
			m = append([]byte(nil), m...)
			m[len(m)-10] ^= 1
			return m
		}},
		{"input name", "input.name", func(c *Card, m []byte) []byte { c.Input.Name = "image"; return m }},
		{"input shape", "input.shape", func(c *Card, m []byte) []byte {
			c.Input.Shape = []int64{-1, 1, 20, 20, 20}
			c.Preprocessing.Shape = [3]int{20, 20, 20}
			return m
		}},
		{"fixed batch on a dynamic graph", "input.shape[0]", func(c *Card, m []byte) []byte { c.Input.Shape[0] = 4; return m }},
		{"features not in graph", "outputs.features", func(c *Card, m []byte) []byte { c.Outputs.Features = "penultimate"; return m }},
		{"logits not in graph", "outputs.logits", func(c *Card, m []byte) []byte { c.Outputs.Logits = "scores"; return m }},
		{"class count", "outputs.logits", func(c *Card, m []byte) []byte {
			c.Classes = []string{"a", "b", "large"}
			c.OOD.Features.ClassMeans = append(c.OOD.Features.ClassMeans, make([]float64, 8))
			return m
		}},
		{"not onnx", "not a valid ONNX model", func(c *Card, m []byte) []byte { return []byte("hello, not protobuf\xff\xff") }},
	}
	for _, tc := range cases {
		c := *good
		c.Input.Shape = append([]int64(nil), good.Input.Shape...)
		m := tc.edit(&c, model)
		if tc.name != "tampered model" {
			c.ModelSHA256 = sha(m)
		}
		err := c.Validate()
		if err == nil {
			_, err = NewModelFolder(&c, m)
		}
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want one naming %q", tc.name, err, tc.want)
		}
	}
	// card-level refusals through ParseCard
	cb, _ := MarshalCard(good)
	var raw map[string]any
	json.Unmarshal(cb, &raw)
	for _, tc := range []struct {
		edit func(map[string]any)
		want string
	}{
		{func(m map[string]any) { m["schema"] = "brightfold-card/9" }, "unknown version"},
		{func(m map[string]any) { delete(m, "schema") }, "schema: missing"},
		{func(m map[string]any) { m["surprise"] = 1 }, "unknown field"},
		{func(m map[string]any) { m["model_sha256"] = "abc" }, "model_sha256"},
		{func(m map[string]any) { m["positive_class"] = "medium" }, "positive_class"},
		{func(m map[string]any) { m["calibration"] = map[string]any{"temperature": -1} }, "calibration.temperature"},
	} {
		var m map[string]any
		json.Unmarshal(cb, &m)
		tc.edit(m)
		b, _ := json.Marshal(m)
		if _, err := ParseCard(b); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("card edit: error %v, want %q", err, tc.want)
		}
	}
	// folder without a card; zip of junk
	if _, err := LoadModelFolder(t.TempDir()); err == nil || !strings.Contains(err.Error(), "no card.json") {
		t.Errorf("empty folder: %v", err)
	}
	// a zip member that declares 2 GiB is refused before it is inflated
	var zb bytes.Buffer
	zw := zip.NewWriter(&zb)
	cw, _ := zw.Create("card.json")
	cw.Write(cb)
	rw, _ := zw.CreateRaw(&zip.FileHeader{Name: "model.onnx", Method: zip.Deflate, CompressedSize64: 10, UncompressedSize64: 2 << 30})
	rw.Write(make([]byte, 10))
	zw.Close()
	zr, _ := zip.NewReader(bytes.NewReader(zb.Bytes()), int64(zb.Len()))
	if _, err := LoadModelFolderFS(zr); err == nil || !strings.Contains(err.Error(), "more than the limit") {
		t.Errorf("zip bomb: %v", err)
	}
	junk := filepath.Join(t.TempDir(), "junk.zip")
	os.WriteFile(junk, []byte("PK\x03\x04 not really"), 0o644)
	if _, err := LoadModelFolder(junk); err == nil || !strings.Contains(err.Error(), "junk.zip") {
		t.Errorf("junk zip: %v", err)
	}
}

// A file that is not the ONNX Runtime library gives an input error naming
// it, with the install command. ONNX Runtime can be initialised once per
// process, so the attempt runs in a child process of the test binary.
func TestInitRuntimeBadLibrary(t *testing.T) {
	if p := os.Getenv("BRIGHTFOLD_TEST_BAD_ORT"); p != "" {
		err := InitRuntime(p)
		fmt.Printf("inputerr=%v err=%v\n", inputerr.Is(err), err)
		os.Exit(0)
	}
	bad := filepath.Join(t.TempDir(), "libonnxruntime.so.1")
	os.WriteFile(bad, []byte("not a shared library"), 0o644)
	for _, p := range []string{bad, filepath.Join(t.TempDir(), "missing.so")} {
		cmd := exec.Command(os.Args[0], "-test.run", "^TestInitRuntimeBadLibrary$")
		cmd.Env = append(os.Environ(), "BRIGHTFOLD_TEST_BAD_ORT="+p)
		out, _ := cmd.CombinedOutput()
		s := string(out)
		if !strings.Contains(s, "inputerr=true") || !strings.Contains(s, p) || !strings.Contains(s, "make setup") {
			t.Errorf("bad library %s: %s", p, s)
		}
	}
}

// FuzzParseCard: hostile card JSON gives an error, never a panic.
func FuzzParseCard(f *testing.F) {
	cb, _ := MarshalCard(tinyCard([]byte("x")))
	f.Add(cb)
	f.Add([]byte(`{"schema":"brightfold-card/1"}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		c, err := ParseCard(b)
		if err == nil && c.Validate() != nil {
			t.Fatal("ParseCard accepted an invalid card")
		}
	})
}

var updateExample = flag.Bool("update-example", false, "rewrite testdata/card-example.json from a fitted tiny model folder")

// testdata/card-example.json (the example of docs/card.md) is a complete
// card for the tiny model that loads as a model folder.
func TestExampleCard(t *testing.T) {
	const path = "testdata/card-example.json"
	if *updateExample {
		dir, _ := fittedTinyModelFolder(t)
		b, err := os.ReadFile(filepath.Join(dir, CardFile))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	c, err := ParseCard(b)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := NewModelFolder(c, readTiny(t)); err != nil {
		t.Fatal(err)
	}
}

// One session serves several goroutines at once (ONNX Runtime's Run is
// thread-safe on one session) and gives each the same outputs as alone.
func TestSessionConcurrentRuns(t *testing.T) {
	s := tinySession(t)
	defer s.Close()
	ts := waveTensors(4, math.Sin, 97)
	var want []Output
	for i := range ts {
		o, err := s.Run(ts[i : i+1])
		if err != nil {
			t.Fatal(err)
		}
		want = append(want, o[0])
	}
	var wg sync.WaitGroup
	errs := make(chan string, 16)
	for g := 0; g < 8; g++ {
		wg.Add(1)
		go func(g int) {
			defer wg.Done()
			for rep := 0; rep < 5; rep++ {
				i := (g + rep) % len(ts)
				out, err := s.Run(ts[i : i+1])
				if err != nil {
					errs <- err.Error()
					return
				}
				for k := range out[0].Logits {
					if out[0].Logits[k] != want[i].Logits[k] {
						errs <- fmt.Sprintf("goroutine %d case %d: logit %v, alone %v", g, i, out[0].Logits[k], want[i].Logits[k])
						return
					}
				}
			}
		}(g)
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
}

// ScoreManyContext reports its stages in order with growing fractions,
// gives the same results as ScoreMany, and stops with the context's error
// when cancelled: before it starts, and from the progress callback at the
// model stage (the cancellation then reaches the running ONNX Runtime
// session through its terminate flag, or the check after it).
func TestScoreContextProgressAndCancel(t *testing.T) {
	dir, _ := fittedTinyModelFolder(t)
	b, err := LoadModelFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	s, err := NewSession(b, SessionOptions{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ins, _ := cohort(rand.New(rand.NewPCG(91, 92)), 3)
	var stages []Stage
	last := -1.0
	got, err := s.ScoreManyContext(context.Background(), ins, func(st Stage, done float64) {
		if done < last || done > 1 {
			t.Errorf("progress %v after %v", done, last)
		}
		last = done
		if len(stages) == 0 || stages[len(stages)-1] != st {
			stages = append(stages, st)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if want := []Stage{StagePrepare, StageModel, StageFitCheck}; fmt.Sprint(stages) != fmt.Sprint(want) || last != 1 {
		t.Errorf("stages %v ending at %v, want %v ending at 1", stages, last, want)
	}
	plain, err := s.ScoreMany(ins)
	if err != nil {
		t.Fatal(err)
	}
	for i := range plain {
		if plain[i].Prediction.Probability != got[i].Prediction.Probability || plain[i].Verdict != got[i].Verdict {
			t.Errorf("case %d: with context %+v, without %+v", i, got[i].Prediction, plain[i].Prediction)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := s.ScoreContext(ctx, ins[0], nil); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled before the start: %v", err)
	}
	ctx, cancel = context.WithCancel(context.Background())
	defer cancel()
	_, err = s.ScoreManyContext(ctx, ins, func(st Stage, _ float64) {
		if st == StageModel {
			cancel()
		}
	})
	if !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled at the model stage: %v", err)
	}
	// inside a batch: ONNX Runtime's terminate flag set by the watcher stops
	// the run, and the context's error comes back
	pr, err := PrepareForCard(ins[0], b.Card)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel = context.WithCancel(context.Background())
	cancel()
	if _, err := s.runBatch(ctx, []*preprocess.Tensor{pr.Tensor}); !errors.Is(err, context.Canceled) {
		t.Errorf("terminated run: %v", err)
	}
	// the session still works after a terminated run
	if _, err := s.ScoreContext(context.Background(), ins[0], nil); err != nil {
		t.Errorf("after a cancelled run: %v", err)
	}
}
