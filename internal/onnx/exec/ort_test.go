package exec

import (
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
	ort "github.com/yalue/onnxruntime_go"
)

// ortInitErr is the result of initialising ONNX Runtime in TestMain; the
// environment is process-global, so it is set up once for all tests.
var (
	ortStarted bool
	ortInitErr error
)

func TestMain(m *testing.M) {
	flag.Parse()
	if f := flag.Lookup("test.fuzz"); f != nil && f.Value.String() != "" {
		os.Exit(m.Run()) // fuzzing needs no ONNX Runtime
	}
	lib := os.Getenv("BRIGHTFOLD_ORT_LIB")
	if lib == "" {
		lib = filepath.Join(refcheck.RepoRoot(), ".cache", "onnxruntime", "libonnxruntime.so.1")
	}
	if _, err := os.Stat(lib); err == nil {
		ort.SetSharedLibraryPath(lib)
		ortInitErr = ort.InitializeEnvironment()
		ortStarted = ortInitErr == nil
	}
	code := m.Run()
	if ortStarted {
		if err := ort.DestroyEnvironment(); err != nil && code == 0 {
			fmt.Fprintln(os.Stderr, "destroy ONNX Runtime environment:", err)
			code = 1
		}
	}
	os.Exit(code)
}

// needORT skips (or fails under BRIGHTFOLD_REQUIRE_REFERENCE=1) without the
// library, and fails if it did not initialise.
func needORT(t *testing.T) {
	t.Helper()
	refcheck.ORTLib(t)
	if ortInitErr != nil {
		t.Fatalf("ONNX Runtime: %v", ortInitErr)
	}
	if !ortStarted {
		t.Fatal("ONNX Runtime environment not initialised")
	}
}

// runORT runs the encoded model in ONNX Runtime (one thread) on float
// inputs and returns its float outputs by name.
func runORT(t *testing.T, m *onnx.Model, feed map[string]*onnx.Tensor) map[string]*onnx.Tensor {
	t.Helper()
	data, err := m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	var inNames, outNames []string
	var inputs []ort.Value
	for _, vi := range m.Graph.RealInputs() {
		x := feed[vi.Name]
		shape := make([]int64, len(x.Shape))
		for i, d := range x.Shape {
			shape[i] = int64(d)
		}
		v, err := ort.NewTensor(ort.NewShape(shape...), x.Data)
		if err != nil {
			t.Fatal(err)
		}
		defer v.Destroy()
		inNames = append(inNames, vi.Name)
		inputs = append(inputs, v)
	}
	for _, vo := range m.Graph.Outputs {
		outNames = append(outNames, vo.Name)
	}
	opts, err := ort.NewSessionOptions()
	if err != nil {
		t.Fatal(err)
	}
	defer opts.Destroy()
	if err := opts.SetIntraOpNumThreads(1); err != nil {
		t.Fatal(err)
	}
	s, err := ort.NewDynamicAdvancedSessionWithONNXData(data, inNames, outNames, opts)
	if err != nil {
		t.Fatalf("ONNX Runtime refused the encoded model: %v", err)
	}
	defer s.Destroy()
	outputs := make([]ort.Value, len(outNames))
	if err := s.Run(inputs, outputs); err != nil {
		t.Fatalf("ONNX Runtime run: %v", err)
	}
	res := map[string]*onnx.Tensor{}
	for i, v := range outputs {
		defer v.Destroy()
		ft, ok := v.(*ort.Tensor[float32])
		if !ok {
			t.Fatalf("output %s is not a float32 tensor", outNames[i])
		}
		var shape []int
		for _, d := range ft.GetShape() {
			shape = append(shape, int(d))
		}
		res[outNames[i]] = onnx.FromData(append([]float32{}, ft.GetData()...), shape...)
	}
	return res
}

// compareWithORT runs m in the executor and in ONNX Runtime and requires
// every output to agree within tol·(1 + |ORT value|).
func compareWithORT(t *testing.T, name string, m *onnx.Model, feed map[string]*onnx.Tensor, tol float64) {
	t.Helper()
	e, err := NewExecutor(m)
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	tr, err := e.Forward(feed)
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	for oname, want := range runORT(t, m, feed) {
		got := tr.Value(oname)
		if msg := compareTol(got, want, tol); msg != "" {
			t.Errorf("%s: output %s: %s", name, oname, msg)
		}
	}
}

