package train

import (
	"math"
	"math/rand/v2"
	"testing"

	"brightfold/internal/onnx"
	"brightfold/internal/onnx/exec"
)

func tinyArch() Arch {
	a := DefaultArch()
	a.Grid = [3]int{8, 8, 8}
	a.Channels = []int{2, 3}
	return a
}

// blobSet makes cases of noise where class 1 has a brighter cube in one
// corner: learnable in a few steps.
func blobSet(a Arch, n int, seed uint64) []Example {
	r := rand.New(rand.NewPCG(seed, 1))
	out := make([]Example, n)
	for i := range out {
		x := make([]float32, a.Voxels())
		for j := range x {
			x[j] = float32(r.NormFloat64())
		}
		label := i % 2
		if label == 1 {
			for z := 0; z < a.Grid[2]/2; z++ {
				for y := 0; y < a.Grid[1]/2; y++ {
					for xx := 0; xx < a.Grid[0]/2; xx++ {
						x[xx+a.Grid[0]*(y+a.Grid[1]*z)] += 1.5
					}
				}
			}
		}
		out[i] = Example{X: x, Label: label}
	}
	return out
}

func batchLoss(t *testing.T, n *Net, set []Example) float64 {
	t.Helper()
	xs, labels := split(set)
	st, err := n.trainForward(xs, 2, 0)
	if err != nil {
		t.Fatal(err)
	}
	loss, _ := CrossEntropy(st.logits, labels)
	return loss
}

// TestGradientMatchesFiniteDifferences checks the training backward pass
// (executor segments plus this package's batch-statistics normalisation)
// against central finite differences of the batch loss, the standard
// numerical check of a gradient (e.g. Goodfellow, Bengio & Courville 2016,
// Section 11.5, common practice).
func TestGradientMatchesFiniteDifferences(t *testing.T) {
	a := tinyArch()
	n, err := NewNet(a, 3)
	if err != nil {
		t.Fatal(err)
	}
	set := blobSet(a, 3, 4)
	// Move the normalisation parameters off their initial values so that
	// their gradients are generic.
	r := rand.New(rand.NewPCG(9, 9))
	for _, bn := range n.bns {
		for c := range bn.scale.Data {
			bn.scale.Data[c] = float32(0.5 + r.Float64())
			bn.bias.Data[c] = float32(r.NormFloat64() * 0.3)
		}
	}
	xs, labels := split(set)
	st, err := n.trainForward(xs, 2, 0)
	if err != nil {
		t.Fatal(err)
	}
	_, gl := CrossEntropy(st.logits, labels)
	grads, err := n.trainBackward(st, gl, 2)
	if err != nil {
		t.Fatal(err)
	}
	// h small enough that ReLU and max-pool kinks are rarely crossed, large
	// enough for float32 forward passes (float32 carries about 7 digits).
	const h = 1e-3
	worst := 0.0
	checked := 0
	for _, name := range n.ParamNames() {
		p := n.Param(name)
		g := grads[name]
		if g == nil {
			t.Fatalf("no gradient for %s", name)
		}
		for _, i := range []int{0, p.Len() / 2, p.Len() - 1} {
			orig := p.Data[i]
			p.Data[i] = orig + h
			up := batchLoss(t, n, set)
			p.Data[i] = orig - h
			down := batchLoss(t, n, set)
			p.Data[i] = orig
			num := (up - down) / (2 * h)
			err := math.Abs(num-float64(g[i])) / math.Max(1e-3, math.Abs(num)+math.Abs(float64(g[i])))
			worst = math.Max(worst, err)
			checked++
			if err > 0.02 {
				t.Errorf("%s[%d]: backward %.6g, finite difference %.6g", name, i, g[i], num)
			}
		}
	}
	t.Logf("%d gradient entries checked, worst relative error %.3g", checked, worst)
}

// TestLossDecreases trains a tiny network for a few steps on an easy task.
func TestLossDecreases(t *testing.T) {
	a := tinyArch()
	n, err := NewNet(a, 5)
	if err != nil {
		t.Fatal(err)
	}
	set := blobSet(a, 16, 6)
	before := batchLoss(t, n, set)
	cfg := DefaultConfig(7)
	cfg.Epochs, cfg.BatchSize, cfg.LR, cfg.WarmupSteps = 6, 8, 1e-2, 2
	cfg.Flip = false
	if _, err := Fit(n, set, nil, cfg); err != nil {
		t.Fatal(err)
	}
	after := batchLoss(t, n, set)
	t.Logf("batch loss %.4f -> %.4f", before, after)
	if !(after < before*0.8) {
		t.Errorf("loss did not decrease enough: %.4f -> %.4f", before, after)
	}
}

