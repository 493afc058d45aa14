package exec

import (
	"fmt"
	"math/rand/v2"
	"syscall"
	"testing"
	"time"

	"brightfold/internal/onnx"
	ort "github.com/yalue/onnxruntime_go"
)

// Benchmarks at training size: 3D convolutions of a small CNN on 48³ model
// grids, and the whole network forward (and forward + backward). GFLOP/s
// counts one multiply-add as two operations. The ONNX Runtime benchmark runs
// the same network in the same process as the reference.

// cpuTime is the process's user+system CPU time so far; benchmarks report
// CPU-ms/op beside wall time, which stays meaningful on a loaded machine.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// cpuMeter reports CPU-ms/op (and GFLOP per CPU-second when flops > 0) at
// the end of a benchmark.
type cpuMeter struct {
	b     *testing.B
	start time.Duration
}

func startCPU(b *testing.B) *cpuMeter {
	b.ResetTimer()
	return &cpuMeter{b: b, start: cpuTime()}
}

func (m *cpuMeter) stop(flopsPerOp float64) {
	cpu := (cpuTime() - m.start).Seconds()
	n := float64(m.b.N)
	m.b.ReportMetric(cpu*1000/n, "CPU-ms/op")
	if flopsPerOp > 0 {
		m.b.ReportMetric(flopsPerOp*n/m.b.Elapsed().Seconds()/1e9, "GFLOP/s")
		m.b.ReportMetric(flopsPerOp*n/cpu/1e9, "GFLOP/CPU-s")
	}
}

type convBench struct {
	name          string
	n, c, m, size int
}

var convBenches = []convBench{
	{"48cube_1to8", 4, 1, 8, 48},
	{"24cube_8to16", 4, 8, 16, 24},
	{"12cube_16to32", 4, 16, 32, 12},
}

func convBenchModel(b *testing.B, cb convBench, r *rand.Rand) (*Executor, map[string]*onnx.Tensor, float64) {
	bl := NewBuilder("bench", 13)
	x := bl.Input("x", -1, cb.c, cb.size, cb.size, cb.size)
	y := bl.Conv("conv", x, randTensor(r, 0.2, cb.m, cb.c, 3, 3, 3), randTensor(r, 0.1, cb.m), ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}})
	bl.Output(y, "y")
	m, err := bl.Model()
	if err != nil {
		b.Fatal(err)
	}
	e, err := NewExecutor(m)
	if err != nil {
		b.Fatal(err)
	}
	vox := float64(cb.size * cb.size * cb.size)
	flops := 2 * float64(cb.n) * vox * float64(cb.m*cb.c*27)
	return e, map[string]*onnx.Tensor{"x": randTensor(r, 1, cb.n, cb.c, cb.size, cb.size, cb.size)}, flops
}

func BenchmarkConv3DForward(b *testing.B) {
	for _, cb := range convBenches {
		b.Run(fmt.Sprintf("%s_batch%d", cb.name, cb.n), func(b *testing.B) {
			e, feed, flops := convBenchModel(b, cb, rand.New(rand.NewPCG(1, 1)))
			cm := startCPU(b)
			for i := 0; i < b.N; i++ {
				if _, err := e.Forward(feed); err != nil {
					b.Fatal(err)
				}
			}
			cm.stop(flops)
		})
	}
}

// BenchmarkConv3DBackward times the weight, bias and input gradients (twice
// the forward's multiply-adds).
func BenchmarkConv3DBackward(b *testing.B) {
	for _, cb := range convBenches {
		b.Run(fmt.Sprintf("%s_batch%d", cb.name, cb.n), func(b *testing.B) {
			e, feed, flops := convBenchModel(b, cb, rand.New(rand.NewPCG(1, 1)))
			tr, err := e.Forward(feed)
			if err != nil {
				b.Fatal(err)
			}
			seed := map[string]*onnx.Tensor{"y": randTensor(rand.New(rand.NewPCG(2, 2)), 1, tr.Value("y").Shape...)}
			cm := startCPU(b)
			for i := 0; i < b.N; i++ {
				if _, err := e.Backward(tr, seed); err != nil {
					b.Fatal(err)
				}
			}
			cm.stop(2 * flops)
		})
	}
}

