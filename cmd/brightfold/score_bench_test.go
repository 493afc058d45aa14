package main

import (
	"crypto/sha256"
	"encoding/hex"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"syscall"
	"testing"
	"time"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
	"brightfold/internal/volume/nifti"
)

// benchScan writes a 256×256×176 1 mm int16 .nii.gz head-like volume (an
// ellipsoid head with a brighter inner ellipsoid and texture), the size of a
// typical 1 mm T1-weighted scan.
func benchScan(b *testing.B, dir string) string {
	dims := [3]int{256, 256, 176}
	a := volume.Diag([3]float64{1, 1, 1}, [3]float64{-128, -128, -88})
	v, err := volume.New(dims, a)
	if err != nil {
		b.Fatal(err)
	}
	for k := 0; k < dims[2]; k++ {
		for j := 0; j < dims[1]; j++ {
			for i := 0; i < dims[0]; i++ {
				p := a.Apply([3]float64{float64(i), float64(j), float64(k)})
				x, y, z := p[0]/72, p[1]/90, p[2]/70
				r := x*x + y*y + z*z
				val := 0.0
				switch {
				case r <= 0.6:
					val = 420
				case r <= 1:
					val = 300
				}
				if val > 0 {
					val += 12 * math.Sin(float64(i*7+j*13+k*29))
				}
				v.Data[v.Index(i, j, k)] = float32(val)
			}
		}
	}
	p := filepath.Join(dir, "bench-T1w.nii.gz")
	if err := nifti.Write(p, v, nifti.WriteOptions{DataType: nifti.DTInt16}); err != nil {
		b.Fatal(err)
	}
	return p
}

// benchModel describes a stand-in model for BenchmarkScoreOverhead, written
// by inference/testdata/make_test_model.py (fixed seeds, untrained: only
// the running time matters).
type benchModel struct {
	args    []string // arguments after the output path
	grid    int      // cubic input grid
	spacing float64  // mm
	feat    int      // width of the Flatten features
}

// benchModels are the stand-ins BRIGHTFOLD_BENCH_MODEL can name: "standin",
// the 48³ three-stage CNN of make_test_model.py --bench at 4 mm; "moderate",
// an untrained CNN of moderate size for a structural brain-MRI classifier
// (make_test_model.py --moderate: 96³ at 2 mm, seven convolutions of 16 to 128
// channels, about 8 G multiply-adds); "large", the same form at 128³ and
// 1.5 mm with 24 to 192 channels (make_test_model.py --large, about 44 G
// multiply-adds).
var benchModels = map[string]benchModel{
	"standin":  {args: []string{"--bench", "48"}, grid: 48, spacing: 4, feat: 32},
	"moderate": {args: []string{"--moderate"}, grid: 96, spacing: 2, feat: 128},
	"large":    {args: []string{"--large"}, grid: 128, spacing: 1.5, feat: 192},
}

// benchModelFolder writes the stand-in model folder kind into dir, with the demo-like
// preprocessing at the stand-in's grid and spacing and an unfitted reference
// (the timing does not depend on the reference's values).
func benchModelFolder(b *testing.B, dir, kind string) string {
	bm, ok := benchModels[kind]
	if !ok {
		b.Fatalf("BRIGHTFOLD_BENCH_MODEL=%s: not a stand-in (standin, moderate, large) and not a folder", kind)
	}
	refcheck.PythonModule(b, "torch")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		b.Fatal(err)
	}
	model := filepath.Join(dir, "model.onnx")
	script := filepath.Join(refcheck.RepoRoot(), "inference", "testdata", "make_test_model.py")
	if out, err := exec.Command(refcheck.Python, append([]string{script, model}, bm.args...)...).CombinedOutput(); err != nil {
		b.Fatalf("export bench model: %v\n%s", err, out)
	}
	mb, err := os.ReadFile(model)
	if err != nil {
		b.Fatal(err)
	}
	sum := sha256.Sum256(mb)
	prec := make([][]float64, bm.feat)
	for i := range prec {
		prec[i] = make([]float64, bm.feat)
		prec[i][i] = 1
	}
	th := func(dir string) inference.Threshold {
		return inference.Threshold{Value: 1, Direction: dir, Required: true}
	}
	g, sp := bm.grid, bm.spacing
	card := &inference.Card{
		Schema: inference.SchemaVersion, Name: "bench-" + kind, Version: "0", Task: "benchmark only",
		Classes: []string{"a", "b"}, PositiveClass: "b",
		Input: inference.InputSpec{Name: "scan", Shape: []int64{-1, 1, int64(g), int64(g), int64(g)}, Layout: preprocess.LayoutNCDHW, DataType: "float32"},
		Preprocessing: preprocess.Spec{Orientation: "RAS", SpacingMm: [3]float64{sp, sp, sp}, Shape: [3]int{g, g, g},
			Crop: "head-centre", Antialias: "block-mean", Interpolation: "trilinear",
			HeadMask:  preprocess.HeadMask{Method: "percentile-fraction", LowPercentile: 1, HighPercentile: 99, Fraction: 0.1},
			Intensity: preprocess.Intensity{Method: preprocess.NormZScoreHead}},
		Outputs:     inference.OutputSpec{Logits: "logits", Features: "/flat/Flatten_output_0", Activation: inference.ActivationSoftmax},
		Calibration: inference.Calibration{Temperature: 1},
		OOD: inference.OODReference{
			Envelope:   inference.Envelope{Modalities: []string{"MR"}},
			Intensity:  inference.IntensityReference{Levels: inference.DefaultLevels(), Quantiles: make([]float64, 99)},
			Features:   inference.FeatureReference{Dim: bm.feat, ClassMeans: [][]float64{make([]float64, bm.feat), make([]float64, bm.feat)}, Precision: prec},
			Thresholds: inference.Thresholds{MSP: th("min"), Energy: th("max"), Mahalanobis: th("max"), Wasserstein: th("max")},
		},
		ModelSHA256: hex.EncodeToString(sum[:]), IntendedUse: "benchmark", TrainingData: "none",
	}
	if err := inference.WriteModelFolderDir(dir, card, mb); err != nil {
		b.Fatal(err)
	}
	return dir
}

