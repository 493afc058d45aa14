// Package train trains Brightfold's demo model in Go: a small 3D CNN on the
// synthetic phantoms of the invented Harbourside Memory Research Unit, with
// the gradients of package exec's executor (internal/onnx/exec), Adam, and batch-statistics
// batch normalisation computed here (the executor implements
// BatchNormalization in inference mode only). It also fits the card's
// calibration and out-of-distribution reference from the trained model's
// outputs. Research use only.
//
// # Batch normalisation
//
// The exported model is Conv → BatchNormalization → Relu → MaxPool per block.
// For training, the network is cut at every BatchNormalization into segments
// that share the exported model's parameter tensors; the executor runs the
// segments per case, and this package normalises between them with the
// statistics of the mini-batch (Ioffe & Szegedy 2015, Algorithm 1 and the
// backward pass of Section 3.1), updating the running mean and (unbiased)
// variance with momentum, which the exported model's inference-mode nodes
// then use.
//
// # Determinism
//
// Each case runs on its own goroutine through single-worker executors, and
// every sum over the cases of a batch (batch statistics, parameter
// gradients) is taken in case order, so a run depends only on the seed, not
// on goroutine scheduling or the number of cores. It does depend on the
// floating-point code that runs: package exec picks its AVX2/FMA or its
// portable matrix kernel at run time, and another architecture or Go version
// may round differently, so elsewhere the weights can differ in the last
// bits and the metrics slightly (scripts/demo-model.sh allows for that).
package train