// TestDeterministic: the same seed gives bit-identical weights whatever the
// number of goroutines.
func TestDeterministic(t *testing.T) {
	a := tinyArch()
	set := blobSet(a, 8, 2)
	run := func(workers int) []float32 {
		n, err := NewNet(a, 1)
		if err != nil {
			t.Fatal(err)
		}
		cfg := DefaultConfig(3)
		cfg.Epochs, cfg.BatchSize, cfg.Workers = 2, 4, workers
		if _, err := Fit(n, set, nil, cfg); err != nil {
			t.Fatal(err)
		}
		var all []float32
		for _, name := range n.Model.Graph.ParamNames() {
			all = append(all, n.Param(name).Data...)
		}
		return all
	}
	a1, a3 := run(1), run(3)
	for i := range a1 {
		if a1[i] != a3[i] {
			t.Fatalf("value %d differs between 1 and 3 workers: %v vs %v", i, a1[i], a3[i])
		}
	}
}

// TestExportRoundTrip encodes the trained model, decodes it with
// onnx.Decode and checks that the decoded model computes the same outputs.
func TestExportRoundTrip(t *testing.T) {
	a := tinyArch()
	n, err := NewNet(a, 8)
	if err != nil {
		t.Fatal(err)
	}
	set := blobSet(a, 8, 9)
	cfg := DefaultConfig(1)
	cfg.Epochs, cfg.BatchSize = 1, 4
	if _, err := Fit(n, set, nil, cfg); err != nil {
		t.Fatal(err)
	}
	b, err := n.Encode()
	if err != nil {
		t.Fatal(err)
	}
	m, err := onnx.Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	e, err := exec.NewExecutor(m)
	if err != nil {
		t.Fatal(err)
	}
	want, err := n.Predict([][]float32{set[1].X}, 1)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := e.Forward(map[string]*onnx.Tensor{a.Input: onnx.FromData(set[1].X, 1, 1, 8, 8, 8)})
	if err != nil {
		t.Fatal(err)
	}
	for _, o := range []struct {
		name string
		want []float64
	}{{a.Logits, want[0].Logits}, {a.Features, want[0].Features}} {
		got := tr.Value(o.name)
		if got == nil || len(got.Data) != len(o.want) {
			t.Fatalf("decoded model: output %s is %v", o.name, got)
		}
		for i, v := range got.Data {
			if float64(v) != o.want[i] {
				t.Errorf("%s[%d]: decoded %v, trained %v", o.name, i, v, o.want[i])
			}
		}
	}
	if len(m.Graph.Outputs) != 2 || m.Graph.Outputs[0].Name != a.Features || m.Graph.Outputs[1].Name != a.Logits {
		t.Errorf("outputs %v", m.Graph.Outputs)
	}
}

// TestAugment: a flip is its own inverse, and a translation moves a voxel by
// the drawn offset.
func TestAugment(t *testing.T) {
	grid := [3]int{4, 3, 2}
	x := make([]float32, 24)
	for i := range x {
		x[i] = float32(i)
	}
	r := rand.New(rand.NewPCG(1, 1))
	cfg := Config{Flip: true}
	var flipped []float32
	for k := 0; k < 10 && flipped == nil; k++ {
		if y := augment(x, grid, r, cfg); &y[0] != &x[0] {
			flipped = y
		}
	}
	if flipped == nil || flipped[0] != 3 || flipped[3] != 0 || flipped[4] != 7 {
		t.Fatalf("flip: %v", flipped)
	}
	cfg = Config{Shift: 1}
	for k := 0; k < 20; k++ {
		y := augment(x, grid, rand.New(rand.NewPCG(uint64(k), 2)), cfg)
		// Re-draw the offsets the same way augment does.
		r2 := rand.New(rand.NewPCG(uint64(k), 2))
		var d [3]int
		for a := range d {
			d[a] = r2.IntN(3) - 1
		}
		// Voxel (1, 1, 0) of the output comes from (1−dx, 1−dy, −dz) clamped.
		sx, sy, sz := 1-d[0], 1-d[1], max(0, min(1, -d[2]))
		if got, want := y[1+4*(1+3*0)], x[sx+4*(sy+3*sz)]; got != want {
			t.Errorf("shift %v: voxel (1,1,0) = %v, want %v", d, got, want)
		}
	}
}