// demoSizeCNN is a network of the demo model's kind on a 48³ grid: three
// conv–BN–ReLU–pool stages (8, 16, 32 channels), global average pooling
// and a linear layer.
func demoSizeCNN(b *testing.B) *onnx.Model {
	r := rand.New(rand.NewPCG(9, 9))
	bl := NewBuilder("demo-size", 13)
	x := bl.Input("input", -1, 1, 48, 48, 48)
	c := 1
	for i, m := range []int{8, 16, 32} {
		name := fmt.Sprintf("conv%d", i+1)
		x = bl.Conv(name, x, randTensor(r, 0.3, m, c, 3, 3, 3), randTensor(r, 0.1, m), ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}})
		x = bl.BatchNorm(fmt.Sprintf("bn%d", i+1), x, randTensor(r, 1, m), randTensor(r, 0.1, m), randTensor(r, 0.1, m), onnx.FromData(onesPlus(r, m), m), 1e-5)
		x = bl.Relu(x)
		if i < 2 {
			x = bl.MaxPool(x, []int{2, 2, 2}, []int{2, 2, 2})
		}
		c = m
	}
	x = bl.Flatten(bl.GlobalAveragePool(x), 1)
	bl.Output(x, "features")
	bl.Output(bl.Gemm("fc", "features", randTensor(r, 0.3, 2, 32), randTensor(r, 0.1, 2)), "logits")
	m, err := bl.Model()
	if err != nil {
		b.Fatal(err)
	}
	return m
}

func onesPlus(r *rand.Rand, n int) []float32 {
	v := make([]float32, n)
	for i := range v {
		v[i] = 0.5 + r.Float32()
	}
	return v
}

func BenchmarkCNNForward48(b *testing.B) {
	m := demoSizeCNN(b)
	e, err := NewExecutor(m)
	if err != nil {
		b.Fatal(err)
	}
	feed := map[string]*onnx.Tensor{"input": randTensor(rand.New(rand.NewPCG(3, 3)), 1, 1, 1, 48, 48, 48)}
	cm := startCPU(b)
	for i := 0; i < b.N; i++ {
		if _, err := e.Forward(feed); err != nil {
			b.Fatal(err)
		}
	}
	cm.stop(0)
}

// BenchmarkCNNTrainStep48 is one training step's work at batch 8: forward,
// and backward to the parameters (no input gradient).
func BenchmarkCNNTrainStep48(b *testing.B) {
	m := demoSizeCNN(b)
	e, err := NewExecutor(m)
	if err != nil {
		b.Fatal(err)
	}
	feed := map[string]*onnx.Tensor{"input": randTensor(rand.New(rand.NewPCG(3, 3)), 1, 8, 1, 48, 48, 48)}
	seed := map[string]*onnx.Tensor{"logits": randTensor(rand.New(rand.NewPCG(4, 4)), 1, 8, 2)}
	cm := startCPU(b)
	for i := 0; i < b.N; i++ {
		tr, err := e.Forward(feed)
		if err != nil {
			b.Fatal(err)
		}
		if _, err := e.BackwardWith(tr, seed, BackwardOptions{NoInputs: true}); err != nil {
			b.Fatal(err)
		}
	}
	cm.stop(0)
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N)/8, "ms/sample")
}

// BenchmarkCNNForward48ORT runs the same network in ONNX Runtime (2 intra-op
// threads) as the reference for BenchmarkCNNForward48.
func BenchmarkCNNForward48ORT(b *testing.B) {
	if !ortStarted {
		b.Skip("ONNX Runtime not available (run make setup)")
	}
	m := demoSizeCNN(b)
	data, err := m.Encode()
	if err != nil {
		b.Fatal(err)
	}
	x := randTensor(rand.New(rand.NewPCG(3, 3)), 1, 1, 1, 48, 48, 48)
	in, err := ort.NewTensor(ort.NewShape(1, 1, 48, 48, 48), x.Data)
	if err != nil {
		b.Fatal(err)
	}
	defer in.Destroy()
	opts, err := ort.NewSessionOptions()
	if err != nil {
		b.Fatal(err)
	}
	defer opts.Destroy()
	if err := opts.SetIntraOpNumThreads(2); err != nil {
		b.Fatal(err)
	}
	s, err := ort.NewDynamicAdvancedSessionWithONNXData(data, []string{"input"}, []string{"logits"}, opts)
	if err != nil {
		b.Fatal(err)
	}
	defer s.Destroy()
	cm := startCPU(b)
	for i := 0; i < b.N; i++ {
		out := []ort.Value{nil}
		if err := s.Run([]ort.Value{in}, out); err != nil {
			b.Fatal(err)
		}
		out[0].Destroy()
	}
	cm.stop(0)
}
