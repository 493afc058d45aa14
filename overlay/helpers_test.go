package overlay

import (
	"crypto/sha256"
	"encoding/hex"
	"math"
	"math/rand/v2"
	"os"
	"sort"
	"sync"
	"testing"

	"brightfold/inference"
	"brightfold/inference/preprocess"
	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
	"brightfold/internal/refcheck"
)

// testCard is a minimal card for a test model with a [N, 1, g, g, g] input
// called "scan" and outputs "logits" (two classes, positive second) and
// "features".
func testCard(model []byte, g int) *inference.Card {
	sum := sha256.Sum256(model)
	return &inference.Card{
		Schema: inference.SchemaVersion, Name: "overlay-test", Version: "0",
		Classes: []string{"negative", "positive"}, PositiveClass: "positive",
		Input: inference.InputSpec{Name: "scan", Shape: []int64{-1, 1, int64(g), int64(g), int64(g)}, Layout: preprocess.LayoutNCDHW, DataType: "float32"},
		Preprocessing: preprocess.Spec{
			Orientation: "RAS", SpacingMm: [3]float64{4, 4, 4}, Shape: [3]int{g, g, g},
			Crop: "head-centre", Antialias: "block-mean", Interpolation: "trilinear",
			HeadMask:  preprocess.HeadMask{Method: "percentile-fraction", LowPercentile: 1, HighPercentile: 99, Fraction: 0.1},
			Intensity: preprocess.Intensity{Method: preprocess.NormZScoreHead, Clip: 5},
		},
		Outputs:     inference.OutputSpec{Logits: "logits", Features: "features", Activation: inference.ActivationSoftmax},
		Calibration: inference.Calibration{Temperature: 1},
		ModelSHA256: hex.EncodeToString(sum[:]),
	}
}

// modelSpec shapes the test CNN.
type modelSpec struct {
	grid   int
	insert string // an extra unary operator after the first ReLU ("" for none), also one the executor lacks
}

func randTensor(r *rand.Rand, scale float64, shape ...int) *onnx.Tensor {
	t := onnx.New(shape...)
	for i := range t.Data {
		t.Data[i] = float32(r.NormFloat64() * scale)
	}
	return t
}

func uniform(r *rand.Rand, lo, hi float64, n int) *onnx.Tensor {
	t := onnx.New(n)
	for i := range t.Data {
		t.Data[i] = float32(lo + (hi-lo)*r.Float64())
	}
	return t
}

// testModel is a small 3D CNN with fixed random weights: Conv (bias) → BN →
// ReLU → MaxPool → Conv → BN → ReLU → AveragePool → Conv → ReLU →
// GlobalAveragePool → Flatten → Dropout → Gemm.
func testModel(t testing.TB, spec modelSpec) []byte {
	t.Helper()
	r := rand.New(rand.NewPCG(11, 12))
	b := exec.NewBuilder("overlay-test", 13)
	pad := exec.ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}}
	bn := func(name, x string, c int) string {
		return b.BatchNorm(name, x, uniform(r, 0.5, 1.5, c), uniform(r, -0.2, 0.2, c), uniform(r, -0.3, 0.3, c), uniform(r, 0.5, 2, c), 1e-5)
	}
	x := b.Input("scan", -1, 1, spec.grid, spec.grid, spec.grid)
	x = b.Conv("conv1", x, randTensor(r, 0.4, 4, 1, 3, 3, 3), randTensor(r, 0.1, 4), pad)
	x = b.Relu(bn("bn1", x, 4))
	if spec.insert != "" {
		x = b.Node("Identity", []string{x}) // becomes spec.insert below
	}
	x = b.MaxPool(x, []int{2, 2, 2}, []int{2, 2, 2})
	x = b.Conv("conv2", x, randTensor(r, 0.25, 6, 4, 3, 3, 3), nil, pad)
	x = b.Relu(bn("bn2", x, 6))
	x = b.AveragePool(x, []int{2, 2, 2}, []int{2, 2, 2})
	x = b.Relu(b.Conv("conv3", x, randTensor(r, 0.2, 8, 6, 3, 3, 3), randTensor(r, 0.1, 8), pad))
	f := b.Flatten(b.GlobalAveragePool(x), 1)
	f = b.Output(f, "features")
	z := b.Gemm("fc", b.Dropout(f), randTensor(r, 0.5, 2, 8), randTensor(r, 0.1, 2))
	b.Output(z, "logits")
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range m.Graph.Nodes {
		if n.OpType == "Identity" && spec.insert != "" {
			n.OpType = spec.insert
		}
	}
	data, err := m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// testModelFolder returns the model folder of testModel(spec).