func compareTol(got, want *onnx.Tensor, tol float64) string {
	if got == nil || !onnx.SameShape(got.Shape, want.Shape) {
		return fmt.Sprintf("shape %v, ONNX Runtime %v", got, want.Shape)
	}
	for i := range want.Data {
		g, w := float64(got.Data[i]), float64(want.Data[i])
		if d := g - w; d > tol*(1+abs(w)) || -d > tol*(1+abs(w)) {
			return fmt.Sprintf("element %d: Go %g, ONNX Runtime %g", i, g, w)
		}
	}
	return ""
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

// TestORTAgreesOnBuiltModels checks the executor against ONNX Runtime on
// models built and encoded here, covering what the node conformance data
// lacks (3D convolution, groups, dilations, asymmetric and automatic
// padding, 3D pooling) and that ONNX Runtime accepts Encode's output.
func TestORTAgreesOnBuiltModels(t *testing.T) {
	needORT(t)
	r := rand.New(rand.NewPCG(11, 12))
	conv := func(name string, x []int, w []int, attrs ...*onnx.Attribute) {
		b := NewBuilder(name, 13)
		in := b.Input("x", x...)
		y := b.Node("Conv", []string{in, b.Param("w", randTensor(r, 0.5, w...)), b.Param("b", randTensor(r, 0.5, w[0]))}, attrs...)
		b.Output(y, "y")
		m, err := b.Model()
		if err != nil {
			t.Fatal(err)
		}
		compareWithORT(t, name, m, map[string]*onnx.Tensor{"x": randTensor(r, 1, x...)}, 1e-4)
	}
	conv("conv3d pads strides", []int{2, 3, 9, 8, 7}, []int{5, 3, 3, 3, 3},
		onnx.IntsAttr("pads", 1, 0, 2, 0, 1, 1), onnx.IntsAttr("strides", 2, 1, 3))
	conv("conv3d dilations groups", []int{1, 4, 10, 9, 8}, []int{6, 2, 3, 2, 3},
		onnx.IntsAttr("dilations", 2, 3, 1), onnx.IntAttr("group", 2))
	conv("conv3d same_upper", []int{1, 2, 7, 8, 9}, []int{3, 2, 4, 3, 2},
		onnx.StringAttr("auto_pad", "SAME_UPPER"), onnx.IntsAttr("strides", 2, 2, 3))
	conv("conv3d same_lower", []int{1, 2, 7, 8, 9}, []int{3, 2, 4, 3, 2},
		onnx.StringAttr("auto_pad", "SAME_LOWER"), onnx.IntsAttr("strides", 2, 1, 2))
	conv("conv3d valid depthwise", []int{1, 3, 6, 6, 6}, []int{3, 1, 3, 3, 3},
		onnx.StringAttr("auto_pad", "VALID"), onnx.IntAttr("group", 3))
	conv("conv2d dilations", []int{2, 3, 11, 10}, []int{4, 3, 3, 3}, onnx.IntsAttr("dilations", 2, 3), onnx.IntsAttr("pads", 2, 1, 0, 3))
	conv("conv1d", []int{3, 2, 17}, []int{4, 2, 5}, onnx.IntsAttr("strides", 3), onnx.IntsAttr("pads", 2, 2))
	conv("conv3d pointwise", []int{2, 5, 4, 5, 6}, []int{7, 5, 1, 1, 1})
	// Rows and whole column blocks that read only padding (a case fuzzing found).
	conv("conv2d pads wider than input", []int{1, 2, 5, 4}, []int{3, 2, 3, 3}, onnx.IntsAttr("pads", 3, 48, 2, 40))
	conv("conv3d large block", []int{1, 2, 20, 20, 20}, []int{4, 2, 3, 3, 3}, onnx.IntsAttr("pads", 1, 1, 1, 1, 1, 1))

	pool := func(name, op string, x []int, attrs ...*onnx.Attribute) {
		b := NewBuilder(name, 13)
		b.Output(b.Node(op, []string{b.Input("x", x...)}, attrs...), "y")
		m, err := b.Model()
		if err != nil {
			t.Fatal(err)
		}
		compareWithORT(t, name, m, map[string]*onnx.Tensor{"x": randTensor(r, 1, x...)}, 1e-4)
	}
	pool("maxpool3d pads", "MaxPool", []int{1, 2, 7, 6, 5}, onnx.IntsAttr("kernel_shape", 3, 2, 3), onnx.IntsAttr("strides", 2, 2, 1), onnx.IntsAttr("pads", 1, 0, 1, 1, 1, 0))
	pool("maxpool3d dilations", "MaxPool", []int{1, 2, 9, 8, 7}, onnx.IntsAttr("kernel_shape", 2, 2, 2), onnx.IntsAttr("dilations", 2, 3, 1))
	pool("avgpool3d include pad", "AveragePool", []int{2, 2, 6, 7, 5}, onnx.IntsAttr("kernel_shape", 3, 3, 2), onnx.IntsAttr("pads", 1, 1, 1, 1, 1, 0), onnx.IntAttr("count_include_pad", 1))
	pool("avgpool3d exclude pad", "AveragePool", []int{1, 3, 6, 7, 5}, onnx.IntsAttr("kernel_shape", 2, 3, 2), onnx.IntsAttr("strides", 2, 2, 2), onnx.IntsAttr("pads", 0, 1, 1, 1, 1, 0))
	pool("globalavg3d", "GlobalAveragePool", []int{2, 3, 4, 5, 6})

	// The int64 shape arithmetic older PyTorch exports use for flattening:
	// Shape → Gather → Unsqueeze → Concat → Reshape, and a Cast round trip.
	{
		b := NewBuilder("shape-chain", 13)
		x := b.Input("x", 2, 3, 4, 5)
		shape := b.Node("Shape", []string{x})
		n0 := b.Node("Gather", []string{shape, b.Param("zero", onnx.FromInts([]int64{0}))}, onnx.IntAttr("axis", 0))
		n0 = b.Node("Unsqueeze", []string{n0, b.Param("axes0", onnx.FromInts([]int64{0}, 1))})
		target := b.Node("Concat", []string{n0, b.Param("minus1", onnx.FromInts([]int64{-1}, 1))}, onnx.IntAttr("axis", 0))
		target = b.Node("Cast", []string{b.Node("Cast", []string{target}, onnx.IntAttr("to", int64(onnx.Float)))}, onnx.IntAttr("to", int64(onnx.Int64)))
		y := b.Node("Reshape", []string{x, target})
		b.Output(b.Node("Softmax", []string{y}, onnx.IntAttr("axis", 1)), "y")
		m, err := b.Model()
		if err != nil {
			t.Fatal(err)
		}
		compareWithORT(t, "shape chain", m, map[string]*onnx.Tensor{"x": randTensor(r, 1, 2, 3, 4, 5)}, 1e-4)
	}

	m := smallCNN(t, r, 10)
	compareWithORT(t, "small 3D CNN", m, map[string]*onnx.Tensor{"input": randTensor(r, 1, 3, 1, 10, 10, 10)}, 1e-4)
}