func median(xs []float64) float64 {
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	return s[len(s)/2]
}

// BenchmarkScoreOverhead measures, in one process, the wall time of scoring
// a 256×256×176 1 mm scan (load, preprocess, ONNX Runtime, postprocess, fit
// checks) against the bare ONNX Runtime Run on the same tensor, and the peak
// resident memory of the whole `brightfold score` command in a child process.
// Goal (issue 4): overhead (score − Run)/Run ≤ 0.2; peak RSS ≤ 600 MB.
// The model is the embedded demo model folder; BRIGHTFOLD_BENCH_MODEL names
// another model folder folder, or a stand-in of benchModels ("standin",
// "moderate").
func BenchmarkScoreOverhead(b *testing.B) {
	lib := refcheck.ORTLib(b)
	dir := b.TempDir()
	modelDir := os.Getenv("BRIGHTFOLD_BENCH_MODEL")
	if _, ok := benchModels[modelDir]; ok {
		modelDir = benchModelFolder(b, filepath.Join(dir, "model"), modelDir)
	}
	scan := benchScan(b, dir)
	if err := inference.InitRuntime(lib); err != nil {
		b.Fatal(err)
	}
	bun, err := openModelFolder(modelDir) // "" is the embedded demo model folder
	if err != nil {
		b.Fatal(err)
	}
	sess, err := inference.NewSession(bun, inference.SessionOptions{})
	if err != nil {
		b.Fatal(err)
	}
	defer sess.Close()
	var scoreMs, noLoadMs, runMs, prepMs, checkMs, loadMs []float64
	b.ResetTimer()
	for i := 0; i < b.N+1; i++ { // the first round warms caches and is dropped
		t0 := time.Now()
		v, err := volume.Load([]string{scan}, volume.LoadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		t1 := time.Now()
		res, err := sess.Score(v)
		if err != nil {
			b.Fatal(err)
		}
		t2 := time.Now()
		if _, err := sess.Run([]*preprocess.Tensor{res.Prepared.Tensor}); err != nil {
			b.Fatal(err)
		}
		t3 := time.Now()
		if i > 0 {
			scoreMs = append(scoreMs, ms(t2.Sub(t0)))
			noLoadMs = append(noLoadMs, ms(t2.Sub(t1)))
			runMs = append(runMs, ms(t3.Sub(t2)))
			prepMs = append(prepMs, res.TimingMs.Preprocess)
			checkMs = append(checkMs, res.TimingMs.FitCheck)
			loadMs = append(loadMs, ms(t1.Sub(t0)))
		}
	}
	b.StopTimer()
	run := median(runMs)
	b.ReportMetric(run, "run_ms")
	b.ReportMetric(median(scoreMs), "score_ms")
	b.ReportMetric(median(prepMs), "preprocess_ms")
	b.ReportMetric(median(checkMs), "fit_check_ms")
	b.ReportMetric(median(loadMs), "load_ms")
	b.ReportMetric((median(scoreMs)-run)/run, "overhead_ratio")
	b.ReportMetric((median(noLoadMs)-run)/run, "overhead_ratio_loaded_scan")
	rss, wall := childScoreRSS(b, scan, modelDir, lib)
	b.ReportMetric(rss, "peak_rss_MB")
	b.ReportMetric(wall, "cli_wall_ms")
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

// childScoreRSS runs `brightfold score` (this test binary, dispatching to run)
// in a child process and returns its peak resident memory in MB and its wall
// time in ms.
func childScoreRSS(b *testing.B, scan, mf, lib string) (float64, float64) {
	cmd := exec.Command(os.Args[0], "-test.run", "^TestScoreChildProcess$")
	cmd.Env = append(os.Environ(), "BRIGHTFOLD_SCORE_CHILD=1", "BRIGHTFOLD_SCORE_SCAN="+scan, "BRIGHTFOLD_SCORE_MODEL="+mf, "BRIGHTFOLD_SCORE_LIB="+lib)
	t0 := time.Now()
	out, err := cmd.CombinedOutput()
	wall := ms(time.Since(t0))
	if err != nil {
		b.Fatalf("child score: %v\n%s", err, out)
	}
	ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		b.Fatal("no rusage")
	}
	return float64(ru.Maxrss) / 1024, wall // Linux reports ru_maxrss in KiB
}

// TestScoreChildProcess is the child of BenchmarkScoreOverhead; it does
// nothing unless started by it.
func TestScoreChildProcess(t *testing.T) {
	if os.Getenv("BRIGHTFOLD_SCORE_CHILD") != "1" {
		return
	}
	args := []string{"score", os.Getenv("BRIGHTFOLD_SCORE_SCAN"), "--ort-lib", os.Getenv("BRIGHTFOLD_SCORE_LIB"), "--json"}
	if m := os.Getenv("BRIGHTFOLD_SCORE_MODEL"); m != "" {
		args = append(args, "--model", m)
	}
	code := run(args, &env{stdout: os.Stdout, stderr: os.Stderr})
	os.Exit(code)
}