func testModelFolder(t testing.TB, spec modelSpec) *inference.ModelFolder {
	t.Helper()
	model := testModel(t, spec)
	b, err := inference.NewModelFolder(testCard(model, spec.grid), model)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// testInput is a smooth random head-like input on a g³ grid.
func testInput(g int, seed uint64) *preprocess.Tensor {
	r := rand.New(rand.NewPCG(seed, 3))
	t := &preprocess.Tensor{Layout: preprocess.LayoutNCDHW, Grid: [3]int{g, g, g}, Shape: []int64{1, 1, int64(g), int64(g), int64(g)}, Data: make([]float32, g*g*g)}
	c := float64(g-1) / 2
	for z := 0; z < g; z++ {
		for y := 0; y < g; y++ {
			for x := 0; x < g; x++ {
				d := math.Sqrt(sq(float64(x)-c)+sq(float64(y)-c)+sq(float64(z)-c)) / c
				v := -1.5
				if d < 0.9 {
					v = 1 - d + 0.6*math.Sin(float64(x)/2+float64(y)/3) + 0.3*r.NormFloat64()
				}
				t.Data[t.GridIndex(x, y, z)] = float32(v)
			}
		}
	}
	return t
}

func sq(x float64) float64 { return x * x }

var ortOnce sync.Once

// testSession loads ONNX Runtime (skipping through refcheck when the
// library is missing) and makes b's session.
func testSession(t testing.TB, b *inference.ModelFolder) *inference.Session {
	t.Helper()
	lib := refcheck.ORTLib(t)
	var err error
	ortOnce.Do(func() { err = inference.InitRuntime(lib) })
	if err != nil {
		t.Fatal(err)
	}
	s, err := inference.NewSession(b, inference.SessionOptions{IntraOpThreads: 2})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// relDiff is max |a − b| / max |b|.
func relDiff(a, b []float32) float64 {
	var d, m float64
	for i := range a {
		d = math.Max(d, math.Abs(float64(a[i])-float64(b[i])))
		m = math.Max(m, math.Abs(float64(b[i])))
	}
	return d / math.Max(m, 1e-30)
}

// spearman is Spearman's rank correlation (average ranks for ties).
func spearman(a, b []float32) float64 {
	ra, rb := ranks(a), ranks(b)
	var ma, mb float64
	for i := range ra {
		ma += ra[i]
		mb += rb[i]
	}
	ma /= float64(len(ra))
	mb /= float64(len(rb))
	var sab, saa, sbb float64
	for i := range ra {
		da, db := ra[i]-ma, rb[i]-mb
		sab += da * db
		saa += da * da
		sbb += db * db
	}
	return sab / math.Sqrt(saa*sbb)
}

func ranks(x []float32) []float64 {
	idx := make([]int, len(x))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(i, j int) bool { return x[idx[i]] < x[idx[j]] })
	r := make([]float64, len(x))
	for i := 0; i < len(idx); {
		j := i
		for j+1 < len(idx) && x[idx[j+1]] == x[idx[i]] {
			j++
		}
		avg := float64(i+j)/2 + 1
		for k := i; k <= j; k++ {
			r[idx[k]] = avg
		}
		i = j + 1
	}
	return r
}

func writeFile(t testing.TB, path, text string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
}