import (
	"fmt"
	"math"
	"math/rand/v2"

	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

// Arch describes the network. Blocks are Conv3d (3×3×3, padding 1, no bias)
// → BatchNormalization → Relu → MaxPool (2×2×2, stride 2); then
// GlobalAveragePool and Flatten give the penultimate features (one per
// channel of the last block) and a Gemm gives one logit per class.
type Arch struct {
	Grid     [3]int // model grid along x, y, z (the tensor is [N, 1, z, y, x])
	Channels []int  // output channels of each block
	Classes  int
	Opset    int64
	Epsilon  float32 // batch normalisation epsilon
	Input    string  // graph input name
	Logits   string  // graph output: logits [N, Classes]
	Features string  // graph output: penultimate features [N, Channels[last]]
}

// DefaultArch is the demo model: 48³ grid, four blocks of 4, 8, 16 and 32
// channels, two classes.
func DefaultArch() Arch {
	return Arch{
		Grid: [3]int{48, 48, 48}, Channels: []int{4, 8, 16, 32}, Classes: 2, Opset: 13, Epsilon: 1e-5,
		Input: "scan", Logits: "logits", Features: "features",
	}
}

// Validate checks that the grid halves cleanly through the blocks.
func (a Arch) Validate() error {
	if len(a.Channels) == 0 || len(a.Channels) > 6 {
		return fmt.Errorf("arch: want 1 to 6 blocks, got %d", len(a.Channels))
	}
	for _, c := range a.Channels {
		if c < 1 || c > 256 {
			return fmt.Errorf("arch: channel count %d out of 1..256", c)
		}
	}
	div := 1 << len(a.Channels)
	for i, g := range a.Grid {
		if g < div || g%div != 0 {
			return fmt.Errorf("arch: grid[%d] = %d must be a positive multiple of %d for %d pooling blocks", i, g, div, len(a.Channels))
		}
	}
	if a.Classes < 2 {
		return fmt.Errorf("arch: need at least 2 classes, got %d", a.Classes)
	}
	if a.Input == "" || a.Logits == "" || a.Features == "" || a.Logits == a.Features {
		return fmt.Errorf("arch: input, logits and features need distinct names")
	}
	return nil
}

// FeatureDim is the length of the penultimate feature vector.
func (a Arch) FeatureDim() int { return a.Channels[len(a.Channels)-1] }

// Voxels is the number of grid voxels of one case.
func (a Arch) Voxels() int { return a.Grid[0] * a.Grid[1] * a.Grid[2] }

// bnLayer is one batch normalisation's parameters and running statistics,
// shared with the exported model.
type bnLayer struct {
	name                string
	scale, bias         *onnx.Tensor
	runMean, runVar     *onnx.Tensor
	channels, positions int     // channels and spatial positions per case
	eps                 float32 // the exported node's epsilon
}

// segment is a piece of the network between batch normalisations.
type segment struct {
	exec    *exec.Executor
	in, out string
	params  []string // parameter names the segment reads
	shape   []int    // input shape of one case
}

// Net is the network: the exported model (inference-mode batch
// normalisation) and the training segments that share its tensors.
type Net struct {
	Arch  Arch
	Model *onnx.Model
	infer *exec.Executor
	segs  []*segment
	bns   []*bnLayer
	param map[string]*onnx.Tensor // every trainable tensor by name
}

// NewNet builds the network with weights drawn from seed: He (Kaiming)
// normal initialisation for convolutions and the classifier (He et al.
// 2015, Section 2.2: standard deviation √(2 / fan-in)), zero classifier bias,
// batch normalisation scale 1 and shift 0, running mean 0 and variance 1.
func NewNet(a Arch, seed uint64) (*Net, error) {
	if err := a.Validate(); err != nil {
		return nil, err
	}
	r := rand.New(rand.NewPCG(seed, 0x6e6574))
	n := &Net{Arch: a, param: map[string]*onnx.Tensor{}}
	convW := make([]*onnx.Tensor, len(a.Channels))
	in := 1
	for i, c := range a.Channels {
		convW[i] = heNormal(r, in*27, c, in, 3, 3, 3)
		bn := &bnLayer{name: fmt.Sprintf("bn%d", i+1), scale: fill(onnx.New(c), 1), bias: onnx.New(c),
			runMean: onnx.New(c), runVar: fill(onnx.New(c), 1), channels: c, eps: a.Epsilon}
		div := 1 << i
		bn.positions = a.Voxels() / (div * div * div)
		n.bns = append(n.bns, bn)
		in = c
	}
	fcW := heNormal(r, in, a.Classes, in)
	fcB := onnx.New(a.Classes)
	m, err := buildFull(a, convW, n.bns, fcW, fcB)
	if err != nil {
		return nil, err
	}
	n.Model = m
	for name, t := range m.Graph.Params() {
		n.param[name] = t
	}
	if n.infer, err = exec.NewExecutorWorkers(m, 1); err != nil {
		return nil, fmt.Errorf("net: %w", err)
	}
	if err := n.buildSegments(convW, fcW, fcB); err != nil {
		return nil, err
	}
	return n, nil
}

func heNormal(r *rand.Rand, fanIn int, shape ...int) *onnx.Tensor {
	t := onnx.New(shape...)
	sd := math.Sqrt(2 / float64(fanIn))
	for i := range t.Data {
		t.Data[i] = float32(r.NormFloat64() * sd)
	}
	return t
}

func fill(t *onnx.Tensor, v float32) *onnx.Tensor {
	for i := range t.Data {
		t.Data[i] = v
	}
	return t
}

// convOpts are the options of every convolution: 3×3×3 kernels padded by
// one voxel on each side.
func convOpts() exec.ConvOpts { return exec.ConvOpts{Pads: []int{1, 1, 1, 1, 1, 1}} }

// pool is the kernel and stride of every max-pool: 2×2×2.
func pool() []int { return []int{2, 2, 2} }

func convName(i int) string { return fmt.Sprintf("conv%d", i+1) }

// buildFull assembles the exported model.
func buildFull(a Arch, convW []*onnx.Tensor, bns []*bnLayer, fcW, fcB *onnx.Tensor) (*onnx.Model, error) {
	b := exec.NewBuilder("harbourside_demo_cnn", a.Opset)
	x := b.Input(a.Input, -1, 1, a.Grid[2], a.Grid[1], a.Grid[0])
	for i := range convW {
		x = b.Conv(convName(i), x, convW[i], nil, convOpts())
		x = b.BatchNorm(bns[i].name, x, bns[i].scale, bns[i].bias, bns[i].runMean, bns[i].runVar, a.Epsilon)
		x = b.Relu(x)
		x = b.MaxPool(x, pool(), pool())
	}
	f := b.Flatten(b.GlobalAveragePool(x), 1)
	f = b.Output(f, a.Features)
	z := b.Gemm("fc", f, fcW, fcB)
	b.Output(z, a.Logits)
	m, err := b.Model()
	if err != nil {
		return nil, fmt.Errorf("net: %w", err)
	}
	return m, nil
}

// buildSegments cuts the network at the batch normalisations: segment 0 is
// conv1; segment k (1..blocks-1) is Relu → MaxPool → conv(k+1); the last is
// Relu → MaxPool → GlobalAveragePool → Flatten → Gemm.
func (n *Net) buildSegments(convW []*onnx.Tensor, fcW, fcB *onnx.Tensor) error {
	a := n.Arch
	shape := []int{1, 1, a.Grid[2], a.Grid[1], a.Grid[0]}
	for i := 0; i <= len(convW); i++ {
		b := exec.NewBuilder(fmt.Sprintf("segment%d", i), a.Opset)
		x := b.Input("in", shape...)
		if i > 0 {
			x = b.MaxPool(b.Relu(x), pool(), pool())
		}
		if i < len(convW) {
			x = b.Conv(convName(i), x, convW[i], nil, convOpts())
		} else {
			x = b.Gemm("fc", b.Flatten(b.GlobalAveragePool(x), 1), fcW, fcB)
		}
		b.Output(x, "out")
		m, err := b.Model()
		if err != nil {
			return fmt.Errorf("net: segment %d: %w", i, err)
		}
		e, err := exec.NewExecutorWorkers(m, 1)
		if err != nil {
			return fmt.Errorf("net: segment %d: %w", i, err)
		}
		n.segs = append(n.segs, &segment{exec: e, in: "in", out: "out", params: m.Graph.ParamNames(), shape: shape})
		if i < len(convW) {
			div := 1 << i
			shape = []int{1, a.Channels[i], a.Grid[2] / div, a.Grid[1] / div, a.Grid[0] / div}
		}
	}
	return nil
}

// ParamNames lists the trainable tensors in sorted order (running
// statistics excluded).
func (n *Net) ParamNames() []string {
	var out []string
	for _, name := range n.Model.Graph.ParamNames() {
		if !n.isRunningStat(name) {
			out = append(out, name)
		}
	}
	return out
}

// Param returns a parameter tensor by name (the model's own).
func (n *Net) Param(name string) *onnx.Tensor { return n.param[name] }

func (n *Net) isRunningStat(name string) bool {
	for _, bn := range n.bns {
		if name == bn.name+".running_mean" || name == bn.name+".running_var" {
			return true
		}
	}
	return false
}

// Encode serialises the exported model as ONNX.
func (n *Net) Encode() ([]byte, error) { return n.Model.Encode() }

// ParameterCount is the number of trainable values.
func (n *Net) ParameterCount() int {
	c := 0
	for _, name := range n.ParamNames() {
		c += n.param[name].Len()
	}
	return c
}
